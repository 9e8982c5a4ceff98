"""Time-zero terms: per-node offsets that shift every pick a node takes part in.

A node's clock may run early or late against the others (``clock``: the
receiver's offset adds, the transmitter's subtracts), or each node may add a
fixed delay in its electronics and cables (``delay``: both add). A clock may
also drift during the survey (``clock_drift``): its offset is then linear in
the shot time, ``tau_k(t) = a_k + b_k (t - t_mid)``, with ``a_k`` the offset
at the middle of the survey (ns) and ``b_k`` the drift (ns per hour); the
picks then need their shot times. A crystal oscillator's frequency error
makes a clock run off linearly over hours (common practice, no published
source). The columns
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

__all__ = ["TIME_ZERO_MODELS", "time_zero_matrix", "shot_hours_from_middle", "estimate_time_zero",
           "robust_time_zero", "time_zero_covariance"]

TIME_ZERO_MODELS = ("clock", "delay", "clock_drift", "none")
#: Seconds per hour: drifts are in ns per hour.
SECONDS_PER_HOUR = 3600.0
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


def shot_hours_from_middle(shot_time_s) -> np.ndarray:
    """Shot times in hours from the middle of their range (the time the drift model's offsets refer to)."""
    t = np.asarray(shot_time_s, dtype=float)
    middle = 0.5 * (float(t.min()) + float(t.max())) if t.size else 0.0
    return (t - middle) / SECONDS_PER_HOUR


def time_zero_matrix(tx, rx, n_nodes: int, model: str = "clock", shot_time_s=None) -> sp.csr_matrix:
    """Sparse matrix mapping node time-zero terms to picks.

    ``(n_picks, n_nodes)``: ``+1`` at the receiver and ``-1`` (clock) or
    ``+1`` (delay) at the transmitter. For ``clock_drift``, ``(n_picks,
    2 n_nodes)``: the clock's offset columns first, then the drift columns,
    ``+t`` at the receiver and ``-t`` at the transmitter, with ``t`` the shot
    time in hours from the middle of the survey (:func:`shot_hours_from_middle`;
    ``shot_time_s`` in seconds, needed for this model).
    """
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    n = tx.size
    if model == "none":
        return sp.csr_matrix((n, n_nodes))
    sign_tx = 1.0 if model == "delay" else -1.0
    rows = np.concatenate([np.arange(n), np.arange(n)])
    cols = np.concatenate([rx, tx])
    vals = np.concatenate([np.ones(n), np.full(n, sign_tx)])
    offsets = sp.csr_matrix((vals, (rows, cols)), shape=(n, n_nodes))
    if model != "clock_drift":
        return offsets
    if shot_time_s is None or np.asarray(shot_time_s).shape != (n,):
        raise ValueError("the clock_drift time-zero model needs a shot time for every pick (shot_time_s)")
    hours = shot_hours_from_middle(shot_time_s)
    return sp.hstack([offsets, sp.diags(hours) @ offsets], format="csr")


def time_zero_covariance(C, weight) -> np.ndarray:
    """Covariance of time-zero terms fitted by :func:`estimate_time_zero` (ns^2, ns^2/h ...).

    The pseudo-inverse of ``C^T W^2 C``: the gauge (the sum of every clock,
    which no pick can see) gets no variance, so the standard deviations are
    those of each term relative to the mean of its kind. For up to
    ``_DIRECT_TIME_ZERO_LIMIT`` columns.

    References
    ----------
    Aster, R. C., Borchers, B. and Thurber, C. H. (2013), Parameter
    Estimation and Inverse Problems, 2nd ed., Academic Press, section 2.2
    (covariance of least-squares estimates, cited from memory).
    """
    WC = (sp.diags(np.asarray(weight, dtype=float)) @ C).tocsr()
    return np.linalg.pinv((WC.T @ WC).toarray(), rcond=1e-10, hermitian=True)


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
