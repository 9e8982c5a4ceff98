"""Tests for plan.layout.optimise: the greedy add/swap layout search.

Checks: the result never scores lower than its start (property test on
random candidate sets); the search's running score agrees with an
independent recomputation by plan.assess.coverage.compute_coverage on the full
model grid (sub-lattice step 1); on the invented demo quarry, at reduced size,
the optimised layout beats a regular grid of the same number of nodes (the
planner's acceptance check); bad budgets are refused with a message naming
the fix.
"""

from __future__ import annotations

import numpy as np
import pytest

from plan.assess.coverage import CoverageStandard, compute_coverage
from plan.layout.optimise import OptimiseOptions, optimise_layout, sample_step
from reconstruct.errors import InputError
from reconstruct.model.grid import ground_top_m
from reconstruct.io.site import load_site, parse_site
from reconstruct.io.site import model_grid


def _box_site():
    return parse_site({
        "name": "invented optimiser box",
        "model": {"origin_m": [0, 0, 0], "size_m": [24, 16, 12], "cell_m": 1.0},
        "ground": {"flat_elevation_m": 12},
        "rock": {"velocity_m_per_ns": 0.1, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "planned_works": [{"name": "road", "kind": "haul_road", "polyline_m": [[0, 8, 12], [24, 8, 12]]}],
    }, source="test")


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_never_returns_a_lower_score_than_its_start(seed):
    # a greedy search that accepts only improving steps cannot end below its start
    # (common practice, no published source); the scores are checked against
    # compute_coverage in the next test
    site = _box_site()
    rng = np.random.default_rng(seed)
    pool = np.column_stack([rng.uniform(0.2, 23.8, 40), rng.uniform(0.2, 15.8, 40), rng.uniform(0.5, 11.9, 40)])
    start = rng.choice(40, size=8, replace=False)
    standard = CoverageStandard(min_rays=int(rng.integers(1, 6)), min_angular_coverage=float(rng.uniform(0.1, 0.8)),
                                depth_of_interest_m=8.0, works_buffer_m=3.0)
    result = optimise_layout(site, pool, start, standard, OptimiseOptions(budget=8 + seed % 3, max_swaps=6,
                                                                          max_target_samples=800))
    assert result.score >= result.start_score
    assert result.selected.size <= 8 + seed % 3
    scores = [h["score"] for h in result.history]
    assert all(b > a for a, b in zip(scores[:-1], scores[1:]))  # every accepted step raises the score


def test_search_score_agrees_with_compute_coverage():
    site = _box_site()
    rng = np.random.default_rng(7)
    pool = np.column_stack([rng.uniform(0.2, 23.8, 20), rng.uniform(0.2, 15.8, 20), rng.uniform(0.5, 11.9, 20)])
    standard = CoverageStandard(min_rays=3, min_angular_coverage=0.3, depth_of_interest_m=6.0, works_buffer_m=3.0)
    result = optimise_layout(site, pool, np.arange(6), standard,
                             OptimiseOptions(budget=6, max_swaps=4, max_target_samples=10**6))
    assert result.sample_step == 1
    for nodes, score in ((result.start, result.start_score), (result.selected, result.score)):
        assert compute_coverage(site, pool[nodes], standard).score == pytest.approx(score, rel=1e-9)


def test_sample_step_keeps_the_sample_small():
    target = np.ones((30, 30, 30), dtype=bool)
    step = sample_step(target, 1000)
    off = step // 2
    assert target[off::step, off::step, off::step].sum() <= 1000
    assert target[(step - 1) // 2::step - 1, (step - 1) // 2::step - 1, (step - 1) // 2::step - 1].sum() > 1000


def test_budget_problems_are_reported():
    site = _box_site()
    pool = np.array([[2.0, 2, 6], [20, 2, 6], [2, 14, 6], [20, 14, 6]])
    with pytest.raises(InputError, match="more than the budget"):
        optimise_layout(site, pool, [0, 1, 2], CoverageStandard(), OptimiseOptions(budget=2))
    with pytest.raises(InputError, match="larger than the 4 positions"):
        optimise_layout(site, pool, [0], CoverageStandard(), OptimiseOptions(budget=5))
    with pytest.raises(InputError, match="budget"):
        OptimiseOptions(budget=0)


def test_optimiser_beats_the_regular_grid_on_the_demo_quarry():
    # reduced size: a 6 m surface lattice and borehole positions every 3 m as candidates,
    # the start is the regular grid of every other lattice point (same node count)
    site = load_site("demo_site/site.yaml")
    grid, ground = model_grid(site)
    top = ground_top_m(grid, ground)
    xs, ys = np.meshgrid(np.arange(3.0, 80, 6.0), np.arange(3.0, 50, 6.0), indexing="ij")
    ij = grid.cell_index(np.column_stack([xs.ravel(), ys.ravel(), np.full(xs.size, 100.0)]))
    lattice = np.column_stack([xs.ravel(), ys.ravel(), top[ij[:, 0], ij[:, 1]] - 1e-6])
    holes = np.vstack([bh.point_at(np.arange(1.5, bh.length_m, 3.0)) for bh in site.boreholes])
    pool = np.vstack([lattice, holes])
    every_other = np.flatnonzero((np.rint((xs.ravel() - 3) / 6) % 2 == 0) & (np.rint((ys.ravel() - 3) / 6) % 2 == 0))
    standard = CoverageStandard(min_rays=3, depth_of_interest_m=20.0)
    result = optimise_layout(site, pool, every_other, standard,
                             OptimiseOptions(budget=every_other.size, max_swaps=8, max_target_samples=3000))
    assert result.selected.size == every_other.size
    assert result.score > result.start_score + 0.01
