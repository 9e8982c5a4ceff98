"""Regularisation operators over the ground cells of a grid."""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from reconstruct.model.grid import Grid

__all__ = ["first_difference_operator", "unknown_index_map"]


def unknown_index_map(ground: np.ndarray) -> np.ndarray:
    """Map from C-order flat cell index to unknown number (-1 for air cells).

    Parameters
    ----------
    ground : ndarray of bool, shape (nx, ny, nz)
    """
    flat = np.asarray(ground, dtype=bool).ravel()
    index = np.full(flat.size, -1, dtype=np.int64)
    index[flat] = np.arange(int(flat.sum()))
    return index


def first_difference_operator(
    grid: Grid,
    ground: np.ndarray,
    *,
    horizontal_weight: float = 1.0,
    vertical_weight: float = 1.0,
) -> sp.csr_matrix:
    """First differences between neighbouring ground cells.

    One row per pair of face-sharing ground cells along x, y or z; the row
    holds ``-w h_ref / h`` and ``+w h_ref / h`` on the two cells, where ``h`` is
    the cell size along that axis, ``h_ref`` the mean cell size and ``w`` the
    horizontal weight (x and y) or the vertical weight (z). Pairs that touch
    an air cell are left out: air is fixed, not smoothed into the rock.

    Parameters
    ----------
    grid : Grid
    ground : ndarray of bool, shape grid.shape
    horizontal_weight, vertical_weight : float
        Relative weights (>= 0) of roughness along x/y and along z. A larger
        horizontal weight favours layered (flat-lying) models.

    Returns
    -------
    scipy.sparse.csr_matrix, shape (n_pairs, n_ground_cells)
    """
    ground = np.asarray(ground, dtype=bool)
    if ground.shape != grid.shape:
        raise ValueError(f"ground has shape {ground.shape}, expected {grid.shape}")
    # written so that NaN fails too (NaN < 0 is False and would fill the operator with NaN)
    for name, value in (("horizontal_weight", horizontal_weight), ("vertical_weight", vertical_weight)):
        if not (np.isfinite(value) and value >= 0):
            raise ValueError(f"{name} must be finite and >= 0 (got {value!r})")
    index = unknown_index_map(ground).reshape(grid.shape)
    n_unknown = int(ground.sum())
    h_ref = float(np.mean(grid.cell_m))
    rows, cols, vals = [], [], []
    n_rows = 0
    weights = (horizontal_weight, horizontal_weight, vertical_weight)
    for axis in range(3):
        if grid.shape[axis] < 2 or weights[axis] == 0:
            continue
        lo = [slice(None)] * 3
        hi = [slice(None)] * 3
        lo[axis] = slice(0, -1)
        hi[axis] = slice(1, None)
        a = index[tuple(lo)].ravel()
        b = index[tuple(hi)].ravel()
        both = (a >= 0) & (b >= 0)
        a, b = a[both], b[both]
        k = a.size
        w = weights[axis] * h_ref / grid.cell_m[axis]
        r = n_rows + np.arange(k)
        rows += [r, r]
        cols += [a, b]
        vals += [np.full(k, -w), np.full(k, w)]
        n_rows += k
    if n_rows == 0:
        return sp.csr_matrix((0, n_unknown))
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
        shape=(n_rows, n_unknown),
    )
