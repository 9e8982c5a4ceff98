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
    shot_hours_from_middle,
    time_zero_covariance,
    time_zero_matrix,
)

__all__ = ["ClockDrift", "estimate_clock_drift", "estimate_clock_drift_from_reciprocity", "clock_drift_record",
           "drift_from_pick_checks", "MEASURABLE_SIGMAS"]

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
    trend_removed: bool = False  # drifts relative to their linear trend with each node's firing time

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

    Notes
    -----
    Where each node fires once in turn, the shot time follows the
    transmitter's place in the schedule, so an error of the reference model
    that follows the transmitter's place leaks into the drifts; prefer
    :func:`estimate_clock_drift_from_reciprocity` when the picks hold
    reciprocal pairs.
    """
    tx, rx = np.asarray(tx, dtype=np.int64), np.asarray(rx, dtype=np.int64)
    C = time_zero_matrix(tx, rx, n_nodes, "clock_drift", np.asarray(shot_time_s, dtype=float))
    return _fit(C, np.asarray(residual_ns, dtype=float), 1.0 / np.asarray(sigma_ns, dtype=float),
                _used_nodes(tx, rx, n_nodes), np.asarray(shot_time_s, dtype=float))


def estimate_clock_drift_from_reciprocity(tx, rx, time_ns, sigma_ns, shot_time_s, n_nodes: int,
                                          partner) -> ClockDrift:
    """Fit clock offsets and drifts to the differences of reciprocal picks, free of any model.

    A pick from a to b fired at ``t_a`` and its reverse fired at ``t_b`` share
    the travel time (reciprocity), so their difference holds the clocks alone:
    ``t_ab - t_ba = 2 (off_b - off_a) + (drift_b - drift_a) (t_a + t_b - 2 t_mid)``.
    ``partner`` gives each pick's reverse (-1 for none; the pick checks'
    ``reciprocal``).
    """
    tx, rx = np.asarray(tx, dtype=np.int64), np.asarray(rx, dtype=np.int64)
    partner = np.asarray(partner, dtype=np.int64)
    first = np.flatnonzero((partner >= 0) & (np.arange(tx.size) < partner))
    second = partner[first]
    shot = np.asarray(shot_time_s, dtype=float)
    C = time_zero_matrix(tx, rx, n_nodes, "clock_drift", shot)
    D = (C[first] - C[second]).tocsr()
    time = np.asarray(time_ns, dtype=float)
    sigma = np.asarray(sigma_ns, dtype=float)
    weight = 1.0 / np.hypot(sigma[first], sigma[second])
    trend = _firing_trend(D, tx, shot, n_nodes)
    return _fit(D, time[first] - time[second], weight, _used_nodes(tx[first], rx[first], n_nodes),
                shot[np.r_[first, second]], trend)


def _firing_trend(D, tx, shot, n_nodes):
    """The clock pattern that reciprocal differences cannot see when each node fires at one time
    ``f_k``: drifts ``g f_k`` with offsets ``-g (f_k^2) / 2`` (times in hours from the middle of the
    survey) change no difference ``t_ab - t_ba``. Returns it as a vector over ``[offsets, drifts]``,
    or None when the nodes fire at several times (then the differences see it)."""
    hours = shot_hours_from_middle(shot)
    earliest = np.full(n_nodes, np.inf)
    latest = np.full(n_nodes, -np.inf)
    np.minimum.at(earliest, tx, hours)
    np.maximum.at(latest, tx, hours)
    known = np.isfinite(earliest)
    if np.any(latest[known] - earliest[known] > 1e-9):
        return None  # a node fires at several times
    firing = np.where(known, earliest, np.nan)
    if known.sum() < 3:
        return None
    f = np.where(known, firing, 0.0)
    vector = np.r_[-0.5 * f**2, f]
    if np.linalg.norm(D @ vector) > 1e-8 * max(np.linalg.norm(vector), 1.0) * max(abs(D).max(), 1.0):
        return None
    return vector


def _used_nodes(tx, rx, n_nodes):
    used = np.zeros(n_nodes, dtype=bool)
    used[tx] = True
    used[rx] = True
    return used


def _without_trend(tau, cov, trend, used, n_nodes):
    """Remove from the drifts their linear trend with the firing time (a pattern the data cannot
    see, ``trend``), moving the offsets with it; the covariance is carried through the same map."""
    f = trend[n_nodes:]
    fu = f[used] - f[used].mean()
    row = np.zeros(2 * n_nodes)
    row[n_nodes:][used] = fu / float(fu @ fu)  # the slope of the drifts against the firing time
    P = np.eye(2 * n_nodes) - np.outer(trend, row)
    return P @ tau, P @ cov @ P.T


def _fit(C, residual, weight, used, shot, trend=None) -> ClockDrift:
    """Robust weighted least squares of ``C [offsets, drifts] = residual`` with standard deviations;
    with ``trend`` (:func:`_firing_trend`), drifts relative to their trend with the firing time."""
    n_nodes = C.shape[1] // 2
    tau, omega = robust_time_zero(C, weight, residual, loss="huber")
    w_final = weight * np.sqrt(omega)
    cov = time_zero_covariance(C, w_final)
    if trend is not None:
        tau, cov = _without_trend(tau, cov, trend, used, n_nodes)
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
                      survey_hours=float(np.ptp(shot)) / SECONDS_PER_HOUR if shot.size else 0.0,
                      trend_removed=trend is not None)


def clock_drift_record(drift: ClockDrift, node_ids) -> dict:
    """The drift estimate for a summary JSON: per node, the measurable ones, the largest."""
    measurable = drift.measurable
    known = np.isfinite(drift.drift_ns_per_h)
    return {
        "model": "tau_k(t) = offset_k + drift_k (t - t_mid); offsets and drifts relative to their means"
                 + ("; drifts relative to their linear trend with each node's own firing time, which "
                    "reciprocal pairs cannot see when every node fires once" if drift.trend_removed else ""),
        "survey_hours": drift.survey_hours,
        "reduced_chi2": drift.reduced_chi2,
        "measurable_above_sigmas": MEASURABLE_SIGMAS,
        "largest_abs_drift_ns_per_h": float(np.nanmax(np.abs(drift.drift_ns_per_h))) if known.any() else None,
        "drifting_nodes": [node_ids[k] for k in np.flatnonzero(measurable)],
        "per_node": {node_ids[k]: {"drift_ns_per_h": float(drift.drift_ns_per_h[k]),
                                   "sd_ns_per_h": float(drift.drift_sd_ns_per_h[k])}
                     for k in np.flatnonzero(known)},
    }


def drift_from_pick_checks(picks, checks, node_ids) -> dict | None:
    """The drift record of the pick checks (:func:`clock_drift_record`), or None without shot times.

    From the reciprocal pairs that agree (model-free,
    :func:`estimate_clock_drift_from_reciprocity`) when there are at least
    two per node; otherwise against the pick checks' reference times (a
    homogeneous rock fitted to the picks, or the air wave), leaving out the
    picks flagged as implausible or as reciprocal mismatches.
    """
    from reconstruct.checks.picks import FLAG_FASTER_THAN_AIR, FLAG_RECIPROCAL, FLAG_SLOWER_THAN_BAND

    if picks.shot_time_s is None or len(picks) == 0:
        return None
    bad = checks.has(FLAG_RECIPROCAL) | checks.has(FLAG_FASTER_THAN_AIR) | checks.has(FLAG_SLOWER_THAN_BAND)
    partner = np.where(bad, -1, np.asarray(checks.reciprocal, dtype=np.int64))
    partner = np.where((partner >= 0) & bad[np.clip(partner, 0, None)], -1, partner)
    n_pairs = int(np.sum((partner >= 0) & (np.arange(len(picks)) < partner)))
    if n_pairs >= 2 * len(node_ids):
        drift = estimate_clock_drift_from_reciprocity(picks.tx, picks.rx, picks.time_ns, checks.sigma_ns,
                                                      picks.shot_time_s, len(node_ids), partner)
        source = f"{n_pairs} reciprocal pairs (model-free)"
    else:
        residual = np.asarray(picks.time_ns, dtype=float) - np.asarray(checks.reference_time_ns, dtype=float)
        keep = ~bad & np.isfinite(residual)
        if keep.sum() < 2:
            return None
        drift = estimate_clock_drift(picks.tx[keep], picks.rx[keep], residual[keep], checks.sigma_ns[keep],
                                     picks.shot_time_s[keep], len(node_ids))
        source = (f"{int(keep.sum())} picks against the homogeneous reference (too few reciprocal pairs; an "
                  "error of the reference that follows the shot order leaks into the drifts)")
    return {**clock_drift_record(drift, list(node_ids)), "estimated_from": source}
