"""Tests for plan.layout.layouts.

Outside sources: hand geometry of square and hexagonal lattices (4 and 6
nearest neighbours at the spacing, counted with scipy.spatial.cKDTree); the
site's own ground surface and hole geometry (reconstruct.io.site); the node
table reader (reconstruct.io.tables.read_nodes).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial import cKDTree

from plan.layout.layouts import (
    LayoutOptions,
    candidate_positions,
    design_layout,
    face_positions,
    hole_positions,
    surface_positions,
    write_layout_csv,
)
from reconstruct.errors import InputError
from reconstruct.io.site import parse_site
from reconstruct.io.tables import read_nodes

BENCHED = {
    "name": "test pit",
    "model": {"origin_m": [0, 0, 0], "size_m": [60, 40, 30], "cell_m": 1.0},
    "ground": {"benches": [
        {"name": "low", "floor_m": 20, "polygon_m": [[0, 0], [60, 0], [60, 20], [0, 20]]},
        {"name": "high", "floor_m": 26, "polygon_m": [[0, 20], [60, 20], [60, 40], [0, 40]]}]},
    "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
    "boreholes": [
        {"id": "BH1", "collar_m": [10, 10, 20], "azimuth_deg": 0, "dip_deg": 90, "length_m": 15},
        {"id": "BH2", "collar_m": [50, 10, 20], "azimuth_deg": 90, "dip_deg": 60, "length_m": 18},
        {"id": "B7", "kind": "blast_hole", "collar_m": [30, 30, 26], "azimuth_deg": 0, "dip_deg": 90,
         "length_m": 8}],
    "exclusion_zones": [{"name": "store", "polygon_m": [[0, 30], [15, 30], [15, 40], [0, 40]]}],
}


@pytest.fixture(scope="module")
def site():
    return parse_site(BENCHED)


def _neighbour_counts(xy, spacing):
    tree = cKDTree(xy)
    return np.array([len(tree.query_ball_point(p, spacing * 1.01)) - 1 for p in xy])


def test_regular_and_staggered_grids_have_4_and_6_neighbours_at_the_spacing():
    flat = parse_site({**BENCHED, "ground": {"flat_elevation_m": 20}, "exclusion_zones": []})
    regular = surface_positions(flat, 4.0, pattern="regular")
    staggered = surface_positions(flat, 4.0, pattern="staggered")
    assert _neighbour_counts(regular[:, :2], 4.0).max() == 4
    counts = _neighbour_counts(staggered[:, :2], 4.0)
    assert counts.max() == 6 and np.mean(counts == 6) > 0.5
    # no two nodes closer than the spacing (hand geometry of both lattices)
    for xyz in (regular, staggered):
        assert cKDTree(xyz[:, :2]).query(xyz[:, :2], k=2)[0][:, 1].min() == pytest.approx(4.0)
    assert np.all(regular[:, 2] == 20.0)


def test_surface_nodes_stand_on_the_ground_away_from_faces_and_zones(site):
    xyz = surface_positions(site, 2.0, setback_m=1.5)
    np.testing.assert_array_equal(xyz[:, 2], site.ground.elevation_m(xyz[:, 0], xyz[:, 1]))
    assert np.all(np.abs(xyz[:, 1] - 20.0) >= 1.5 - 1e-9)  # the face runs along y = 20
    assert not site.exclusion_zones[0].contains(xyz[:, 0], xyz[:, 1]).any()


def test_face_nodes_lie_on_the_face_at_mid_height(site):
    xyz = face_positions(site, 5.0)
    assert len(xyz) == 12  # 60 m of face at 5 m spacing; the shared edge is counted once
    np.testing.assert_allclose(xyz[:, 1], 20.05)  # 5 cm into the rock of the higher bench
    np.testing.assert_allclose(xyz[:, 2], 23.0)
    assert np.all(xyz[:, 2] < site.ground.elevation_m(xyz[:, 0], xyz[:, 1]))


def test_hole_nodes_lie_on_the_hole_axis_at_the_spacing_from_the_toe(site):
    xyz, ids = hole_positions(site, 3.0, min_hole_depth_m=1.0)
    for hole in site.boreholes:
        pts = xyz[np.array(ids) == hole.id]
        along = (pts - np.asarray(hole.collar_m)) @ hole.direction()
        off_axis = np.linalg.norm(pts - hole.point_at(along), axis=1)
        assert off_axis.max() < 1e-9
        assert along.max() == pytest.approx(hole.length_m)  # the toe holds a node
        np.testing.assert_allclose(np.diff(along), 3.0)
        assert along.min() >= 1.0
    assert set(ids) == {"BH1", "BH2", "B7"}  # blast holes take strings too


@pytest.mark.parametrize("budget", [2, 7, 30, 90, 250])
def test_budget_is_never_exceeded_and_nodes_are_allowed(site, budget):
    layout = design_layout(site, LayoutOptions(budget=budget))
    assert 2 <= len(layout) <= budget
    assert site.grid().contains(layout.xyz_m).all()
    assert not site.exclusion_zones[0].contains(layout.xyz_m[:, 0], layout.xyz_m[:, 1]).any()
    assert len(set(layout.ids)) == len(layout)
    counts = layout.counts()
    assert counts["borehole"] <= 0.5 * budget and counts["face"] <= 0.2 * budget + 1e-9


def test_budget_is_mostly_used(site):
    layout = design_layout(site, LayoutOptions(budget=120))
    assert len(layout) >= 0.85 * 120


def test_jitter_is_seeded_and_bounded(site):
    plain = design_layout(site, LayoutOptions(budget=60))
    one = design_layout(site, LayoutOptions(budget=60, jitter_m=2.0, seed=4))
    two = design_layout(site, LayoutOptions(budget=60, jitter_m=2.0, seed=4))
    np.testing.assert_array_equal(one.xyz_m, two.xyz_m)
    surface = np.array(plain.kinds) == "surface"
    shift = np.linalg.norm(one.xyz_m[surface, :2] - plain.xyz_m[surface, :2], axis=1)
    assert shift.max() <= 2.0 + 1e-9 and shift.mean() > 0.3
    np.testing.assert_array_equal(one.xyz_m[~surface], plain.xyz_m[~surface])
    assert not site.exclusion_zones[0].contains(one.xyz_m[:, 0], one.xyz_m[:, 1]).any()


def test_candidates_hold_the_layout_and_are_denser(site, tmp_path):
    options = LayoutOptions(budget=40)
    layout = design_layout(site, options)
    candidates = candidate_positions(site, options, layout)
    assert len(candidates) >= 2 * len(layout)
    distance, _ = cKDTree(candidates.xyz_m).query(layout.xyz_m)
    assert distance.max() < 1e-9
    write_layout_csv(tmp_path / "nodes.csv", layout)
    nodes = read_nodes(tmp_path / "nodes.csv")
    assert nodes.ids == layout.ids and nodes.kinds == layout.kinds
    np.testing.assert_allclose(nodes.xyz_m, layout.xyz_m, atol=5e-4)


def test_fixed_spacings_beyond_the_budget_are_refused(site):
    with pytest.raises(InputError, match=r"the spacings given need \d+ nodes .* but the budget is 10; "
                                         "raise --budget or widen the spacings"):
        design_layout(site, LayoutOptions(budget=10, surface_spacing_m=2.0))


@pytest.mark.parametrize("changes, expected", [
    ({"budget": 1}, "budget (--budget) must be a whole number from 2 to 20000 (got 1)"),
    ({"pattern": "hex"}, "pattern must be one of regular, staggered (got 'hex')"),
    ({"hole_share": 0.9, "face_share": 0.3}, "hole_share + face_share must be at most 1"),
    ({"surface_spacing_m": float("nan")}, "surface_spacing_m (--surface-spacing) must be a number > 0 in metres"),
    ({"jitter_m": -1.0}, "jitter_m (--jitter) must be a number >= 0 in metres (got -1.0)"),
])
def test_bad_options_name_the_field(changes, expected):
    with pytest.raises(InputError) as info:
        LayoutOptions(**{"budget": 10, **changes})
    assert expected in str(info.value)


def test_a_site_without_room_is_refused():
    boxed_in = parse_site({**BENCHED, "boreholes": [], "exclusion_zones": [
        {"name": "everything", "polygon_m": [[-1, -1], [61, -1], [61, 41], [-1, 41]]}]})
    with pytest.raises(InputError, match="leave no room"):
        design_layout(boxed_in, LayoutOptions(budget=20))


def test_surveyed_holes_carry_their_nodes_and_the_table_gives_the_depth_along_them(tmp_path):
    # a hole planned vertical but drilled building to 20 degrees towards the east: its nodes sit
    # on the surveyed path (minimum curvature; checked against wellpathpy in
    # tests/reconstruct/model/test_deviation.py) and the node table says how far down each is
    survey = [[0, 0, 90], [5, 5, 90], [10, 10, 90], [15, 20, 90]]
    holes = [{**BENCHED["boreholes"][0], "survey": survey}]
    site = parse_site({**BENCHED, "boreholes": holes})
    hole = site.boreholes[0]
    xyz, ids = hole_positions(site, 3.0, min_hole_depth_m=1.0)
    depth = hole.length_m - 3.0 * np.arange(len(xyz))[::-1]
    np.testing.assert_allclose(xyz, hole.point_at(depth), atol=1e-9)
    assert xyz[-1, 0] > 10.5  # the toe wandered east of the planned line x = 10
    layout = design_layout(site, LayoutOptions(budget=60))
    write_layout_csv(tmp_path / "nodes.csv", layout, site)
    nodes = read_nodes(tmp_path / "nodes.csv")
    in_hole = np.array([b == "BH1" for b in nodes.boreholes])
    assert in_hole.any() and np.isnan(nodes.depth_along_hole_m[~in_hole]).all()
    np.testing.assert_allclose(hole.point_at(nodes.depth_along_hole_m[in_hole]), nodes.xyz_m[in_hole], atol=2e-3)
