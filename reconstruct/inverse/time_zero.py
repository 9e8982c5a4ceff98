"""Time-zero terms: per-node offsets that shift every pick a node takes part in.

A node's clock may run early or late against the others (``clock``: the
receiver's offset adds, the transmitter's subtracts), or each node may add a
fixed delay in its electronics and cables (``delay``: both add). The columns
of :func:`time_zero_matrix` carry these unknowns beside the slowness in the
inverse problem; :func:`estimate_time_zero` and :func:`robust_time_zero` fit
them on their own to a residual (the pick checks and the start of each
iteration use them).
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse as sp
from scipy.sparse.linalg import lsqr

from reconstruct.inverse.robust import robust_scale, robust_weights

__all__ = ["TIME_ZERO_MODELS", "time_zero_matrix", "estimate_time_zero", "robust_time_zero"]

TIME_ZERO_MODELS = ("clock", "delay", "none")
#: Largest number of time-zero unknowns solved directly by estimate_time_zero.
_DIRECT_TIME_ZERO_LIMIT = 4000





def estimate_time_zero(C, weight, residual_ns) -> np.ndarray:
    """Time-zeros that best explain a residual on their own (weighted least squares).

    Parameters
    ----------
    C : scipy.sparse matrix, shape (n_picks, n_nodes)
        :func:`time_zero_matrix`.
    weight : ndarray, shape (n_picks,)
        ``1 / sigma``.
    residual_ns : ndarray, shape (n_picks,)
        Observed minus predicted travel times.
    """
    if C.nnz == 0:
        return np.zeros(C.shape[1])
    WC = (sp.diags(weight) @ C).tocsr()
    rhs = weight * residual_ns
    if C.shape[1] <= _DIRECT_TIME_ZERO_LIMIT:
        # small: solve the damped normal equations directly (exact, and far
        # quicker than hundreds of LSQR iterations); the damping, a 1e-9 part of
        # the mean diagonal, only fixes the gauge (the minimum-norm solution)
        normal = (WC.T @ WC).toarray()
        diagonal = np.diag(normal)
        damp = 1e-9 * (float(diagonal[diagonal > 0].mean()) if np.any(diagonal > 0) else 1.0)
        normal[np.diag_indices_from(normal)] += damp
        return scipy.linalg.solve(normal, WC.T @ rhs, assume_a="pos")
    return lsqr(WC, rhs, damp=1e-6, atol=1e-10, btol=1e-10, iter_lim=20 * C.shape[1] + 100)[0]


def time_zero_matrix(tx, rx, n_nodes: int, model: str = "clock") -> sp.csr_matrix:
    """Sparse ``(n_picks, n_nodes)`` matrix mapping node time-zeros to picks.

    ``+1`` at the receiver and ``-1`` (clock) or ``+1`` (delay) at the transmitter.
    """
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    n = tx.size
    if model == "none":
        return sp.csr_matrix((n, n_nodes))
    sign_tx = -1.0 if model == "clock" else 1.0
    rows = np.concatenate([np.arange(n), np.arange(n)])
    cols = np.concatenate([rx, tx])
    vals = np.concatenate([np.ones(n), np.full(n, sign_tx)])
    return sp.csr_matrix((vals, (rows, cols)), shape=(n, n_nodes))


def robust_time_zero(C, weight, residual_ns, *, loss: str = "huber", iterations: int = 10):
    """Time-zeros that best explain a residual, with IRLS against outliers.

    Wraps :func:`reconstruct.inverse.time_zero.estimate_time_zero` (weighted least
    squares over the time-zero matrix ``C``): the residual left after each fit
    is standardised by its robust scale and the rows reweighted.

    Returns
    -------
    tau : ndarray, shape (C.shape[1],)
    weights : ndarray, shape (n_rows,)
        Final robust weights (1 everywhere when ``loss="none"``).
    """
    weight = np.asarray(weight, dtype=float)
    residual_ns = np.asarray(residual_ns, dtype=float)
    omega = np.ones_like(residual_ns)
    tau = estimate_time_zero(C, weight, residual_ns)
    if loss == "none":
        return tau, omega
    for _ in range(iterations):
        u = weight * (residual_ns - C @ tau)
        new = robust_weights(u / robust_scale(u), loss)
        if np.max(np.abs(new - omega)) < 1e-3:
            break
        omega = new
        tau = estimate_time_zero(C, weight * np.sqrt(omega), residual_ns)
    return tau, omega
