"""A first-arrival travel-time field sampled on a regular lattice.

The eikonal solver (:mod:`reconstruct.eikonal`) returns one; ray tracing
(:mod:`reconstruct.bent_rays`) reads it. Times are given at the lattice points
``origin_m + (i, j, k) * spacing_m`` for ``0 <= i < shape[0]`` and so on; the
lattice covers the whole model box, so every node inside the box can be
interpolated (unless the solve was limited to some receivers: then only
around them, see ``final_until_ns``).

Between lattice points the *apparent slowness* ``q = T / |x - x_s|`` is
interpolated trilinearly and multiplied back by the distance to the source.
Near a point source ``T`` is a cone, whose trilinear interpolation overestimates
it by up to ``h^2 / (4 r^2)`` of the time (1 % at five lattice steps); ``q`` is
constant in a homogeneous medium and smooth elsewhere, the same idea as the
factored eikonal (Fomel, Luo and Zhao, 2009, J. Comput. Phys. 228, 6440-6455).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

__all__ = ["TimeField"]


@dataclass(frozen=True, eq=False)
class TimeField:
    """Travel times in ns from one source over a lattice.

    Attributes
    ----------
    origin_m : tuple of 3 float
        Position of ``times_ns[0, 0, 0]``, metres.
    spacing_m : tuple of 3 float
        Lattice spacing along x, y, z, metres.
    times_ns : ndarray, shape (px, py, pz)
        First-arrival times in ns, indexed [i, j, k] like the grid.
    source_xyz_m : ndarray, shape (3,)
        The source position, metres.
    final_until_ns : float
        Times up to this value are final; later lattice points were not solved
        (inf) because only some receivers were wanted. inf: the whole lattice.
    """

    origin_m: tuple
    spacing_m: tuple
    times_ns: np.ndarray
    source_xyz_m: np.ndarray
    final_until_ns: float = float("inf")

    @property
    def shape(self):
        return self.times_ns.shape

    def _cell_and_fraction(self, points_m):
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        u = (p - np.asarray(self.origin_m)) / np.asarray(self.spacing_m)
        upper = np.asarray(self.times_ns.shape) - 1
        u = np.clip(u, 0.0, upper)
        i0 = np.minimum(np.floor(u).astype(np.int64), np.maximum(upper - 1, 0))
        return i0, u - i0

    @cached_property
    def apparent_slowness(self) -> np.ndarray:
        """``T / |x - x_s|`` at the lattice points, ns/m (at the source: its neighbours' mean)."""
        axes = [self.origin_m[a] + np.arange(self.times_ns.shape[a]) * self.spacing_m[a] for a in range(3)]
        r = np.sqrt((axes[0][:, None, None] - self.source_xyz_m[0]) ** 2
                    + (axes[1][None, :, None] - self.source_xyz_m[1]) ** 2
                    + (axes[2][None, None, :] - self.source_xyz_m[2]) ** 2)
        tiny = 1e-9 * float(min(self.spacing_m))
        q = np.where(r > tiny, self.times_ns / np.maximum(r, tiny), np.nan)
        for index in zip(*np.nonzero(np.isnan(q))):
            window = tuple(slice(max(i - 1, 0), i + 2) for i in index)
            q[index] = np.nanmean(q[window])
        return q

    def interpolate(self, points_m) -> np.ndarray:
        """Travel time at points (clamped to the lattice), shape (n,), ns."""
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        i0, f = self._cell_and_fraction(p)
        q = self.apparent_slowness
        out = np.zeros(i0.shape[0])
        for dx in (0, 1):
            wx = f[:, 0] if dx else 1 - f[:, 0]
            for dy in (0, 1):
                wy = f[:, 1] if dy else 1 - f[:, 1]
                for dz in (0, 1):
                    wz = f[:, 2] if dz else 1 - f[:, 2]
                    ix = np.minimum(i0[:, 0] + dx, q.shape[0] - 1)
                    iy = np.minimum(i0[:, 1] + dy, q.shape[1] - 1)
                    iz = np.minimum(i0[:, 2] + dz, q.shape[2] - 1)
                    out += wx * wy * wz * q[ix, iy, iz]
        lo = np.asarray(self.origin_m)
        hi = lo + (np.asarray(self.times_ns.shape) - 1) * np.asarray(self.spacing_m)
        clamped = np.clip(p, lo, hi)
        return out * np.linalg.norm(clamped - np.asarray(self.source_xyz_m), axis=1)
