"""A coarser copy of the inversion grid, for choosing lambda cheaply.

Path lengths on a grid whose cells are blocks of ``f x f x f`` fine cells are
exact sums of the fine path lengths, so the coarse operator is ``G P`` with
``P`` the 0/1 aggregation matrix: no ray is traced twice. The coarse solution,
copied back to every fine cell of its block (``P x``), starts the fine solve
with its smooth part already in place, which is what LSQR is slowest to find.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.model.grid import Grid
from reconstruct.inverse.regularization import first_difference_operator, unknown_index_map

__all__ = ["CoarseLevel", "coarse_level", "choose_coarsening_factor"]


@dataclass(frozen=True)
class CoarseLevel:
    """Coarse grid data for :func:`reconstruct.inverse.solver.invert_travel_times`.

    Attributes
    ----------
    grid : Grid
        The coarse grid (same origin, cells ``factor`` times larger; it may
        reach past the fine grid's far faces).
    ground : ndarray of bool
        Coarse cells holding at least one fine ground cell.
    prolongation : scipy.sparse.csr_matrix, shape (n_fine_ground, n_coarse_ground)
        1 where a fine ground cell lies in a coarse ground cell.
    smoothing_operator : scipy.sparse.csr_matrix
        First differences over coarse ground cells.
    factor : int
    """

    grid: Grid
    ground: np.ndarray
    prolongation: sp.csr_matrix
    smoothing_operator: sp.csr_matrix
    factor: int


def choose_coarsening_factor(n_ground_cells: int, *, target_cells: int = 40_000, largest: int = 4) -> int:
    """Smallest factor ``f`` that brings the unknowns to ``target_cells`` or
    fewer (1 when the grid is already small), at most ``largest``."""
    f = 1
    while n_ground_cells / f**3 > target_cells and f < largest:
        f += 1
    return f


def coarse_level(
    grid: Grid,
    ground: np.ndarray,
    factor: int,
    *,
    horizontal_weight: float = 1.0,
    vertical_weight: float = 1.0,
) -> CoarseLevel:
    """Build the coarse level of a grid by blocks of ``factor`` cells per axis."""
    if factor < 2:
        raise ValueError(f"factor must be >= 2 (got {factor})")
    ground = np.asarray(ground, dtype=bool)
    coarse_shape = tuple(int(np.ceil(n / factor)) for n in grid.shape)
    coarse = Grid(grid.origin_m, tuple(c * factor for c in grid.cell_m), coarse_shape)
    ii, jj, kk = np.nonzero(ground)  # C order: the order of the fine unknowns
    ci, cj, ck = ii // factor, jj // factor, kk // factor
    coarse_ground = np.zeros(coarse_shape, dtype=bool)
    coarse_ground[ci, cj, ck] = True
    index = unknown_index_map(coarse_ground).reshape(coarse_shape)
    cols = index[ci, cj, ck]
    n_fine = ii.size
    P = sp.csr_matrix((np.ones(n_fine), (np.arange(n_fine), cols)), shape=(n_fine, int(coarse_ground.sum())))
    D = first_difference_operator(
        coarse, coarse_ground, horizontal_weight=horizontal_weight, vertical_weight=vertical_weight
    )
    return CoarseLevel(grid=coarse, ground=coarse_ground, prolongation=P, smoothing_operator=D, factor=factor)
