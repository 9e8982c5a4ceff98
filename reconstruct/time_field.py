"""A first-arrival travel-time field sampled on a regular lattice.

The eikonal solver (:mod:`reconstruct.eikonal`) returns one; ray tracing
(:mod:`reconstruct.bent_rays`) reads it. Times are given at the lattice points
``origin_m + (i, j, k) * spacing_m`` for ``0 <= i < shape[0]`` and so on; the
lattice covers the whole model box, so every node inside the box can be
interpolated. Values between lattice points are trilinear.
"""

from __future__ import annotations

from dataclasses import dataclass

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
    """

    origin_m: tuple
    spacing_m: tuple
    times_ns: np.ndarray
    source_xyz_m: np.ndarray

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

    def interpolate(self, points_m) -> np.ndarray:
        """Trilinear travel time at points (clamped to the lattice), shape (n,)."""
        i0, f = self._cell_and_fraction(points_m)
        t = self.times_ns
        out = np.zeros(i0.shape[0])
        for dx in (0, 1):
            wx = f[:, 0] if dx else 1 - f[:, 0]
            for dy in (0, 1):
                wy = f[:, 1] if dy else 1 - f[:, 1]
                for dz in (0, 1):
                    wz = f[:, 2] if dz else 1 - f[:, 2]
                    ix = np.minimum(i0[:, 0] + dx, t.shape[0] - 1)
                    iy = np.minimum(i0[:, 1] + dy, t.shape[1] - 1)
                    iz = np.minimum(i0[:, 2] + dz, t.shape[2] - 1)
                    out += wx * wy * wz * t[ix, iy, iz]
        return out
