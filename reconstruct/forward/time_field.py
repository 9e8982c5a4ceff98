"""A first-arrival travel-time field sampled on a regular lattice.

The eikonal solver (:mod:`reconstruct.forward.eikonal`) returns one; ray tracing
(:mod:`reconstruct.forward.ray_tracing`) reads it. Times are given at the lattice points
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
    family_times_ns : ndarray, shape (n_families, px, py, pz), optional
        The times of each wave family (inf where a family was not solved);
        ``times_ns`` is their minimum. Where two fronts cross at a kink (the
        refracted air wave overtaking the direct wave), interpolating the
        minimum runs early (the chord under a concave kink: up to 1.2 ns at 1 m
        spacing); each family is smooth, so they are interpolated one by one
        and the earliest is taken.
    """

    origin_m: tuple
    spacing_m: tuple
    times_ns: np.ndarray
    source_xyz_m: np.ndarray
    final_until_ns: float = float("inf")
    family_times_ns: np.ndarray | None = None

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
    def _distance_to_source(self):
        """Distance of every lattice point to the source, metres (shared by the
        first-arrival and the family interpolation)."""
        axes = [self.origin_m[a] + np.arange(self.times_ns.shape[a]) * self.spacing_m[a] for a in range(3)]
        return np.sqrt((axes[0][:, None, None] - self.source_xyz_m[0]) ** 2
                       + (axes[1][None, :, None] - self.source_xyz_m[1]) ** 2
                       + (axes[2][None, None, :] - self.source_xyz_m[2]) ** 2)

    def _slowness_of(self, times, r):
        tiny = 1e-9 * float(min(self.spacing_m))
        with np.errstate(invalid="ignore"):
            q = np.where(r > tiny, times / np.maximum(r, tiny), np.nan)
        for index in zip(*np.nonzero(np.isnan(q) & (r <= tiny))):
            window = tuple(slice(max(i - 1, 0), i + 2) for i in index)
            near = q[window]
            near = near[np.isfinite(near)]
            q[index] = near.mean() if near.size else np.inf
        return q

    @cached_property
    def apparent_slowness(self) -> np.ndarray:
        """``T / |x - x_s|`` at the lattice points, ns/m (at the source: its neighbours' mean)."""
        return self._slowness_of(self.times_ns, self._distance_to_source)

    @cached_property
    def _family_slowness(self):
        if self.family_times_ns is None:
            return None
        r = self._distance_to_source
        # where a family was not solved, its first arrival stands in for it: a
        # surface node's cell has the air wave above and, below, only the rock's
        # own family, which continues the same front
        return [self._slowness_of(np.where(np.isfinite(times), times, self.times_ns), r)
                for times in self.family_times_ns]

    def _trilinear(self, q, i0, f):
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
                    with np.errstate(invalid="ignore"):
                        out += np.where(wx * wy * wz > 0, wx * wy * wz * q[ix, iy, iz], 0.0)
        return out

    def interpolate(self, points_m) -> np.ndarray:
        """Travel time at points (clamped to the lattice), shape (n,), ns."""
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        i0, f = self._cell_and_fraction(p)
        out = np.full(i0.shape[0], np.inf)
        for q in self._family_slowness or ():
            out = np.minimum(out, self._trilinear(q, i0, f))
        missing = ~np.isfinite(out)
        if missing.any():  # no families, or none solved around these points
            out[missing] = self._trilinear(self.apparent_slowness, i0[missing], f[missing])
        lo = np.asarray(self.origin_m)
        hi = lo + (np.asarray(self.times_ns.shape) - 1) * np.asarray(self.spacing_m)
        clamped = np.clip(p, lo, hi)
        return out * np.linalg.norm(clamped - np.asarray(self.source_xyz_m), axis=1)
