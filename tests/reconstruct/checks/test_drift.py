"""Tests for clock drift: ``reconstruct.checks.drift`` and the ``clock_drift`` time-zero model.

Outside checks: the first arrivals are exact straight-ray times in a
homogeneous rock, distance / velocity (deep nodes, so that no air wave comes
first); the drifts are drawn at random, so that the estimate is checked
against the truth within its own stated uncertainty (a z-score test, as in
Aster, Borchers and Thurber 2013, Parameter Estimation and Inverse Problems,
section 2.2, from memory). Each node transmits once in turn, as a shot
schedule does (common practice, no published source).
"""

from __future__ import annotations

import numpy as np
import pytest

from reconstruct.checks.drift import clock_drift_record, estimate_clock_drift
from reconstruct.inverse.time_zero import SECONDS_PER_HOUR, shot_hours_from_middle, time_zero_matrix

VELOCITY_M_PER_NS = 0.12


def _survey(seed=3, n_per_hole=8, slot_s=120.0, drift_sd=3.0, noise_ns=0.3):
    rng = np.random.default_rng(seed)
    depth = np.linspace(7.0, 16.0, n_per_hole)
    xyz = np.vstack([np.column_stack([np.full(n_per_hole, x), np.full(n_per_hole, 5.0), 18.0 - depth])
                     for x in (3.0, 17.0)] + [np.column_stack([np.full(4, 10.0), np.full(4, 9.0),
                                                               18.0 - np.linspace(8, 15, 4)])])
    n = len(xyz)
    tx, rx = (a.ravel() for a in np.meshgrid(np.arange(n), np.arange(n), indexing="ij"))
    keep = tx != rx
    tx, rx = tx[keep], rx[keep]
    shot_s = tx * slot_s  # node k fires in slot k
    offset = rng.normal(0.0, 5.0, n)
    drift = rng.normal(0.0, drift_sd, n)  # ns per hour
    truth = np.r_[offset, drift]
    clock = time_zero_matrix(tx, rx, n, "clock_drift", shot_s) @ truth
    travel = np.linalg.norm(xyz[tx] - xyz[rx], axis=1) / VELOCITY_M_PER_NS
    picks = travel + clock + rng.normal(0.0, noise_ns, tx.size)
    return dict(xyz=xyz, tx=tx, rx=rx, shot_s=shot_s, travel=travel, picks=picks, drift=drift, offset=offset,
                noise_ns=noise_ns, n=n)


def test_drift_matrix_puts_the_shot_time_in_hours_from_the_middle():
    hours = shot_hours_from_middle([0.0, 1800.0, 7200.0])
    assert np.allclose(hours, [-1.0, -0.5, 1.0])
    C = time_zero_matrix([0], [1], 2, "clock_drift", [0.0]).toarray()
    assert np.allclose(C, [[-1.0, 1.0, 0.0, 0.0]])  # a single shot sits at the middle
    with pytest.raises(ValueError, match="shot time"):
        time_zero_matrix([0], [1], 2, "clock_drift")


def test_synthetic_drift_is_recovered_within_its_uncertainty():
    s = _survey()
    estimate = estimate_clock_drift(s["tx"], s["rx"], s["picks"] - s["travel"], np.full(s["tx"].size, s["noise_ns"]),
                                    s["shot_s"], s["n"])
    truth = s["drift"] - s["drift"].mean()
    z = (estimate.drift_ns_per_h - truth) / estimate.drift_sd_ns_per_h
    assert np.all(np.abs(z) < 3.5)
    assert 0.5 < np.std(z) < 1.6  # the stated uncertainty is the real one
    assert np.all(estimate.drift_sd_ns_per_h < 0.5)  # a few tenths of ns per hour with 0.3 ns picks
    record = clock_drift_record(estimate, [f"N{k}" for k in range(s["n"])])
    strong = [f"N{k}" for k in np.flatnonzero(np.abs(truth) > 5 * estimate.drift_sd_ns_per_h)]
    assert set(strong) <= set(record["drifting_nodes"])
    assert record["survey_hours"] == pytest.approx((s["n"] - 1) * 120.0 / SECONDS_PER_HOUR)


def test_without_drift_no_node_is_called_drifting():
    s = _survey(seed=11, drift_sd=0.0)
    estimate = estimate_clock_drift(s["tx"], s["rx"], s["picks"] - s["travel"], np.full(s["tx"].size, s["noise_ns"]),
                                    s["shot_s"], s["n"])
    # at three sigma a false call has odds of about 1 in 370 per node
    assert estimate.measurable.sum() <= 1


def test_reciprocal_differences_give_the_drift_without_any_travel_time():
    # t_ab - t_ba holds the clocks alone (reciprocity): a travel-time model that is badly wrong
    # (here: no travel time at all) does not matter. When every node fires once, at f_k, drifts
    # g f_k (with offsets -g f_k^2 / 2) change no difference, so the drifts come relative to their
    # straight-line trend with the firing time: the truth is compared the same way (numpy.polyfit).
    from reconstruct.checks.drift import estimate_clock_drift_from_reciprocity

    for seed in (5, 6, 7, 8):
        s = _survey(seed=seed)
        code = s["tx"] * s["n"] + s["rx"]
        reverse = s["rx"] * s["n"] + s["tx"]
        order = np.argsort(code)
        partner = order[np.searchsorted(code[order], reverse)]
        estimate = estimate_clock_drift_from_reciprocity(s["tx"], s["rx"], s["picks"],
                                                         np.full(s["tx"].size, s["noise_ns"]), s["shot_s"], s["n"],
                                                         partner)
        assert estimate.trend_removed
        firing = np.arange(s["n"]) * 120.0 / SECONDS_PER_HOUR  # node k fires in slot k
        truth = s["drift"] - np.polyval(np.polyfit(firing, s["drift"], 1), firing)
        z = (estimate.drift_ns_per_h - (truth - truth.mean())) / estimate.drift_sd_ns_per_h
        assert np.all(np.abs(z) < 3.5) and 0.5 < np.std(z) < 1.6, seed
