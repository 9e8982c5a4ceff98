"""Tests for blaming the right pick of a mismatched reciprocal pair (``reconstruct.checks.neighbours``).

Outside sources used:

- First arrivals: the exact half-space-under-air reference
  (``tests/references/air_halfspace.py``; the direct wave through rock or the
  head wave along the ground, Telford, Geldart and Sheriff 1990, from memory),
  not the project's forward model; the case is built by
  ``benchmarks/bench_blame.py`` (smaller here).
- Median and normalised MAD: ``numpy.median`` and
  ``scipy.stats.median_abs_deviation(scale="normal")`` (Rousseeuw and Croux 1993).
- Outlier cut 3.5 on the MAD-standardised score: Iglewicz and Hoaglin (1993),
  How to Detect and Handle Outliers, ASQC (from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats

from benchmarks.bench_blame import GROUND_M, ROCK_M_PER_NS, blame_case, blame_figures
from reconstruct.checks.neighbours import blame_pairs, neighbour_levels, neighbour_scores
from reconstruct.checks.picks import check_picks, reciprocal_confirmed


@pytest.fixture(scope="module")
def case():
    nodes, picks, bad = blame_case(holes=3, nodes_per_hole=10, surface=9, n_errors=30, seed=4)
    checks = check_picks(nodes, picks, nodes.xyz_m, lambda x, y: np.full_like(x, GROUND_M), ROCK_M_PER_NS)
    return nodes, picks, bad, checks


def test_every_gross_error_caught_and_its_good_partner_kept(case):
    nodes, picks, bad, checks = case
    f = blame_figures(checks, bad)
    assert f["gross_errors"] == 30
    assert f["caught_after"] == 30
    assert f["good_flagged_after"] < 0.005 * f["good_picks"]
    # the old rule (both picks of a mismatched pair) flagged at least one good partner per error
    assert f["good_flagged_before"] >= 30
    # a good partner of a mismatched pair is not confirmed by reciprocity (it keeps the robust weights)
    partners = checks.reciprocal[bad]
    assert not reciprocal_confirmed(checks)[partners].any()


def test_neighbour_levels_match_a_loop_with_scipy(case):
    nodes, picks, bad, checks = case
    tx, rx, xyz = np.asarray(picks.tx), np.asarray(picks.rx), nodes.xyz_m
    r = checks.residual_ns
    level, spread = neighbour_levels(tx, rx, xyz, r, count=4)
    rng = np.random.default_rng(0)
    for k in rng.choice(r.size, 40, replace=False):
        same_tx = np.flatnonzero((tx == tx[k]) & (np.arange(r.size) != k))
        same_rx = np.flatnonzero((rx == rx[k]) & (np.arange(r.size) != k))
        near_tx = same_tx[np.argsort(np.linalg.norm(xyz[rx[same_tx]] - xyz[rx[k]], axis=1), kind="stable")[:4]]
        near_rx = same_rx[np.argsort(np.linalg.norm(xyz[tx[same_rx]] - xyz[tx[k]], axis=1), kind="stable")[:4]]
        values = r[np.r_[near_tx, near_rx]]
        assert checks.reciprocal[k] not in np.r_[near_tx, near_rx]  # the reverse pick is never a neighbour
        assert level[k] == pytest.approx(np.median(values), abs=1e-12)
        assert spread[k] == pytest.approx(scipy.stats.median_abs_deviation(values, scale="normal"), rel=1e-9)


def test_scores_fall_back_to_all_picks_without_neighbours():
    r = np.array([0.0, 1.0, -1.0, 2.0, 10.0])
    sigma = np.full(5, 0.1)
    score = neighbour_scores(r, sigma, np.full(5, np.nan), np.full(5, np.nan))
    whole = scipy.stats.median_abs_deviation(r, scale="normal")
    np.testing.assert_allclose(score, np.abs(r - np.median(r)) / whole)


def test_blame_pairs_flags_the_outstanding_pick_or_both_when_undecided():
    score = np.array([8.0, 0.5, 1.0, 1.2, 5.0, 4.0, 0.2, 2.0, np.nan, 0.3])
    first = np.array([0, 2, 4, 6, 8])
    second = np.array([1, 3, 5, 7, 9])
    flag_a, flag_b = blame_pairs(first, second, score, cut=3.5)
    # 8 vs 0.5: first only; 1.0 vs 1.2: neither stands out, both; 5 vs 4: both beyond 3.5;
    # 0.2 vs 2: second only (2 > 2 * 0.2); no neighbours (NaN): that one
    np.testing.assert_array_equal(flag_a, [True, True, True, False, True])
    np.testing.assert_array_equal(flag_b, [False, True, True, True, False])
