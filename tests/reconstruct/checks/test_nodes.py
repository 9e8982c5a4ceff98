"""Tests for the checks per node (``reconstruct.checks.nodes``) and the verdict of the pick checks.

Outside sources used:

- Travel time in homogeneous rock is distance over velocity, so a node whose
  true place differs from its coordinates by ``delta`` changes every residual
  by ``(|P + delta - o| - |P - o|) / v``, computed exactly with
  ``numpy.linalg.norm`` (geometry, not the project's forward model).
- First arrivals of the whole-survey case: the exact half-space-under-air
  reference (``tests/references/air_halfspace.py``; Telford, Geldart and
  Sheriff 1990, from memory) through ``benchmarks/bench_blame.py``.
- Median and normalised MAD: ``numpy.median`` and
  ``scipy.stats.median_abs_deviation(scale="normal")`` (Rousseeuw and Croux 1993);
  cut 3.5: Iglewicz and Hoaglin (1993), How to Detect and Handle Outliers (from memory).
- Distance to a bench face: Pythagoras on the hand-drawn step.
- Verdict thresholds: our choices (common practice, no published source): 2 %
  of the picks flagged as errors, 20 % flagged at all, any node off as a group.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import scipy.stats

from benchmarks.bench_blame import GROUND_M, ROCK_M_PER_NS, blame_case
from reconstruct.checks.nodes import check_nodes, distance_to_air_m
from reconstruct.checks.picks import check_picks, usability_cautions, usability_problems, verdict


def _ring(seed=0):
    """Nodes on two vertical lines and a surface line; every ordered pair; residuals of pick noise."""
    rng = np.random.default_rng(seed)
    xyz = np.array([[0.0, 0.0, -z] for z in range(4, 30, 2)] + [[25.0, 0.0, -z] for z in range(4, 30, 2)]
                   + [[x, 10.0, 0.0] for x in range(0, 26, 5)])
    n = len(xyz)
    tx, rx = np.nonzero(~np.eye(n, dtype=bool))
    residual = rng.normal(0.0, 0.5, tx.size)
    return xyz, tx, rx, residual


def test_level_and_spread_are_median_and_mad_of_node_medians():
    xyz, tx, rx, r = _ring()
    nc = check_nodes(tx, rx, xyz, r, np.ones(r.size, bool), np.full(r.size, 0.5), np.zeros(len(xyz), bool),
                     velocity_m_per_ns=0.12)
    medians = [np.median(r[(tx == k) | (rx == k)]) for k in range(len(xyz))]
    np.testing.assert_allclose(nc.median_residual_ns, medians)
    assert nc.level_ns == pytest.approx(np.median(medians))
    assert nc.spread_ns == pytest.approx(scipy.stats.median_abs_deviation(medians, scale="normal"))
    assert not nc.off.any()  # pure pick noise: no node off


def test_a_node_at_the_wrong_height_is_named_with_its_shift():
    xyz, tx, rx, r = _ring(1)
    v, k = 0.12, 12  # node 12: the deepest of the first line, 28 m down
    delta = np.array([0.0, 0.0, 2.0])  # truly 2 m higher than its coordinates: nearer every other node
    truth = xyz.copy()
    truth[k] += delta
    exact = (np.linalg.norm(truth[rx] - truth[tx], axis=1) - np.linalg.norm(xyz[rx] - xyz[tx], axis=1)) / v
    nc = check_nodes(tx, rx, xyz, r + exact, np.ones(r.size, bool), np.full(r.size, 0.5),
                     np.zeros(len(xyz), bool), velocity_m_per_ns=v)
    assert np.flatnonzero(nc.off).tolist() == [k]
    assert nc.cause[k].startswith("wrong height")
    np.testing.assert_allclose(nc.shift_m[k], delta, atol=0.3)


def test_a_late_node_in_the_half_space_case_and_the_verdict():
    nodes, picks, bad = blame_case(holes=3, nodes_per_hole=10, surface=9, n_errors=30, seed=4)
    ground = lambda x, y: np.full_like(x, GROUND_M)  # noqa: E731
    clean = check_picks(nodes, picks, nodes.xyz_m, ground, ROCK_M_PER_NS)
    assert not clean.nodes.off.any()  # 30 gross errors of 1,482 picks do not make a node look off
    k = 5
    late = picks.time_ns + 8.0 * ((picks.tx == k) | (picks.rx == k))  # every pick of node k 8 ns late
    checks = check_picks(nodes, dataclasses.replace(picks, time_ns=late), nodes.xyz_m, ground, ROCK_M_PER_NS)
    assert np.flatnonzero(checks.nodes.off).tolist() == [k]
    assert checks.nodes.median_residual_ns[k] == pytest.approx(8.0, abs=1.0)
    assert checks.nodes.cause[k].startswith("late as a group")
    assert any("N005" in c for c in usability_cautions(picks, checks))
    assert not any("N005" in c for c in usability_cautions(picks, clean))


@pytest.mark.parametrize("n_errors, error_caution", [(15, False), (60, True)])
def test_verdict_follows_the_share_of_flagged_picks(n_errors, error_caution):
    nodes, picks, bad = blame_case(holes=3, nodes_per_hole=10, surface=9, n_errors=n_errors, seed=4)
    checks = check_picks(nodes, picks, nodes.xyz_m, lambda x, y: np.full_like(x, GROUND_M), ROCK_M_PER_NS)
    problems, cautions = usability_problems(picks, checks), usability_cautions(picks, checks)
    assert problems == []
    # 15 or 60 gross errors of 1,482 picks: 1.0 % or 4.0 %, against the 2 % caution
    assert any("flagged as errors" in c for c in cautions) == error_caution
    # the surface nodes' head waves (the reference's first arrival) make over 20 % of the picks air waves
    air = (checks.has("air_direct") | checks.has("air_refracted")).mean()
    assert air > 0.2 and any("are flagged (" in c for c in cautions)
    assert verdict(problems, cautions) == "usable with caution"
    assert verdict([], []) == "usable" and verdict(["x"], cautions) == "not usable as it stands"


def test_distance_to_air_at_a_bench_face():
    # lower bench at 100 m for y < 30, upper bench at 110 m beyond: a step of 10 m at y = 30
    def ground(x, y):
        return np.where(np.asarray(y) < 30.0, 100.0, 110.0)

    nodes = np.array([[40.0, 37.0, 96.0], [40.0, 45.0, 70.0], [40.0, 10.0, 93.0]])
    d = distance_to_air_m(nodes, ground, reach_m=15.0, step_m=0.25)
    assert d[0] == pytest.approx(np.hypot(7.0, 4.0), abs=0.3)  # to the face's foot
    assert d[1] == 15.0  # no air within reach
    assert d[2] == pytest.approx(7.0, abs=0.3)  # straight up to the lower bench
