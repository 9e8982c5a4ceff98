"""Tests for plan.synthetic.simulate: synthetic first-arrival picks from a truth model.

A small invented site (20 x 10 x 20 m box, 1 m cells, flat ground at 18 m) and
invented node positions, built in memory. Reference values come from geometry
(numpy distances) and from the travel-time reciprocity of straight rays.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.constants

from plan.synthetic.simulate import all_pairs, refined_grid, simulate_picks
from plan.synthetic.truth import parse_truth
from reconstruct.model.grid import Grid
from reconstruct.io.site import parse_site
from reconstruct.io.tables import Nodes

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9
ROCK_M_PER_NS = 0.12


def _site():
    return parse_site({
        "name": "test box",
        "model": {"origin_m": [0, 0, 0], "size_m": [20, 10, 20], "cell_m": 1.0},
        "ground": {"flat_elevation_m": 18},
        "rock": {"velocity_m_per_ns": ROCK_M_PER_NS, "conductivity_ms_per_m": 1.0,
                 "antenna_frequency_mhz": 100},
    })


def _nodes(xyz, kind="borehole"):
    xyz = np.asarray(xyz, dtype=float)
    n = len(xyz)
    return Nodes(ids=tuple(f"N{k}" for k in range(n)), xyz_m=xyz, kinds=(kind,) * n,
                 boreholes=(None,) * n, lines=np.arange(2, n + 2), source="nodes.csv")


def _rock_nodes(n=12, seed=5):
    """Nodes strictly inside the ground (z <= 16 m < 18 m), some on cell planes."""
    rng = np.random.default_rng(seed)
    random = rng.uniform([0.5, 0.5, 1.0], [19.5, 9.5, 16.0], size=(n - 4, 3))
    on_planes = [[4, 5, 16], [16, 5, 4], [4, 5, 4], [16, 5, 16]]
    return _nodes(np.vstack([random, on_planes]))


def _quiet(**changes):
    data = {"noise": {"sigma_ns": 0, "time_zero_sigma_ns": 0, "seed": 1}, "refine": 2}
    data.update(changes)
    return parse_truth(data)


def test_no_bodies_no_noise_gives_distance_over_velocity():
    nodes = _rock_nodes()
    survey = simulate_picks(_site(), nodes, _quiet(), rays="straight")
    # no node lies in air, so none is moved
    np.testing.assert_array_equal(survey.node_xyz_m, nodes.xyz_m)
    # every straight ray between two points below a flat surface stays in rock:
    # t = |x_rx - x_tx| / v (geometry), distances from numpy
    distance = np.linalg.norm(nodes.xyz_m[survey.rx] - nodes.xyz_m[survey.tx], axis=1)
    np.testing.assert_allclose(survey.time_ns, distance / ROCK_M_PER_NS, rtol=1e-10)
    np.testing.assert_allclose(survey.true_travel_time_ns, survey.time_ns, rtol=0, atol=0)
    np.testing.assert_array_equal(survey.time_zero_ns, np.zeros(len(nodes)))


def test_background_velocity_of_the_truth_replaces_the_rock_velocity():
    nodes = _rock_nodes()
    survey = simulate_picks(_site(), nodes, _quiet(background_velocity_m_per_ns=0.09), both_directions=False, rays="straight")
    distance = np.linalg.norm(nodes.xyz_m[survey.rx] - nodes.xyz_m[survey.tx], axis=1)
    np.testing.assert_allclose(survey.time_ns, distance / 0.09, rtol=1e-10)


def test_ray_through_a_fast_box_is_faster_by_the_path_inside():
    # a horizontal ray along x from x = 4 to 16 m crosses an air-filled box
    # spanning x 8..12 m: t = 8 m / v_rock + 4 m / c (geometry)
    nodes = _nodes([[4, 5.2, 10.3], [16, 5.2, 10.3]])
    truth = _quiet(bodies=[{"shape": "box", "centre_m": [10, 5, 10], "size_m": [4, 4, 4], "fill": "air"}])
    survey = simulate_picks(_site(), nodes, truth, rays="straight")
    np.testing.assert_allclose(survey.time_ns, 8 / ROCK_M_PER_NS + 4 / SPEED_OF_LIGHT_M_PER_NS, rtol=1e-10)


def test_clock_offsets_cancel_in_reciprocal_pairs():
    nodes = _rock_nodes()
    truth = parse_truth({
        "bodies": [{"shape": "ellipsoid", "centre_m": [10, 5, 9], "semi_axes_m": [3, 2, 2], "fill": "water"}],
        "noise": {"sigma_ns": 0, "time_zero_sigma_ns": 2.0, "seed": 11},
    })
    survey = simulate_picks(_site(), nodes, truth, rays="straight")
    tau = survey.time_zero_ns
    assert np.std(tau) > 0.5
    # offsets are reported relative to their mean
    assert abs(np.mean(tau)) < 1e-12
    # t(A->B) = T + tau_B - tau_A and t(B->A) = T + tau_A - tau_B with the same
    # travel time T, so t(A->B) - t(B->A) = 2 (tau_B - tau_A)
    # common practice, no published source: reciprocity of first-arrival travel times
    time = {(a, b): t for a, b, t in zip(survey.tx, survey.rx, survey.time_ns)}
    for (a, b), t_ab in time.items():
        assert t_ab - time[b, a] == pytest.approx(2 * (tau[b] - tau[a]), abs=1e-9)
    # and each time is travel time plus tau_rx - tau_tx
    np.testing.assert_allclose(survey.time_ns,
                               survey.true_travel_time_ns + tau[survey.rx] - tau[survey.tx], atol=1e-12)


@pytest.mark.parametrize("n", [2, 3, 7])
def test_pair_counts(n):
    tx, rx = all_pairs(n)
    assert tx.size == math.perm(n, 2) == n * (n - 1)
    assert len(set(zip(tx.tolist(), rx.tolist()))) == tx.size
    assert np.all(tx != rx)
    tx, rx = all_pairs(n, both_directions=False)
    assert tx.size == math.comb(n, 2)
    assert np.all(tx < rx)


def test_simulated_survey_has_every_ordered_pair():
    nodes = _rock_nodes(n=9)
    survey = simulate_picks(_site(), nodes, _quiet(), rays="straight")
    assert survey.tx.size == 9 * 8
    one_way = simulate_picks(_site(), nodes, _quiet(), both_directions=False, rays="straight")
    assert one_way.tx.size == 9 * 8 // 2


def test_max_distance_keeps_only_near_pairs():
    nodes = _rock_nodes()
    d_all = np.linalg.norm(nodes.xyz_m[:, None, :] - nodes.xyz_m[None, :, :], axis=-1)
    expected = int(((d_all <= 8.0) & ~np.eye(len(nodes), dtype=bool)).sum())
    survey = simulate_picks(_site(), nodes, _quiet(), max_distance_m=8.0, rays="straight")
    assert survey.tx.size == expected
    d = np.linalg.norm(nodes.xyz_m[survey.rx] - nodes.xyz_m[survey.tx], axis=1)
    assert d.max() <= 8.0


def test_seed_makes_runs_repeatable():
    nodes = _rock_nodes()
    noisy = {"noise": {"sigma_ns": 0.5, "time_zero_sigma_ns": 1.0, "seed": 42}}
    a = simulate_picks(_site(), nodes, parse_truth(noisy), rays="straight")
    b = simulate_picks(_site(), nodes, parse_truth(noisy), rays="straight")
    np.testing.assert_array_equal(a.time_ns, b.time_ns)
    np.testing.assert_array_equal(a.time_zero_ns, b.time_zero_ns)
    c = simulate_picks(_site(), nodes, parse_truth({"noise": {**noisy["noise"], "seed": 43}}), rays="straight")
    assert not np.array_equal(a.time_ns, c.time_ns)
    np.testing.assert_array_equal(a.true_travel_time_ns, c.true_travel_time_ns)


def test_noise_has_the_requested_spread_and_sigma_column():
    nodes = _rock_nodes(n=20)
    survey = simulate_picks(_site(), nodes, parse_truth({"noise": {"sigma_ns": 0.5, "seed": 9}}), rays="straight")
    noise = survey.time_ns - survey.true_travel_time_ns
    # 380 Gaussian draws: the sample standard deviation is within 5 standard
    # errors (0.5 / sqrt(2 * 380) ~ 0.018 ns) of 0.5 ns
    assert np.std(noise, ddof=1) == pytest.approx(0.5, abs=0.09)
    assert abs(np.mean(noise)) < 5 * 0.5 / np.sqrt(noise.size)
    np.testing.assert_array_equal(survey.sigma_ns, np.full(noise.size, 0.5))


def test_refined_grid_keeps_the_box():
    grid = Grid((1.0, 2.0, 3.0), (1.0, 2.0, 0.5), (4, 5, 6))
    fine = refined_grid(grid, 3)
    assert fine.shape == (12, 15, 18)
    np.testing.assert_allclose(fine.cell_m, (1 / 3, 2 / 3, 0.5 / 3))
    np.testing.assert_allclose(fine.end_m, grid.end_m, rtol=1e-12)
    assert fine.origin_m == grid.origin_m


def test_surface_nodes_are_placed_on_the_ground():
    nodes = _nodes([[2, 5, 19.5], [18, 5, 19.5]], kind="surface")
    survey = simulate_picks(_site(), nodes, _quiet(), rays="straight")
    # snapped a micrometre below the flat ground at 18 m; the ray runs just under it
    np.testing.assert_allclose(survey.node_xyz_m[:, 2], 18.0, atol=1e-5)
    np.testing.assert_allclose(survey.time_ns, 16.0 / ROCK_M_PER_NS, rtol=1e-6)


def test_bent_simulation_of_a_uniform_rock_gives_distance_over_velocity():
    # geometry: in a homogeneous medium the first arrival travels the straight
    # line; nodes deep enough (>= 6 m below the ground at 18 m) that the air wave
    # over the surface is slower than the direct wave at these offsets
    from reconstruct.parallel import Executor

    rng = np.random.default_rng(11)
    xyz = rng.uniform([1.0, 1.0, 1.0], [19.0, 9.0, 6.0], size=(8, 3))
    nodes = _nodes(xyz)
    survey = simulate_picks(_site(), nodes, _quiet(refine=1), rays="bent", executor=Executor(kind="serial"))
    distance = np.linalg.norm(xyz[survey.rx] - xyz[survey.tx], axis=1)
    far = distance >= 3.0
    np.testing.assert_allclose(survey.time_ns[far], distance[far] / ROCK_M_PER_NS, rtol=5e-3)


def test_bent_simulation_finds_the_air_wave_between_surface_nodes():
    # surface-to-surface first arrival is the direct air wave x / c (c from
    # scipy.constants), far earlier than the path through 0.12 m/ns rock
    from reconstruct.parallel import Executor

    xyz = [[2.0, 5.0, 18.0], [9.0, 5.0, 18.0], [18.0, 5.0, 18.0]]
    nodes = _nodes(xyz, kind="surface")
    survey = simulate_picks(_site(), nodes, _quiet(refine=1), rays="bent", executor=Executor(kind="serial"))
    distance = np.linalg.norm(np.asarray(xyz)[survey.rx] - np.asarray(xyz)[survey.tx], axis=1)
    np.testing.assert_allclose(survey.time_ns, distance / SPEED_OF_LIGHT_M_PER_NS, rtol=5e-3)


# ------------------------------------------------------------ gross outliers

def test_gross_errors_share_size_sign_and_seed():
    from plan.synthetic.simulate import gross_errors

    times = np.random.default_rng(0).uniform(3.0, 300.0, 5000)
    error = gross_errors(times, 0.02, 20.0, seed=9)
    bad = error != 0
    assert bad.sum() == 100  # round(0.02 * 5000), exactly
    assert np.all((np.abs(error[bad]) >= 10.0) & (np.abs(error[bad]) <= 30.0))
    assert np.all(times + error > 2.0)  # never at or before time-zero
    assert 0.3 < np.mean(error[bad] < 0) < 0.7  # both signs
    np.testing.assert_array_equal(error, gross_errors(times, 0.02, 20.0, seed=9))
    assert not np.array_equal(error, gross_errors(times, 0.02, 20.0, seed=10))
    assert not gross_errors(times, 0.0, 20.0, seed=9).any()


def test_outliers_leave_the_other_picks_unchanged():
    site = _site()
    nodes = _nodes([[4, 5, 2], [4, 5, 8], [4, 5, 14], [16, 5, 2], [16, 5, 8], [16, 5, 14]])
    noise = {"sigma_ns": 0.3, "time_zero_sigma_ns": 1.0, "seed": 5}
    clean = simulate_picks(site, nodes, parse_truth({"noise": noise, "refine": 1}), rays="straight")
    dirty = simulate_picks(site, nodes, parse_truth({"noise": {**noise, "outlier_fraction": 0.1}, "refine": 1}),
                           rays="straight")
    assert dirty.outlier.sum() == 3  # round(0.1 * 30)
    np.testing.assert_array_equal(dirty.time_ns[~dirty.outlier], clean.time_ns[~dirty.outlier])
    np.testing.assert_allclose(dirty.time_ns - clean.time_ns, dirty.outlier_error_ns, atol=1e-12)
    assert not clean.outlier.any()


def test_missed_picks_are_those_below_the_link_budget_and_fades_are_seeded():
    from plan.synthetic.simulate import drop_missed_picks

    survey = simulate_picks(_site(), _rock_nodes(6), _quiet(), rays="straight")
    margin = np.linspace(-5.0, 5.0, survey.tx.size)
    kept, missed = drop_missed_picks(survey, margin)
    np.testing.assert_array_equal(missed, margin < 0)
    np.testing.assert_array_equal(kept.time_ns, survey.time_ns[margin >= 0])
    np.testing.assert_array_equal(kept.tx, survey.tx[margin >= 0])
    one = drop_missed_picks(survey, margin, fade_sigma_db=3.0, seed=2)[1]
    two = drop_missed_picks(survey, margin, fade_sigma_db=3.0, seed=2)[1]
    np.testing.assert_array_equal(one, two)
    assert (one != missed).any()  # a 3 dB fade turns some verdicts near 0 dB
