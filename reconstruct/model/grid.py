"""The voxel grid: geometry, cell centres and the ground mask.

Axis order, fixed for the whole project
---------------------------------------
Arrays over cells have shape ``(nx, ny, nz)`` and are indexed ``[ix, iy, iz]``:
x east, y north, z elevation (up positive), all in metres. The flat cell index
used by operators (matrix columns) is the C-order index
``(ix * ny + iy) * nz + iz`` (:func:`numpy.ravel_multi_index`). Writers for VTK,
whose cell order is x fastest, convert with ``ravel(order="F")`` at the edge.

A cell is *ground* when its centre lies below the ground surface at the
centre of its column; otherwise it is *air* with the velocity of light, fixed
and not an unknown.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from reconstruct.errors import InputError

__all__ = [
    "Grid",
    "ground_mask",
    "ground_top_m",
    "check_grid_fits_memory",
    "BYTES_PER_CELL_ESTIMATE",
]

#: Rough peak memory of an inversion per grid cell, in bytes: the model and
#: LSQR work vectors (about ten float64 vectors), the smoothing operator (three
#: difference rows of two entries each), masks and output arrays. Measured
#: with the benchmark in ``benchmarks/`` and rounded up.
BYTES_PER_CELL_ESTIMATE = 400


@dataclass(frozen=True)
class Grid:
    """A regular voxel grid.

    Parameters
    ----------
    origin_m : tuple of 3 float
        Corner of the grid with the smallest x, y and z, in metres.
    cell_m : tuple of 3 float
        Cell size along x, y and z, in metres.
    shape : tuple of 3 int
        Number of cells along x, y and z.
    """

    origin_m: tuple[float, float, float]
    cell_m: tuple[float, float, float]
    shape: tuple[int, int, int]

    def __post_init__(self):
        origin = tuple(float(v) for v in self.origin_m)
        cell = tuple(float(v) for v in self.cell_m)
        shape = tuple(int(v) for v in self.shape)
        if len(origin) != 3 or len(cell) != 3 or len(shape) != 3:
            raise ValueError("origin_m, cell_m and shape need three values each")
        if not all(np.isfinite(origin)):
            raise ValueError(f"origin_m must be finite (got {origin})")
        if not all(c > 0 and np.isfinite(c) for c in cell):
            raise ValueError(f"cell_m must be > 0 (got {cell})")
        if not all(n >= 1 for n in shape):
            raise ValueError(f"shape must be >= 1 along every axis (got {shape})")
        object.__setattr__(self, "origin_m", origin)
        object.__setattr__(self, "cell_m", cell)
        object.__setattr__(self, "shape", shape)

    @classmethod
    def from_box(cls, origin_m, size_m, cell_m) -> "Grid":
        """Grid covering a box; the cell count is ``ceil(size / cell)``.

        The box is kept exactly when size is a multiple of the cell size;
        otherwise the grid extends to the next whole cell.
        """
        cell = np.broadcast_to(np.asarray(cell_m, dtype=float), (3,))
        size = np.asarray(size_m, dtype=float)
        shape = np.maximum(np.ceil(size / cell - 1e-9), 1).astype(int)
        return cls(tuple(origin_m), tuple(cell), tuple(shape))

    @property
    def n_cells(self) -> int:
        # math.prod on Python ints: np.prod wraps around in int64 for absurd
        # grids (e.g. a 5 km box with mm cells), which hid them from the memory check
        return math.prod(self.shape)

    @property
    def size_m(self) -> np.ndarray:
        return np.asarray(self.shape) * np.asarray(self.cell_m)

    @property
    def end_m(self) -> np.ndarray:
        """Corner of the grid with the largest x, y and z, in metres."""
        return np.asarray(self.origin_m) + self.size_m

    def edges_m(self, axis: int) -> np.ndarray:
        """Cell boundary coordinates along ``axis`` (0 x, 1 y, 2 z), length n+1."""
        return self.origin_m[axis] + self.cell_m[axis] * np.arange(self.shape[axis] + 1)

    def centres_m(self, axis: int) -> np.ndarray:
        """Cell centre coordinates along ``axis``, length n."""
        return self.origin_m[axis] + self.cell_m[axis] * (np.arange(self.shape[axis]) + 0.5)

    def cell_centres_m(self) -> np.ndarray:
        """All cell centres, shape ``(nx, ny, nz, 3)``."""
        xs, ys, zs = (self.centres_m(a) for a in range(3))
        return np.stack(np.meshgrid(xs, ys, zs, indexing="ij"), axis=-1)

    def contains(self, points_m, tol_m: float = 1e-9) -> np.ndarray:
        """True for points inside the grid box (boundary included)."""
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        lo = np.asarray(self.origin_m) - tol_m
        hi = self.end_m + tol_m
        return np.all((p >= lo) & (p <= hi), axis=1)

    def cell_index(self, points_m) -> np.ndarray:
        """Integer ``(ix, iy, iz)`` of the cell holding each point, shape (n, 3).

        Points on the far boundary belong to the last cell. Points outside the
        grid are clipped to the nearest cell; check :meth:`contains` first.
        """
        p = np.atleast_2d(np.asarray(points_m, dtype=float))
        ijk = np.floor((p - np.asarray(self.origin_m)) / np.asarray(self.cell_m)).astype(int)
        return np.clip(ijk, 0, np.asarray(self.shape) - 1)

    def flat_index(self, ijk) -> np.ndarray:
        """C-order flat index of integer cell coordinates, shape (n, 3) -> (n,)."""
        ijk = np.atleast_2d(np.asarray(ijk))
        return np.ravel_multi_index((ijk[:, 0], ijk[:, 1], ijk[:, 2]), self.shape)


def ground_mask(grid: Grid, ground_elevation_m) -> np.ndarray:
    """Boolean ``(nx, ny, nz)`` array, True where the cell centre is below ground.

    Parameters
    ----------
    grid : Grid
    ground_elevation_m : callable
        ``f(x_m, y_m) -> z_m`` over arrays of equal shape, vectorised.
    """
    xs, ys = grid.centres_m(0), grid.centres_m(1)
    x2, y2 = np.meshgrid(xs, ys, indexing="ij")
    surface = np.broadcast_to(np.asarray(ground_elevation_m(x2, y2), dtype=float), x2.shape)
    zs = grid.centres_m(2)
    return zs[None, None, :] < surface[:, :, None]


def ground_top_m(grid: Grid, ground: np.ndarray) -> np.ndarray:
    """Elevation of the top face of the highest ground cell of each column.

    Returns an ``(nx, ny)`` array in metres; NaN where a column has no ground.
    This is the ground surface as the voxel model sees it.
    """
    ground = np.asarray(ground, dtype=bool)
    any_ground = ground.any(axis=2)
    nz = grid.shape[2]
    # index of the highest ground cell: last True along z
    top_index = nz - 1 - np.argmax(ground[:, :, ::-1], axis=2)
    top = grid.origin_m[2] + grid.cell_m[2] * (top_index + 1)
    return np.where(any_ground, top, np.nan)


def _physical_memory_bytes() -> int | None:
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return None


def check_grid_fits_memory(
    grid: Grid,
    *,
    memory_limit_bytes: int | None = None,
    source: str = "site",
    key: str = "model.cell_m",
) -> None:
    """Refuse a grid whose inversion would not fit in memory.

    The estimate is ``BYTES_PER_CELL_ESTIMATE`` bytes per cell; the limit is
    half of the physical memory unless given.

    Raises
    ------
    InputError
        Naming the key to change and a cell size that would fit.
    """
    if memory_limit_bytes is None:
        physical = _physical_memory_bytes()
        memory_limit_bytes = physical // 2 if physical else 8 * 2**30
    need = grid.n_cells * BYTES_PER_CELL_ESTIMATE
    if need > memory_limit_bytes:
        factor = (need / memory_limit_bytes) ** (1 / 3)
        suggest = max(grid.cell_m) * factor * 1.05
        raise InputError(
            f"{source}: {key}: the grid of {grid.shape[0]} x {grid.shape[1]} x "
            f"{grid.shape[2]} = {grid.n_cells:,} cells needs about "
            f"{need / 2**30:.1f} GiB, more than the {memory_limit_bytes / 2**30:.1f} GiB "
            f"available; use cells of at least {suggest:.2f} m or a smaller model box"
        )
