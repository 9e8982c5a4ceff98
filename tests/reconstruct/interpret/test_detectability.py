"""Tests for ``reconstruct.interpret.detectability``: weak indications, zones of influence, the smallest
detectable body, the words per planned work and the threshold override.

Outside checks, named beside each test:
- the centre value of a Gaussian-blurred sphere against scipy.stats.chi (3 degrees of freedom) and
  against scipy.ndimage.gaussian_filter of a voxel sphere;
- the detour around a sphere against a numerical shortest path (scipy.optimize.minimize over a
  polyline kept outside the sphere) and against its small-radius limit 2 r^2 / L (plain geometry);
- the first Fresnel zone width, 2 sqrt(lambda L / 4 + lambda^2 / 16) (Williamson 1991, "A guide to
  the limits of resolution imposed by scattering in ray tomography", Geophysics 56(2));
- coverage of a layout with a gap: rays between nodes stay in the nodes' convex hull (plain
  geometry), and the covered cells are counted again by sampling every ray every 2 cm;
- the expected number of noise clusters against a count in a smoothed Gaussian noise cube
  (Worsley et al. 1996, "A unified statistical approach for determining significant signals in
  images of cerebral activation", Human Brain Mapping 4(1)).
Every cube and site is invented; random seeds are fixed.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import ndimage, optimize, stats

from reconstruct.cli import main
from reconstruct.errors import InputError
from reconstruct.forward.straight_rays import ray_coverage, straight_ray_matrix
from reconstruct.interpret.bodies import (
    FILL_AIR,
    FILL_WATER_OR_CLAY,
    TIER_UNRESOLVED_BODY,
    TIER_VOID,
    VoidOptions,
    expected_noise_clusters,
    find_voids,
    search_volume_resels,
    void_table_rows,
)
from reconstruct.interpret.detectability import (
    SLOW_FILL_VELOCITY_M_PER_NS,
    WEAK_INDICATION_COLUMNS,
    assess_detectability,
    blurred_peak_fraction,
    detectability_rows,
    detour_around_sphere_m,
    find_weak_indications,
    smallest_detectable_diameter_m,
    weak_indication_rows,
    zone_of_influence,
)
from reconstruct.interpret.folder import InversionFolder
from reconstruct.io.site import PlannedWork, parse_site
from reconstruct.model.grid import Grid

ROCK = 0.115  # m/ns, dry limestone (Davis & Annan 1989: about 0.12; from memory)
AIR = 0.2998  # m/ns
FWHM_PER_SIGMA = math.sqrt(8.0 * math.log(2.0))  # Gaussian full width at half maximum over sigma
FORBIDDEN = ("safe", "clear")  # issue 15: never a verdict on the ground


# --- the rule of the smallest detectable body ---------------------------------------------------

@pytest.mark.parametrize("diameter_m, resolution_m", [(1.0, 6.0), (4.0, 6.2), (6.5, 6.2), (15.0, 5.0)])
def test_blurred_peak_is_the_chi_distribution_with_three_degrees_of_freedom(diameter_m, resolution_m):
    # scipy.stats.chi(3).cdf(x): the share of a 3D standard Gaussian within radius x
    sigma = resolution_m / FWHM_PER_SIGMA
    expected = stats.chi(3).cdf(0.5 * diameter_m / sigma)
    assert float(blurred_peak_fraction(diameter_m, resolution_m)) == pytest.approx(expected, rel=1e-9)


def test_blurred_peak_matches_a_gaussian_filter_of_a_voxel_sphere():
    # independent computation: scipy.ndimage.gaussian_filter of a sphere drawn on 0.2 m cells
    cell, resolution, diameter = 0.2, 6.0, 4.0
    n = 101
    axis = (np.arange(n) - n // 2) * cell
    x, y, z = np.meshgrid(axis, axis, axis, indexing="ij")
    sphere = (x**2 + y**2 + z**2 <= (diameter / 2) ** 2).astype(float)
    blurred = ndimage.gaussian_filter(sphere, resolution / FWHM_PER_SIGMA / cell, mode="constant", truncate=5.0)
    # voxelisation error of the sphere: about 1 % at 10 cells per radius
    assert blurred[n // 2, n // 2, n // 2] == pytest.approx(float(blurred_peak_fraction(diameter, resolution)),
                                                            rel=0.02)


def _shortest_path_around_circle_m(radius_m, half_length_m, step_m=0.05):
    """Length of the shortest path y(x) >= 0 from (-a, 0) to (a, 0) that stays outside the circle,
    found numerically: heights on a fine grid of x, bounded below by the circle, minimised with
    scipy.optimize.minimize (L-BFGS-B)."""
    a = half_length_m
    x = np.linspace(-a, a, int(round(2 * a / step_m)) + 1)[1:-1]
    floor = np.sqrt(np.clip(radius_m**2 - x**2, 0.0, None))

    def length(y):
        p = np.column_stack([np.r_[-a, x, a], np.r_[0.0, y, 0.0]])
        return float(np.sum(np.linalg.norm(np.diff(p, axis=0), axis=1)))

    def gradient(y):
        p = np.column_stack([np.r_[-a, x, a], np.r_[0.0, y, 0.0]])
        d = np.diff(p, axis=0)
        unit_y = d[:, 1] / np.linalg.norm(d, axis=1)
        return unit_y[:-1] - unit_y[1:]

    result = optimize.minimize(length, floor + radius_m, jac=gradient, method="L-BFGS-B",
                               bounds=[(f, None) for f in floor], options={"maxiter": 20000, "ftol": 1e-15,
                                                                           "gtol": 1e-12})
    return result.fun


@pytest.mark.parametrize("radius_m, path_length_m", [(3.0, 33.0), (6.0, 20.0)])
def test_detour_around_a_sphere_against_a_numerical_shortest_path(radius_m, path_length_m):
    numeric = _shortest_path_around_circle_m(radius_m, path_length_m / 2) - path_length_m
    # the chords between grid points cut the arc slightly: within 1 %
    assert detour_around_sphere_m(radius_m, path_length_m) == pytest.approx(numeric, rel=0.01)


def test_detour_around_a_small_sphere_tends_to_two_r_squared_over_l():
    # plain geometry: 2 sqrt((L/2)^2 + r^2) - L ~ 2 r^2 / L when r << L
    assert detour_around_sphere_m(0.1, 40.0) == pytest.approx(2 * 0.1**2 / 40.0, rel=1e-3)
    with pytest.raises(ValueError, match="half the path length"):
        detour_around_sphere_m(20.0, 40.0)


def test_smallest_void_solves_the_rule_with_scipy_and_slow_bodies_need_more():
    threshold, background, resolution, path = 1.6, 0.115, 6.2, 33.0
    contrast = 1 / background - 1 / AIR
    sigma = resolution / FWHM_PER_SIGMA
    # independent inversion of the rule with scipy: contrast * chi3.cdf(d / 2 sigma) = threshold
    expected = optimize.brentq(lambda d: contrast * stats.chi(3).cdf(d / (2 * sigma)) - threshold, 1e-6, path)
    air = smallest_detectable_diameter_m(threshold, background, resolution, path, FILL_AIR)
    assert air == pytest.approx(expected, abs=2e-3)
    slow = smallest_detectable_diameter_m(threshold, background, resolution, path, FILL_WATER_OR_CLAY)
    # a slow body must pass the same threshold with a delay capped by the detour around it
    slow_contrast = 1 / SLOW_FILL_VELOCITY_M_PER_NS - 1 / background
    detour = _shortest_path_around_circle_m(slow / 2, path / 2) - path
    shown = min(slow_contrast, detour / background / slow) * stats.chi(3).cdf(slow / (2 * sigma))
    assert shown == pytest.approx(threshold, rel=0.03)
    assert slow > air
    # a threshold above the whole contrast of air: no void of any size would show
    assert smallest_detectable_diameter_m(contrast * 1.01, background, resolution, path, FILL_AIR) == math.inf
    # a background slower than clay: no slow body of clay can show
    assert smallest_detectable_diameter_m(0.5, 0.05, resolution, path, FILL_WATER_OR_CLAY) == math.inf
    with pytest.raises(InputError, match="threshold_ns_per_m"):
        smallest_detectable_diameter_m(0.0, background, resolution, path, FILL_AIR)


def _flat_cube(shape, ground_top_m, seed, noise=0.002):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), shape)
    ground = grid.cell_centres_m()[..., 2] < ground_top_m
    rng = np.random.default_rng(seed)
    slowness = 1.0 / ROCK + noise * ndimage.gaussian_filter(rng.normal(size=shape), 1.0, mode="wrap") / 0.2
    return grid, ground, slowness, np.full(shape[:2], float(ground_top_m))


@pytest.mark.parametrize("factor, found", [(1.2, True), (0.8, False)])
def test_a_blurred_air_sphere_near_the_smallest_size_is_found_or_missed_by_the_body_search(factor, found):
    # independent blur (scipy.ndimage.gaussian_filter) of a voxel sphere, searched by find_voids with a
    # given threshold; the rule says where the search turns from missing it to finding it
    grid, ground, slowness, surface = _flat_cube((48, 48, 48), 46.0, seed=3)
    survey = dict(frequency_mhz=100.0, path_length_m=30.0, rms_ns=2.0)
    probe = find_voids(grid, np.where(ground, 1 / slowness, AIR), ground, np.ones(grid.shape), surface, **survey,
                       options=VoidOptions(sigmas=4.0))
    slab = probe.slabs[20]
    d_min = smallest_detectable_diameter_m(slab["threshold_ns_per_m"], slab["background_velocity_m_per_ns"],
                                           slab["resolution_m"], 30.0, FILL_AIR)
    diameter = factor * d_min
    centre = np.array([24.0, 24.0, 24.0])  # a cell corner: the sphere is symmetric on the grid
    fine = 4  # sphere drawn on quarter cells, then averaged into cells
    axis = (np.arange(48 * fine) + 0.5) / fine
    x, y, z = np.meshgrid(axis, axis, axis, indexing="ij", sparse=True)
    sphere = ((x - centre[0]) ** 2 + (y - centre[1]) ** 2 + (z - centre[2]) ** 2 <= (diameter / 2) ** 2)
    sphere = sphere.reshape(48, fine, 48, fine, 48, fine).mean(axis=(1, 3, 5))
    blurred = ndimage.gaussian_filter(sphere, slab["resolution_m"] / FWHM_PER_SIGMA, mode="constant")
    anomaly = blurred * (1 / AIR - 1 / slab["background_velocity_m_per_ns"])
    velocity = np.where(ground, 1 / (slowness + anomaly), AIR)
    analysis = find_voids(grid, velocity, ground, np.ones(grid.shape), surface, **survey,
                          options=VoidOptions(sigmas=4.0))
    assert (len(analysis.bodies) > 0) == found


# --- zones and coverage --------------------------------------------------------------------------

def _site(works, size=(40, 20, 25)):
    return parse_site({
        "name": "gap test (invented)",
        "model": {"origin_m": [0, 0, 0], "size_m": list(size), "cell_m": 1.0},
        "ground": {"flat_elevation_m": 20},
        "rock": {"velocity_m_per_ns": ROCK, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "planned_works": works,
    })


def test_zone_of_influence_of_a_road_is_its_strip_down_to_the_depth():
    site = _site([{"name": "road", "kind": "haul_road", "polyline_m": [[0, 10, 20], [40, 10, 20]]}])
    grid = site.grid()
    ground = grid.cell_centres_m()[..., 2] < 20.0
    zone = zone_of_influence(grid, ground, site.planned_works[0], margin_m=5.0, depth_m=12.0)
    # plain geometry: centres at y = 5.5 .. 14.5 (|y - 10| <= 5), z from 8 to 20 m: 40 x 10 x 12 cells
    assert zone.sum() == 40 * 10 * 12
    c = grid.cell_centres_m()
    assert np.all(np.abs(c[zone][:, 1] - 10.0) <= 5.0) and c[zone][:, 2].min() == pytest.approx(8.5)


def _gap_layout(grid):
    """Nodes every metre down four holes near the corners of the western half; all pairs between holes.
    Rays between two vertical holes lie in the vertical plane through both, so the covered cells
    are those of six vertical planes, the whole of the eastern half left out."""
    # off the cell faces and corners, so that no ray grazes a cell boundary
    holes = [(1.3, 1.6), (18.7, 1.2), (1.4, 18.8), (18.6, 18.3)]
    depths = np.arange(1.3, 19.5, 1.0)
    nodes = [(hx, hy, z) for hx, hy in holes for z in depths]
    tx, rx = [], []
    for i, a in enumerate(nodes):
        for b in nodes[i + 1:]:
            if a[:2] != b[:2]:
                tx.append(a)
                rx.append(b)
    return np.array(tx), np.array(rx)


def _covered_by_sampling(grid, tx, rx, step_m=0.02):
    """Cells crossed by the straight segments, by sampling each one every ``step_m`` (no Siddon)."""
    hit = np.zeros(grid.shape, dtype=bool)
    for a, b in zip(tx, rx):
        n = int(np.ceil(np.linalg.norm(b - a) / step_m)) + 1
        points = a + np.linspace(0.0, 1.0, n)[:, None] * (b - a)
        index = np.floor(points).astype(int)  # 1 m cells from the origin
        keep = np.all((index >= 0) & (index < np.array(grid.shape)), axis=1)
        hit[tuple(index[keep].T)] = True
    return hit


def _inversion(site, ray_count, seed=1):
    grid = site.grid()
    ground = grid.cell_centres_m()[..., 2] < 20.0
    rng = np.random.default_rng(seed)
    velocity = np.where(ground, ROCK + rng.normal(0.0, 0.0003, grid.shape), AIR)
    return InversionFolder(path=Path("."), grid=grid, velocity_m_per_ns=velocity, ray_count=ray_count,
                           ray_length_m=ray_count * 1.0, ground=ground, surface_m=np.full(grid.shape[:2], 20.0),
                           summary={}, site=site, site_path=Path("site.yaml"), path_length_m=25.0, rms_ns=0.5,
                           nodes_xyz_m=None, notes=())


def test_a_layout_with_a_gap_under_a_planned_work_reports_the_gap_as_not_covered():
    site = _site([{"name": "road", "kind": "haul_road", "polyline_m": [[0, 10, 20], [40, 10, 20]]},
                  {"name": "east bench", "kind": "bench", "polygon_m": [[28, 4, 20], [38, 4, 20], [38, 16, 20],
                                                                       [28, 16, 20]]}])
    grid = site.grid()
    tx, rx = _gap_layout(grid)
    _, ray_count = ray_coverage(straight_ray_matrix(grid, tx, rx), grid)
    data = _inversion(site, ray_count)
    analysis = find_voids(data.grid, data.velocity_m_per_ns, data.ground, ray_count, data.surface_m,
                          frequency_mhz=100.0, path_length_m=25.0, rms_ns=0.5, planned_works=site.planned_works)
    assert analysis.bodies == ()
    rows = detectability_rows(assess_detectability(data, analysis))
    road, bench = rows
    zone = zone_of_influence(grid, data.ground, site.planned_works[0])
    # plain geometry: rays stay in the hull of the nodes (x <= 18.7 m), so the zone's cells east of
    # x = 19 m (21 of the 40 m of the road strip) are not covered, whatever the ray tracing
    assert road["ground_cells"] == zone.sum() == 40 * 10 * 20
    assert road["not_covered_percent"] >= 100.0 * 21 / 40
    # and the covered cells, counted again by sampling the rays: grazing cells may differ
    sampled = _covered_by_sampling(grid, tx, rx)[zone].sum()
    assert road["covered_cells"] == pytest.approx(sampled, abs=0.01 * zone.sum())
    words = road["words"]
    assert f"in the covered {road['covered_percent']:.0f} % of this zone; " \
           f"{road['not_covered_percent']:.0f} % not covered" in words
    assert words.startswith("No void larger than ") and " m^3 " in words
    assert "lower bound" in words  # the slow-body sentence
    # the bench lies wholly in the gap: the survey cannot tell, and says so
    assert bench["covered_cells"] == 0 and bench["smallest_void_m3"] is None
    assert "cannot tell" in bench["words"] and "100 % not covered" in bench["words"]
    for row in rows:
        assert not any(word in row["words"].lower() for word in FORBIDDEN)


def test_a_site_without_planned_works_gets_the_whole_model_box_as_its_zone():
    # the same gap layout: the covered cells counted again by sampling the rays (no Siddon), over all ground cells
    site = _site([])
    grid = site.grid()
    tx, rx = _gap_layout(grid)
    _, ray_count = ray_coverage(straight_ray_matrix(grid, tx, rx), grid)
    data = _inversion(site, ray_count)
    analysis = find_voids(data.grid, data.velocity_m_per_ns, data.ground, ray_count, data.surface_m,
                          frequency_mhz=100.0, path_length_m=25.0, rms_ns=0.5, planned_works=())
    assessed = assess_detectability(data, analysis)
    row, = detectability_rows(assessed)
    assert row["kind"] == "whole_model" and row["ground_cells"] == data.ground.sum() == 40 * 20 * 20
    sampled = _covered_by_sampling(grid, tx, rx)[data.ground].sum()
    assert row["covered_cells"] == pytest.approx(sampled, abs=0.01 * data.ground.sum())
    # rays stay west of x = 18.7 m: more than half of the 40 m box is not covered, and the sentence says so
    assert row["not_covered_percent"] >= 100.0 * 21 / 40
    assert f"{row['not_covered_percent']:.0f} % not covered" in row["words"]
    assert "whole ground of the model box" in assessed.notes[0]
    assert not any(word in row["words"].lower() for word in FORBIDDEN)


def test_empty_tables_never_read_as_a_verdict_and_a_body_in_the_zone_is_named():
    site = _site([{"name": "road", "kind": "haul_road", "polyline_m": [[0, 10, 20], [40, 10, 20]]}])
    grid = site.grid()
    rays = np.where(grid.cell_centres_m()[..., 2] < 20.0, 9, 0).astype(np.int32)
    data = _inversion(site, rays)
    empty = find_voids(data.grid, data.velocity_m_per_ns, data.ground, rays, data.surface_m, frequency_mhz=100.0,
                       path_length_m=25.0, rms_ns=0.5, planned_works=site.planned_works)
    assessed = assess_detectability(data, empty)
    row, = detectability_rows(assessed)
    assert assessed.method["weak_indications_words"].startswith("0 weak indications past 2 noise floors")
    assert row["covered_percent"] == 100.0
    assert row["words"].startswith(f"No void larger than {row['smallest_void_m3']:.0f} m^3")
    assert "found in the covered 100 % of this zone; 0 % not covered" in row["words"]
    velocity = data.velocity_m_per_ns.copy()
    velocity[16:24, 7:13, 8:14] = 0.25  # an air-filled box under the road
    found = find_voids(data.grid, velocity, data.ground, rays, data.surface_m, frequency_mhz=100.0,
                       path_length_m=25.0, rms_ns=0.5, planned_works=site.planned_works)
    data = InversionFolder(**{**data.__dict__, "velocity_m_per_ns": velocity})
    row, = detectability_rows(assess_detectability(data, found))
    assert row["body_ids"] == [1] and row["words"].startswith("In this zone: body 1 (see the tables). Elsewhere, ")
    for words in (row["words"],):
        assert not any(word in words.lower() for word in FORBIDDEN)


# --- weak indications ----------------------------------------------------------------------------

def test_weak_indication_between_the_noise_floor_and_the_threshold():
    grid, ground, slowness, surface = _flat_cube((40, 40, 40), 38.0, seed=5, noise=0.001)
    survey = dict(frequency_mhz=100.0, path_length_m=30.0, rms_ns=1.0)
    # the noise floor here is rms / w (w: first Fresnel zone width, Williamson 1991, computed again)
    lam = 1000 * ROCK / 100.0
    width = 2 * math.sqrt(lam * 30.0 / 4 + lam**2 / 16)
    floor = 1.0 / width
    c = grid.cell_centres_m()
    bump = 3.0 * floor * np.exp(-np.sum((c - [20.5, 20.5, 20.5]) ** 2, axis=-1) / (2 * 2.0**2))  # peak 3 floors
    velocity = np.where(ground, 1 / (slowness + bump), AIR)
    analysis = find_voids(grid, velocity, ground, np.ones(grid.shape), surface, **survey)
    assert analysis.bodies == ()  # below the threshold
    weak, labels = find_weak_indications(grid, analysis, ground, np.ones(grid.shape), surface)
    assert len(weak) == 1
    w = weak[0]
    assert w.fill == FILL_WATER_OR_CLAY and w.lower_bound
    assert w.noise_floor_ns_per_m == pytest.approx(floor, rel=0.01)
    assert w.strength_noise_floors == pytest.approx(3.0, abs=0.1)
    assert np.allclose(w.centroid_m, (20.5, 20.5, 20.5), atol=0.1)
    assert w.size_words.startswith(f"up to about {width:.0f} m across") and "may be larger" in w.size_words
    assert (labels == 1).sum() == w.n_cells
    row, = weak_indication_rows(weak)
    assert set(row) == set(WEAK_INDICATION_COLUMNS) and row["tier"] == "weak_indication"
    # a bump of 1.5 floors is noise-level: no indication
    analysis = find_voids(grid, np.where(ground, 1 / (slowness + bump / 2), AIR), ground, np.ones(grid.shape),
                          surface, **survey)
    assert find_weak_indications(grid, analysis, ground, np.ones(grid.shape), surface)[0] == ()


def test_expected_noise_clusters_against_a_count_in_a_noise_cube():
    # Worsley et al. (1996): the expected Euler characteristic counts the clusters above a high level
    rng = np.random.default_rng(11)
    sigma_cells = 1.5
    field = ndimage.gaussian_filter(rng.normal(size=(96, 96, 96)), sigma_cells, mode="wrap")
    field /= field.std()
    inner = np.zeros(field.shape, dtype=bool)
    inner[8:-8, 8:-8, 8:-8] = True  # away from the edges of the search box
    u = 2.5
    count = ndimage.label((field > u) & inner, structure=ndimage.generate_binary_structure(3, 3))[1]
    resels = search_volume_resels(inner, np.full(3, sigma_cells * FWHM_PER_SIGMA))
    expected = expected_noise_clusters(resels, u)
    assert count == pytest.approx(expected, rel=0.25)


# --- the void table: tiers, strength, sizes in words ---------------------------------------------

def test_void_table_tiers_strength_and_sizes_in_words():
    grid, ground, slowness, surface = _flat_cube((40, 40, 40), 38.0, seed=7, noise=0.001)
    c = grid.cell_centres_m()
    big = np.sum(((c - [12.0, 20.0, 20.0]) / [5.0, 4.0, 4.0]) ** 2, axis=-1) <= 1.0
    small = np.sum((c - [30.5, 20.5, 20.5]) ** 2, axis=-1) <= 1.2**2
    clay = np.sum((c - [20.0, 32.0, 12.0]) ** 2, axis=-1) <= 3.5**2
    slowness = np.where(big | small, 1 / 0.25, np.where(clay, 1 / 0.07, slowness))
    analysis = find_voids(grid, np.where(ground, 1 / slowness, AIR), ground, np.ones(grid.shape), surface,
                          frequency_mhz=100.0, path_length_m=30.0, rms_ns=0.5)
    rows = {(r["fill"], r["tier"]): r for r in void_table_rows(analysis.bodies)}
    void = rows[(FILL_AIR, TIER_VOID)]
    assert void["size_words"].startswith("about ") and not void["lower_bound"] and void["size_up_to_m"] is None
    lam = 1000 * ROCK / 100.0
    width = 2 * math.sqrt(lam * 30.0 / 4 + lam**2 / 16)  # Williamson (1991)
    unresolved = rows[(FILL_AIR, TIER_UNRESOLVED_BODY)]
    assert unresolved["size_up_to_m"] == pytest.approx(width, rel=0.02)
    assert unresolved["size_words"].startswith(f"up to about {width:.0f} m across")
    assert "size not known" not in unresolved["size_words"]
    slow = next(r for r in rows.values() if r["fill"] == FILL_WATER_OR_CLAY)
    assert slow["lower_bound"] and "first arrivals go around" in slow["size_words"]
    assert ("at least" in slow["size_words"]) or ("may be larger" in slow["size_words"])
    for r in rows.values():
        b = next(b for b in analysis.bodies if b.body_id == r["body_id"])
        assert r["strength_noise_floors"] == pytest.approx(abs(b.peak_anomaly_ns_per_m) / b.noise_floor_ns_per_m)
        sigmas = analysis.parameters["threshold_sigmas"]
        assert r["strength_noise_floors"] >= sigmas  # past the threshold: at least its count of noise floors


# --- threshold override through the command ------------------------------------------------------

def test_threshold_override_records_what_a_default_run_reports(make_inversion_folder, capsys):
    folder, _ = make_inversion_folder()
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    default = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    assert default["threshold_override"]["overridden"] is False
    assert default["threshold_override"]["default_run"] is None
    assert main(["voids", str(folder), "--no-pictures", "--quiet", "--threshold-sigmas", "100"]) == 0
    out = capsys.readouterr().out
    override = json.loads((folder / "voids.json").read_text(encoding="utf-8"))["threshold_override"]
    assert override["overridden"] is True and override["threshold_sigmas"] == 100.0
    counts = default["counts"]
    assert override["default_run"] == {"voids": counts["resolved"], "unresolved_bodies": counts["unresolved"],
                                       "weak_indications": counts["weak_indications"]}
    assert override["this_run"]["voids"] == 0 < counts["resolved"]
    assert "set by the user" in override["words"] and "with the default threshold" in override["words"]
    assert override["words"] in out
    content = json.loads((folder / "voids.json").read_text(encoding="utf-8"))
    assert isinstance(content["detectability"], list) and content["detectability"][0]["work"] == "haul road"
    assert (folder / "weak_indications.csv").is_file()


def test_bad_zone_options_name_the_field(make_inversion_folder):
    from reconstruct.interpret.folder import load_inversion_folder, screen_folder

    folder, _ = make_inversion_folder()
    data = load_inversion_folder(folder)
    analysis, _ = screen_folder(data)
    with pytest.raises(InputError, match="margin_m"):
        assess_detectability(data, analysis, margin_m=-1.0)
    with pytest.raises(InputError, match="floors"):
        assess_detectability(data, analysis, floors=0.5)
