"""Regularisation operators over the ground cells of a grid, and the weights
of the focusing (compact) regularisation.

Smooth regularisation penalises the first differences of the slowness
change (Tikhonov). The compact regularisation reweights the same rows by
iteratively reweighted least squares so that the penalty tends to the
focusing stabilisers of Portniaguine and Zhdanov (1999): the *minimum
gradient support* (the number of cells across which the model changes)
on the difference rows, and the *minimum support* (the volume of the
anomaly; the compact inversion of Last and Kubik, 1983) on the damping rows.
A row ``r`` with value ``v_r`` in the previous model gets the weight
``beta / sqrt(v_r^2 + beta^2)``, so that the weighted square
``beta^2 v^2 / (v^2 + beta^2)`` tends to ``beta^2`` for every nonzero ``v`` as
``beta -> 0``, and to ``v^2`` (the smooth penalty) where ``|v| << beta``.

References
----------
.. [1] Portniaguine, O. and Zhdanov, M. S. (1999), Focusing geophysical
   inversion images, Geophysics 64(3), 874-887, doi:10.1190/1.1444596.
.. [2] Last, B. J. and Kubik, K. (1983), Compact gravity inversion,
   Geophysics 48(6), 713-721, doi:10.1190/1.1441501.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from reconstruct.model.grid import Grid

__all__ = ["first_difference_operator", "unknown_index_map", "minimum_support_weights",
           "minimum_gradient_support_weights", "difference_row_cells"]


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


def minimum_support_weights(anomaly: np.ndarray, beta: float) -> np.ndarray:
    """IRLS weights of the damping rows for the minimum support (compact) stabiliser.

    Parameters
    ----------
    anomaly : ndarray, shape (n_ground,)
        Slowness change of each ground cell from the reference model, ns/m, in
        the previous model.
    beta : float
        Focusing parameter, ns/m (> 0).

    Returns
    -------
    ndarray, shape (n_ground,)
        ``beta / sqrt(anomaly^2 + beta^2)``, between 0 and 1. The weighted
        penalty ``sum (w_j x_j)^2`` at ``x`` equal to the previous model is
        ``beta^2 sum x_j^2 / (x_j^2 + beta^2)``, which tends to ``beta^2`` times the
        number of cells with a nonzero anomaly as ``beta -> 0``.

    References
    ----------
    .. [1] Last, B. J. and Kubik, K. (1983), Compact gravity inversion,
       Geophysics 48(6), 713-721.
    .. [2] Portniaguine, O. and Zhdanov, M. S. (1999), Focusing geophysical
       inversion images, Geophysics 64(3), 874-887 (the minimum support functional).
    """
    beta = _checked_beta(beta)
    x = np.asarray(anomaly, dtype=float)
    return beta / np.sqrt(x * x + beta * beta)


def difference_row_cells(operator: sp.spmatrix) -> np.ndarray:
    """The cell (unknown number) each row of a first-difference operator starts
    from: the column of its negative entry, so that the rows of one cell are
    its forward differences along x, y and z."""
    coo = sp.coo_matrix(operator)
    negative = coo.data < 0
    cells = np.full(operator.shape[0], -1, dtype=np.int64)
    cells[coo.row[negative]] = coo.col[negative]
    if np.any(cells < 0):
        raise ValueError("every row of a first-difference operator needs one negative entry")
    return cells


def minimum_gradient_support_weights(operator: sp.spmatrix, anomaly: np.ndarray, beta: float,
                                     row_cells: np.ndarray | None = None) -> np.ndarray:
    """IRLS weights of the difference rows for the minimum gradient support stabiliser.

    The gradient of a cell is made of its forward differences (the rows of
    ``operator`` that start from it, :func:`difference_row_cells`); each of
    those rows gets the weight ``beta / sqrt(|grad|^2 + beta^2)`` of its cell.

    Parameters
    ----------
    operator : scipy.sparse matrix, shape (n_rows, n_ground)
        :func:`first_difference_operator`.
    anomaly : ndarray, shape (n_ground,)
        Slowness change from the reference in the previous model, ns/m.
    beta : float
        Focusing parameter, ns/m (> 0), on the scale of the differences (the
        rows of ``operator`` are slowness differences between neighbours).
    row_cells : ndarray of int, optional
        :func:`difference_row_cells` of ``operator`` (computed when not given).

    Returns
    -------
    ndarray, shape (n_rows,)
        Weights between 0 and 1. The weighted penalty ``sum (w_r (D x)_r)^2`` at
        the previous model equals ``beta^2 sum_cells |grad|^2 / (|grad|^2 + beta^2)``,
        which tends to ``beta^2`` times the number of cells with a nonzero
        gradient as ``beta -> 0``: the minimum gradient support functional.

    References
    ----------
    .. [1] Portniaguine, O. and Zhdanov, M. S. (1999), Focusing geophysical
       inversion images, Geophysics 64(3), 874-887.
    """
    beta = _checked_beta(beta)
    if row_cells is None:
        row_cells = difference_row_cells(operator)
    x = np.asarray(anomaly, dtype=float)
    differences = sp.csr_matrix(operator) @ x
    gradient_squared = np.bincount(row_cells, weights=differences**2, minlength=x.size)
    return beta / np.sqrt(gradient_squared[row_cells] + beta * beta)


def _checked_beta(beta) -> float:
    beta = float(beta)
    if not (np.isfinite(beta) and beta > 0):
        raise ValueError(f"the focusing parameter beta must be finite and > 0 (got {beta!r})")
    return beta
