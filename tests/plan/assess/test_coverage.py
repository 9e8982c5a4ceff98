"""Tests for plan.assess.coverage: direction tensor, angular coverage, Fresnel floor, counts, target volume.

Outside references used:
- numpy.linalg.eigh for the eigenvalues of hand-made direction tensors;
- the first Fresnel zone example of REFERENCES.md (half-period criterion,
  Williamson 1991; Spetzler and Snieder 2004): lambda = 1 m, L = 20 m gives a
  midpoint half-width of 2.25 m;
- a brute-force reference: ray counts from dense point sampling along each ray.
"""

from __future__ import annotations

import numpy as np
import pytest

from plan.assess.coverage import (
    CoverageStandard,
    angular_coverage,
    compute_coverage,
    direction_tensor,
    resolution_floor_m,
    target_mask,
    tensor_eigenvalues,
)
from reconstruct.errors import InputError
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.io.site import parse_site
from reconstruct.forward.straight_rays import straight_ray_matrix


def _site(planned_works=None, size=(20, 16, 12), cell=1.0, ground=10.0):
    data = {
        "name": "invented test box",
        "model": {"origin_m": [0, 0, 0], "size_m": list(size), "cell_m": cell},
        "ground": {"flat_elevation_m": ground},
        "rock": {"velocity_m_per_ns": 0.1, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
    }
    if planned_works:
        data["planned_works"] = planned_works
    return parse_site(data, source="test")


def _tensor_of(directions, weights=None):
    d = np.asarray(directions, float)
    d = d / np.linalg.norm(d, axis=1)[:, None]
    w = np.ones(len(d)) if weights is None else np.asarray(weights, float)
    # one cell crossed by every ray with length w
    G = np.asarray(w)[:, None]
    return direction_tensor(G, d)[0], d, w


def test_parallel_rays_have_one_direction():
    comps, d, w = _tensor_of([[1, 1, 0], [-1, -1, 0], [2, 2, 0]], [1.0, 2.0, 0.5])
    full = sum(wi * np.outer(di, di) for di, wi in zip(d, w))
    reference = np.sort(np.linalg.eigh(full / np.trace(full))[0])[::-1]  # outside reference: numpy eigh
    np.testing.assert_allclose(tensor_eigenvalues(comps), reference, atol=1e-12)
    np.testing.assert_allclose(reference, [1, 0, 0], atol=1e-12)
    assert angular_coverage(comps) == pytest.approx(0.0, abs=1e-12)


def test_three_orthogonal_directions_are_isotropic():
    comps, _, _ = _tensor_of([[1, 0, 0], [0, 1, 0], [0, 0, 1]])
    np.testing.assert_allclose(tensor_eigenvalues(comps), [1 / 3] * 3, atol=1e-12)
    assert angular_coverage(comps) == pytest.approx(1.0)


def test_random_direction_sets_match_numpy_eigh():
    rng = np.random.default_rng(4)
    for _ in range(20):
        n = rng.integers(1, 12)
        comps, d, w = _tensor_of(rng.normal(size=(n, 3)), rng.uniform(0.1, 3, n))
        full = sum(wi * np.outer(di, di) for di, wi in zip(d, w))
        lam = np.sort(np.linalg.eigh(full / np.trace(full))[0])[::-1]
        np.testing.assert_allclose(tensor_eigenvalues(comps), lam, atol=1e-10)
        assert angular_coverage(comps) == pytest.approx(1.5 * (1 - np.sum(lam**2)), abs=1e-10)


def test_two_perpendicular_directions_in_a_plane():
    comps, _, _ = _tensor_of([[1, 0, 0], [0, 0, 1]])
    assert angular_coverage(comps) == pytest.approx(0.75)


def test_fresnel_floor_matches_the_reference_example():
    # ray of L = 20 m along x through the centre of a 1 m cell at its midpoint;
    # wavelength 1 m: half-width 2.25 m at the midpoint (REFERENCES.md,
    # half-period criterion; Williamson 1991, Spetzler and Snieder 2004)
    grid = Grid((0, 0, 0), (1, 1, 1), (21, 3, 3))
    tx, rx = np.array([[0.5, 1.5, 1.5]]), np.array([[20.5, 1.5, 1.5]])
    G = straight_ray_matrix(grid, tx, rx)
    floor = resolution_floor_m(G, grid, tx, rx, 1.0).reshape(grid.shape)
    assert floor[10, 1, 1] == pytest.approx(2 * 2.25, abs=1e-9)
    assert np.isnan(floor[10, 0, 0])  # no ray
    # the zone narrows towards the ends
    assert floor[2, 1, 1] < floor[6, 1, 1] < floor[10, 1, 1]


def test_ray_counts_match_brute_force_sampling():
    site = _site()
    grid = site.grid()
    rng = np.random.default_rng(11)
    xyz = np.column_stack([rng.uniform(0.3, 19.7, 9), rng.uniform(0.3, 15.7, 9), rng.uniform(0.5, 9.5, 9)])
    cov = compute_coverage(site, xyz, CoverageStandard(min_rays=1))
    reference_length = np.zeros(grid.shape)
    crossed_long = np.zeros(grid.shape, dtype=int)
    crossed_any = np.zeros(grid.shape, dtype=int)
    i, j = np.triu_indices(9, 1)
    n_samples = 200_000
    for a, b in zip(i, j):
        t = (np.arange(n_samples) + 0.5) / n_samples
        points = xyz[a] + t[:, None] * (xyz[b] - xyz[a])
        step = np.linalg.norm(xyz[b] - xyz[a]) / n_samples
        ijk = grid.cell_index(points)
        per_cell = np.zeros(grid.shape)
        np.add.at(per_cell, tuple(ijk.T), step)
        reference_length += per_cell
        crossed_long += per_cell > 1e-3  # clips shorter than 1 mm may be missed by sampling
        crossed_any += per_cell > 0
    assert cov.n_rays == i.size
    np.testing.assert_allclose(cov.ray_length_m, reference_length, atol=1e-3)
    # the count never misses a ray that runs > 1 mm in a cell, and counts a ray only where it runs
    assert np.all(cov.ray_count >= crossed_long)
    assert np.all(cov.ray_count[reference_length == 0] == 0)
    # clips shorter than the 0.1 mm sampling step are the only possible differences
    assert np.mean(cov.ray_count == crossed_any) > 0.999


def test_target_without_planned_works_is_the_ground_down_to_the_depth():
    site = _site()
    grid = site.grid()
    ground = ground_mask(grid, site.ground.elevation_m)
    mask, note = target_mask(site, grid, ground, CoverageStandard(depth_of_interest_m=4.0))
    # ground at 10 m: cells centred at 6.5 .. 9.5 m
    assert mask[:, :, 6:10].all() and not mask[:, :, :6].any() and not mask[:, :, 10:].any()
    assert "no planned works" in note


def test_target_under_a_haul_road_follows_its_buffer():
    works = [{"name": "road", "kind": "haul_road", "polyline_m": [[0, 8, 10], [20, 8, 10]]}]
    site = _site(works)
    grid = site.grid()
    ground = ground_mask(grid, site.ground.elevation_m)
    mask, _ = target_mask(site, grid, ground, CoverageStandard(depth_of_interest_m=3.0, works_buffer_m=2.0))
    columns = mask.any(axis=2)
    y = grid.centres_m(1)
    inside = np.abs(y - 8) <= 2.0
    assert np.array_equal(columns, np.broadcast_to(inside, columns.shape))


def test_work_below_the_ground_deepens_the_target():
    works = [{"name": "cut", "kind": "bench", "polygon_m": [[0, 0, 6], [10, 0, 6], [10, 16, 6], [0, 16, 6]]}]
    site = _site(works)
    grid = site.grid()
    ground = ground_mask(grid, site.ground.elevation_m)
    mask, _ = target_mask(site, grid, ground, CoverageStandard(depth_of_interest_m=2.0, works_buffer_m=0.0))
    # down to 6 - 2 = 4 m under the cut: cells centred 4.5 .. 9.5
    assert mask[3, 3, 4:10].all() and not mask[3, 3, :4].any()
    assert not mask[15, 3].any()


def test_standard_rejects_bad_values_naming_the_field():
    with pytest.raises(InputError, match="min_rays"):
        CoverageStandard(min_rays=0)
    with pytest.raises(InputError, match="min_angular_coverage"):
        CoverageStandard(min_angular_coverage=1.5)
    with pytest.raises(InputError, match="depth_of_interest_m"):
        CoverageStandard(depth_of_interest_m=float("nan"))


def test_covered_fraction_and_score_follow_the_standard():
    site = _site()
    rng = np.random.default_rng(2)
    xyz = np.column_stack([rng.uniform(0.3, 19.7, 16), rng.uniform(0.3, 15.7, 16), rng.uniform(0.5, 9.5, 16)])
    loose = compute_coverage(site, xyz, CoverageStandard(min_rays=1, min_angular_coverage=0.01))
    strict = compute_coverage(site, xyz, CoverageStandard(min_rays=20, min_angular_coverage=0.9))
    assert 0 <= strict.covered_fraction < loose.covered_fraction <= 1
    assert strict.score < loose.score
    # a covered cell meets every part of the standard
    c = loose.covered
    assert np.all(loose.ray_count[c] >= 1) and np.all(loose.angular_coverage[c] >= 0.01)
