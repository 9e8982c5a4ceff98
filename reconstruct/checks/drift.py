"""Clock drift per node, estimated from the picks before any inversion.

Each node's clock is taken to run off linearly during the survey:
``tau_k(t) = a_k + b_k (t - t_mid)`` (the ``clock_drift`` time-zero model of
:mod:`reconstruct.inverse.time_zero`). With each pick's shot time, the offsets
``a_k`` and drifts ``b_k`` (ns per hour) are fitted by robust weighted least
squares (Huber) to the pick times less a reference travel time (the pick
checks' reference: straight ray at the fitted velocity, or the air wave). The
standard deviation of each drift comes from the covariance of the fit, scaled
by the reduced chi-square when the residual scatter exceeds the sigmas (the
reference model's own error then counts as noise); a drift larger than three
standard deviations is reported as measurable.

References
----------
.. [1] Aster, R. C., Borchers, B. and Thurber, C. H. (2013), Parameter
   Estimation and Inverse Problems, 2nd ed., Academic Press, sections 2.2
   (covariance of the least-squares estimate) and 2.3 (scaling by the
   reduced chi-square when the data errors are not known); cited from memory.
.. [2] Huber, P. J. (1964), Robust estimation of a location parameter, Annals
   of Mathematical Statistics 35(1), 73-101.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from reconstruct.inverse.time_zero import (
    SECONDS_PER_HOUR,
    robust_time_zero,
    time_zero_covariance,
    time_zero_matrix,
)

__all__ = ["ClockDrift", "estimate_clock_drift", "clock_drift_record", "MEASURABLE_SIGMAS"]

#: A drift is reported as measurable when it exceeds this many standard deviations.
MEASURABLE_SIGMAS = 3.0


@dataclass(frozen=True)
class ClockDrift:
    """Offsets and drifts of the node clocks with their standard deviations.

    Arrays over nodes (NaN for nodes without a pick); offsets in ns at the
    middle of the survey, drifts in ns per hour, both relative to their mean
    over the nodes with picks (the gauge no pick can see).
    """

    offset_ns: np.ndarray
    offset_sd_ns: np.ndarray
    drift_ns_per_h: np.ndarray
    drift_sd_ns_per_h: np.ndarray
    reduced_chi2: float
    survey_hours: float

    @property
    def measurable(self) -> np.ndarray:
        """True where the drift exceeds :data:`MEASURABLE_SIGMAS` standard deviations."""
        with np.errstate(invalid="ignore"):
            return np.abs(self.drift_ns_per_h) > MEASURABLE_SIGMAS * self.drift_sd_ns_per_h


def estimate_clock_drift(tx, rx, residual_ns, sigma_ns, shot_time_s, n_nodes: int) -> ClockDrift:
    """Fit clock offsets and drifts to pick residuals against a reference model.

    Parameters
    ----------
    tx, rx : ndarray of int, shape (m,)
    residual_ns : ndarray, shape (m,)
        Pick time less the reference travel time (no time-zero removed).
    sigma_ns : ndarray, shape (m,)
    shot_time_s : ndarray, shape (m,)
        When each pick's shot was fired, seconds.
    n_nodes : int

    Returns
    -------
    ClockDrift
    """
    tx, rx = np.asarray(tx, dtype=np.int64), np.asarray(rx, dtype=np.int64)
    residual = np.asarray(residual_ns, dtype=float)
    weight = 1.0 / np.asarray(sigma_ns, dtype=float)
    shot = np.asarray(shot_time_s, dtype=float)
    C = time_zero_matrix(tx, rx, n_nodes, "clock_drift", shot)
    tau, omega = robust_time_zero(C, weight, residual, loss="huber")
    w_final = weight * np.sqrt(omega)
    cov = time_zero_covariance(C, w_final)
    used = np.zeros(n_nodes, dtype=bool)
    used[tx] = True
    used[rx] = True
    n_free = 2 * (int(used.sum()) - 1)  # the gauge takes one offset and one drift
    dof = max(residual.size - n_free, 1)
    reduced = float(np.sum((w_final * (residual - C @ tau)) ** 2) / dof)
    sd = np.sqrt(np.clip(np.diag(cov), 0.0, None) * max(reduced, 1.0))
    out = {}
    for name, block in (("offset", slice(0, n_nodes)), ("drift", slice(n_nodes, 2 * n_nodes))):
        value, spread = tau[block].copy(), sd[block].copy()
        value[used] -= value[used].mean()
        value[~used], spread[~used] = np.nan, np.nan
        out[name] = (value, spread)
    return ClockDrift(offset_ns=out["offset"][0], offset_sd_ns=out["offset"][1], drift_ns_per_h=out["drift"][0],
                      drift_sd_ns_per_h=out["drift"][1], reduced_chi2=reduced,
                      survey_hours=float(np.ptp(shot)) / SECONDS_PER_HOUR if shot.size else 0.0)


def clock_drift_record(drift: ClockDrift, node_ids) -> dict:
    """The drift estimate for a summary JSON: per node, the measurable ones, the largest."""
    measurable = drift.measurable
    known = np.isfinite(drift.drift_ns_per_h)
    return {
        "model": "tau_k(t) = offset_k + drift_k (t - t_mid); offsets and drifts relative to their means",
        "survey_hours": drift.survey_hours,
        "reduced_chi2": drift.reduced_chi2,
        "measurable_above_sigmas": MEASURABLE_SIGMAS,
        "largest_abs_drift_ns_per_h": float(np.nanmax(np.abs(drift.drift_ns_per_h))) if known.any() else None,
        "drifting_nodes": [node_ids[k] for k in np.flatnonzero(measurable)],
        "per_node": {node_ids[k]: {"drift_ns_per_h": float(drift.drift_ns_per_h[k]),
                                   "sd_ns_per_h": float(drift.drift_sd_ns_per_h[k])}
                     for k in np.flatnonzero(known)},
    }
