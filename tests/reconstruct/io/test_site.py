"""Tests for reconstruct.io.site: loading and checking a site description.

All site files are written to pytest's tmp_path; the values are invented.
"""

import copy
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.constants
import yaml
from scipy.interpolate import RegularGridInterpolator
from scipy.spatial import Delaunay

from reconstruct.errors import InputError
from reconstruct.io.site import Borehole, load_site, parse_site, points_in_polygon

REFERENCE = Path(__file__).resolve().parents[3] / "demo_site" / "site_reference.yaml"
SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9


def _site(**changes):
    """A small valid site as YAML data; ``changes`` replace top-level keys."""
    data = {
        "name": "test pit",
        "model": {"origin_m": [0, 0, 0], "size_m": [20, 10, 10], "cell_m": 1.0},
        "ground": {"flat_elevation_m": 8.0},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0,
                 "antenna_frequency_mhz": 100},
    }
    data.update(changes)
    return data


def _write(tmp_path, data=None, text=None):
    path = tmp_path / "site.yaml"
    path.write_text(text if text is not None else yaml.safe_dump(data, sort_keys=False))
    return path


def _message(tmp_path, data=None, text=None) -> str:
    with pytest.raises(InputError) as info:
        load_site(_write(tmp_path, data, text))
    return str(info.value)


def _box(x0, x1, y0, y1):
    return [[x0, y0], [x1, y0], [x1, y1], [x0, y1]]


def _csv(tmp_path, rows, name="ground.csv", header="x_m,y_m,z_m"):
    (tmp_path / name).write_text("\n".join([header, *rows]) + "\n")
    return name


# ---------------------------------------------------------------- valid files

def test_reference_file_loads_with_every_section():
    site = load_site(REFERENCE)
    assert site.name == "Example quarry"
    assert site.frame.epsg == 32633
    assert site.ground.kind == "benches" and len(site.ground.benches) == 3
    assert site.grid().shape == (120, 60, 80)
    # hand geometry of the file's polygons: upper bench, sump inside the lower bench
    z = site.ground.elevation_m([10.0, 90.0, 70.0], [10.0, 25.0, 25.0])
    assert z.tolist() == [110, 94, 100]
    assert [b.id for b in site.boreholes] == ["BH1", "BH2", "BH3", "B17"]
    assert [b.kind for b in site.boreholes] == ["borehole"] * 3 + ["blast_hole"]
    assert site.radar.system_performance_db == 100 and site.radar.air_ground_loss_db == 1.0
    assert site.radio.range_m == 100 and site.radio.gateway_m == (0.0, 30.0, 112.0)
    assert {w.geometry for w in site.planned_works} == {"polyline", "polygon"}
    assert site.exclusion_zones[0].contains(60.0, 52.0)
    assert site.source_path == str(REFERENCE)


def test_reference_file_height_grid_variant_loads(tmp_path):
    data = yaml.safe_load(REFERENCE.read_text())
    data["ground"] = {"height_grid_csv": "ground_heights.csv"}
    _csv(tmp_path, [f"{x},{y},{105 - 0.05 * x}" for x in (0, 60, 120) for y in (0, 30, 60)],
         name="ground_heights.csv")
    site = parse_site(data, source="site_reference.yaml", base_dir=tmp_path)
    assert site.ground.kind == "height_grid"
    assert site.ground.elevation_m(30.0, 10.0) == pytest.approx(103.5)


def test_flat_ground_loads_and_broadcasts(tmp_path):
    site = load_site(_write(tmp_path, _site()))
    z = site.ground.elevation_m(np.zeros((2, 3)), 5.0)
    assert z.shape == (2, 3) and np.all(z == 8.0)


def test_bench_elevation_inside_overlap_later_wins_and_surround(tmp_path):
    big = {"name": "bench", "floor_m": 5.0, "polygon_m": _box(0, 20, 0, 10)}
    pit = {"name": "pit", "floor_m": 3.0, "polygon_m": _box(5, 10, 2, 6)}
    data = _site(model={"origin_m": [0, 0, 0], "size_m": [30, 10, 10], "cell_m": 1.0},
                 ground={"benches": [big, pit], "surround_elevation_m": 9.0})
    ground = load_site(_write(tmp_path, data)).ground
    # hand geometry: (2, 2) only in the bench, (7, 4) in both, (25, 5) in neither
    assert ground.elevation_m([2.0, 7.0, 25.0], [2.0, 4.0, 5.0]).tolist() == [5.0, 3.0, 9.0]
    data["ground"]["benches"] = [pit, big]  # the bench now comes later and covers the pit
    ground = load_site(_write(tmp_path, data)).ground
    assert ground.elevation_m(7.0, 4.0) == 5.0


def test_points_in_polygon_against_scipy_and_hand_geometry():
    rng = np.random.default_rng(1)
    hexagon = np.array([[np.cos(a), np.sin(a)] for a in np.linspace(0, 2 * np.pi, 7)[:-1]]) * 5
    x, y = rng.uniform(-6, 6, (2, 2000))
    # a convex polygon equals its Delaunay triangulation's union
    expected = Delaunay(hexagon).find_simplex(np.c_[x, y]) >= 0
    np.testing.assert_array_equal(points_in_polygon(x, y, hexagon), expected)
    # L shape = [0, 4] x [0, 4] without [2, 4] x [2, 4] (hand geometry)
    ell = [[0, 0], [4, 0], [4, 2], [2, 2], [2, 4], [0, 4]]
    expected = (x > 0) & (x < 4) & (y > 0) & (y < 4) & ~((x > 2) & (y > 2))
    np.testing.assert_array_equal(points_in_polygon(x, y, ell), expected)
    # a point on the edge shared by two adjacent squares belongs to exactly one
    left, right = _box(0, 1, 0, 1), _box(1, 2, 0, 1)
    assert points_in_polygon(1.0, 0.5, left) != points_in_polygon(1.0, 0.5, right)


def test_height_grid_reproduces_a_plane_and_matches_scipy(tmp_path):
    xs, ys = np.array([-1.0, 3.0, 10.0, 21.0]), np.array([-1.0, 4.0, 11.0])  # uneven spacing
    plane = lambda x, y: 100.0 + 0.1 * x - 0.05 * y  # noqa: E731
    rows = [f"{x},{y},{plane(x, y):.17g}" for x in xs for y in ys]
    rows = ["# surveyed 2031, invented"] + rows[::-1]  # any row order, comment lines allowed
    data = _site(ground={"height_grid_csv": _csv(tmp_path, rows)})
    ground = load_site(_write(tmp_path, data)).ground
    rng = np.random.default_rng(2)
    px, py = rng.uniform(0, 20, 500), rng.uniform(0, 10, 500)
    # bilinear interpolation reproduces z = a + b x + c y exactly
    np.testing.assert_allclose(ground.elevation_m(px, py), plane(px, py), rtol=0, atol=1e-9)

    z = rng.uniform(90, 110, (len(xs), len(ys)))
    rows = [f"{x},{y},{z[i, j]:.17g}" for i, x in enumerate(xs) for j, y in enumerate(ys)]
    data = _site(ground={"height_grid_csv": _csv(tmp_path, rows)})
    ground = load_site(_write(tmp_path, data)).ground
    reference = RegularGridInterpolator((xs, ys), z)(np.c_[px, py])
    np.testing.assert_allclose(ground.elevation_m(px, py), reference, rtol=1e-12)


def test_rock_velocity_derived_from_permittivity(tmp_path):
    rock = {"relative_permittivity": 6.0, "conductivity_ms_per_m": 1.0,
            "antenna_frequency_mhz": 100}
    site = load_site(_write(tmp_path, _site(rock=rock)))
    assert site.rock.velocity_m_per_ns == pytest.approx(SPEED_OF_LIGHT_M_PER_NS / math.sqrt(6.0), rel=1e-12)
    # Davis & Annan 1989, "Ground-penetrating radar for high-resolution mapping of soil
    # and rock stratigraphy", Geophys. Prosp. 37, 531-551: limestone K 4-8, v 0.12 m/ns
    assert site.rock.velocity_m_per_ns == pytest.approx(0.12, abs=0.01)
    for k in (4.0, 8.0):
        v = parse_site(_site(rock={**rock, "relative_permittivity": k})).rock.velocity_m_per_ns
        assert 0.10 < v < 0.155
    rock = {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100}
    k = parse_site(_site(rock=rock)).rock.relative_permittivity
    assert k == pytest.approx((SPEED_OF_LIGHT_M_PER_NS / 0.12) ** 2, rel=1e-12)


def test_borehole_direction_and_points():
    # common practice, no published source: azimuth clockwise from north (+y),
    # dip measured down from horizontal, 90 = vertical down
    hole = Borehole("BH9", (10.0, 20.0, 100.0), azimuth_deg=90.0, dip_deg=45.0, length_m=10.0)
    half_root2 = math.sqrt(0.5)
    np.testing.assert_allclose(hole.direction(), [half_root2, 0.0, -half_root2], atol=1e-15)
    np.testing.assert_allclose(hole.toe_m, [10 + 10 * half_root2, 20.0, 100 - 10 * half_root2])
    assert hole.point_at(np.array([0.0, 1.0, 2.0])).shape == (3, 3)
    vertical = Borehole("BH8", (0.0, 0.0, 0.0), azimuth_deg=0.0, dip_deg=90.0, length_m=5.0)
    np.testing.assert_allclose(vertical.direction(), [0.0, 0.0, -1.0], atol=1e-15)
    north = Borehole("BH7", (0.0, 0.0, 0.0), azimuth_deg=0.0, dip_deg=0.0, length_m=5.0)
    np.testing.assert_allclose(north.direction(), [0.0, 1.0, 0.0], atol=1e-15)


def test_parse_site_does_not_modify_its_input():
    data = _site(boreholes=[{"id": "BH1", "collar_m": [5, 5, 8], "azimuth_deg": 0,
                             "dip_deg": 90, "length_m": 5}])
    before = copy.deepcopy(data)
    parse_site(data)
    assert data == before


# ---------------------------------------------------------------- bad input

def test_unknown_key_with_suggestion(tmp_path):
    rock = {"velocty_m_per_ns": 0.12, "relative_permittivity": 6.0,
            "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100}
    message = _message(tmp_path, _site(rock=rock))
    assert ("site.yaml: rock.velocty_m_per_ns is not a known key; "
            "did you mean 'velocity_m_per_ns'?") in message


def test_key_in_wrong_section_is_pointed_to_its_section(tmp_path):
    message = _message(tmp_path, _site(cell_m=2.0))
    assert "cell_m is not a known key; it belongs under model" in message


def test_missing_required_key(tmp_path):
    data = _site()
    del data["model"]["size_m"]
    message = _message(tmp_path, data)
    assert "site.yaml: model.size_m is missing; add it ([x, y, z] extent of the box in m)" \
        in message


def test_wrong_type(tmp_path):
    data = _site()
    data["model"]["size_m"] = "big"
    message = _message(tmp_path, data)
    assert "model.size_m must be a list of 3 numbers [x, y, z] in m (got text 'big')" in message


def test_exponent_written_as_text_gets_a_hint(tmp_path):
    text = yaml.safe_dump(_site()).replace("conductivity_ms_per_m: 1.0",
                                           "conductivity_ms_per_m: 1e-3")
    message = _message(tmp_path, text=text)
    assert "rock.conductivity_ms_per_m must be a number in mS/m (got text '1e-3')" in message
    assert "1.0e-3" in message


@pytest.mark.parametrize("cell, expected", [
    (-1.0, "model.cell_m must be greater than 0 m (got -1.0)"),
    ([1.0, -0.5, 1.0], "model.cell_m[1] must be greater than 0 m (got -0.5)"),
    ([1.0, 1.0, 20.0], "model.cell_m along z (20 m) is larger than model.size_m along z (10 m)"),
])
def test_bad_cell_size(tmp_path, cell, expected):
    data = _site()
    data["model"]["cell_m"] = cell
    assert expected in _message(tmp_path, data)


def test_two_ground_kinds(tmp_path):
    ground = {"flat_elevation_m": 8.0, "benches": [{"name": "a", "floor_m": 8.0,
                                                    "polygon_m": _box(0, 20, 0, 10)}]}
    message = _message(tmp_path, _site(ground=ground))
    assert ("ground gives flat_elevation_m and benches; keep exactly one of "
            "flat_elevation_m, benches, height_grid_csv") in message


def test_bench_polygons_not_covering_the_model(tmp_path):
    ground = {"benches": [{"name": "half", "floor_m": 8.0, "polygon_m": _box(0, 10, 0, 10)}]}
    message = _message(tmp_path, _site(ground=ground))
    assert ("site.yaml: ground.benches: the bench polygons do not cover (x, y) = (10.5, 0.5) m"
            in message)
    assert "add a bench or give ground.surround_elevation_m" in message


def test_yaml_syntax_error_names_the_line(tmp_path):
    text = "name: test pit\nmodel:\n  origin_m: [0, 0, 0\n  size_m: [1, 1, 1]\n"
    with pytest.raises(InputError) as info:
        load_site(_write(tmp_path, text=text))
    message = str(info.value)
    assert message.startswith(f"{tmp_path / 'site.yaml'} line 4, column 9: YAML syntax error")
    assert info.value.__cause__ is None and info.value.__suppress_context__  # no yaml traceback


def test_height_grid_text_in_a_number_names_file_and_line(tmp_path):
    rows = ["0,0,100", "# a comment line still counts for line numbers", "0,20,abc",
            "30,0,100", "30,20,100"]
    message = _message(tmp_path, _site(ground={"height_grid_csv": _csv(tmp_path, rows)}))
    assert f"{tmp_path / 'ground.csv'} line 4: z_m value 'abc' is not a number" in message


@pytest.mark.parametrize("header, rows, expected", [
    ("x_m,y_m,elev", ["0,0,1"], "line 1: the header lacks column z_m"),
    ("x_m,y_m,z_m", ["0,0,1", "0,20,1", "30,0,1", "30,20,1", "0,0,2"],
     "line 6: point (x, y) = (0, 0) repeats line 2; keep one row per point"),
    ("x_m,y_m,z_m", ["0,0,1", "0,20,1", "30,0,1", "30.5,20,1"],
     "the points do not form a full lattice (every x_m with every y_m): 2 of 6"),
    ("x_m,y_m,z_m", ["0,0,1", "0,20,1", "30,0,nan", "30,20,1"],
     "line 4: z_m is 'nan'; every point needs a finite number"),
    ("x_m,y_m,z_m", ["0,0,1", "0,5,1", "5,0,1", "5,5,1"],
     "ground.height_grid_csv: the height grid"),
])
def test_height_grid_csv_problems(tmp_path, header, rows, expected):
    name = _csv(tmp_path, rows, header=header)
    assert expected in _message(tmp_path, _site(ground={"height_grid_csv": name}))


def test_several_problems_reported_at_once(tmp_path):
    data = _site(name="")
    data["model"]["cell_m"] = 0
    data["rock"]["antenna_frequency_mhz"] = -100
    with pytest.raises(InputError) as info:
        load_site(_write(tmp_path, data))
    assert len(info.value.problems) == 3
    message = str(info.value)
    assert message.startswith("3 problems:")
    for expected in ("name must not be empty", "model.cell_m must be greater than 0 m (got 0)",
                     "rock.antenna_frequency_mhz must be greater than 0 MHz (got -100)"):
        assert expected in message


@pytest.mark.parametrize("polygon, expected", [
    ([[0, 0], [1, 0]], "exclusion_zones[0].polygon_m needs at least 3 distinct points (got 2)"),
    ([[0, 0], [1, 0, 5], [1, 1]],
     "exclusion_zones[0].polygon_m[1] must be a point [x, y] of 2 finite numbers in m"),
    ([[0, 0], [1, 1], [2, 2]], "exclusion_zones[0].polygon_m has zero area"),
    ("square", "exclusion_zones[0].polygon_m must be a list of points [x, y] in m"),
])
def test_malformed_polygon(tmp_path, polygon, expected):
    data = _site(exclusion_zones=[{"name": "line", "polygon_m": polygon}])
    assert expected in _message(tmp_path, data)


def _hole(hid, collar=(5, 5, 8), dip=90):
    return {"id": hid, "collar_m": list(collar), "azimuth_deg": 0, "dip_deg": dip, "length_m": 5}


def test_duplicate_borehole_ids(tmp_path):
    message = _message(tmp_path, _site(boreholes=[_hole("BH1"), _hole("BH2"), _hole("BH1")]))
    assert ("boreholes[2].id 'BH1' repeats boreholes[0].id; give every borehole its own id"
            in message)


@pytest.mark.parametrize("changes, expected", [
    ({"boreholes": [_hole("BH1", dip=120)]},
     "site.yaml: boreholes[0].dip_deg must be between 0 and 90 degrees (got 120)"),
    ({"boreholes": [_hole("BH1", collar=(50, 5, 8))]},
     "boreholes[0] (BH1) lies entirely outside the model box (x 0..20, y 0..10, z 0..10 m)"),
    ({"boreholes": [{**_hole("7"), "id": 7}]}, "boreholes[0].id must be text (got 7)"),
    ({"ground": {"flat_elevation_m": 0.2}},
     "model.origin_m: the ground surface (highest point 0.2 m) is nowhere above"),
    ({"ground": {"flat_elevation_m": 8.0, "surround_elevation_m": 9.0}},
     "ground.surround_elevation_m is only used with ground.benches; remove it"),
    ({"rock": {"velocity_m_per_ns": 0.12, "relative_permittivity": 4.0,
               "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100}},
     "rock.velocity_m_per_ns (0.12) and rock.relative_permittivity (4) disagree by 20 %"),
    ({"rock": {"velocity_m_per_ns": 0.5, "conductivity_ms_per_m": 1.0,
               "antenna_frequency_mhz": 100}},
     "rock.velocity_m_per_ns must be between 0.01 and 0.2998 m/ns (got 0.5)"),
    ({"planned_works": [{"name": "road", "kind": "haul road",
                         "polyline_m": [[0, 0, 0], [1, 1, 1]]}]},
     "planned_works[0].kind 'haul road' is not one of haul_road, bench, blast_pattern; "
     "did you mean 'haul_road'?"),
    ({"boreholes": [{**_hole("B1"), "kind": "blasthole"}]},
     "boreholes[0].kind text 'blasthole' is not one of borehole, blast_hole; did you mean 'blast_hole'?"),
    ({"radar": {"system_performance_db": -3}},
     "radar.system_performance_db must be greater than 0 dB (got -3)"),
    ({"radar": {"air_ground_loss": 2}},
     "radar.air_ground_loss is not a known key; did you mean 'air_ground_loss_db'?"),
    ({"radio": {"range_m": 0}}, "radio.range_m must be greater than 0 m (got 0)"),
    ({"radio": {"gateway_m": [1, 2]}}, "radio.gateway_m must be a list of 3 numbers [x, y, z] in m"),
    ({"range_m": 50}, "range_m is not a known key; it belongs under radio"),
])
def test_other_bad_values(tmp_path, changes, expected):
    assert expected in _message(tmp_path, _site(**changes))


def test_radar_and_radio_defaults_when_left_out(tmp_path):
    site = load_site(_write(tmp_path, _site()))
    assert site.radar.system_performance_db == 100.0 and site.radar.air_ground_loss_db is None
    assert site.radio.range_m == 100.0 and site.radio.gateway_m is None
    assert [h.kind for h in load_site(_write(tmp_path, _site(boreholes=[_hole("B1")]))).boreholes] == ["borehole"]


def test_duplicate_yaml_key_is_reported_with_its_line(tmp_path):
    text = yaml.safe_dump(_site(), sort_keys=False)
    assert text.startswith("name: test pit\n")
    message = _message(tmp_path, text=text.replace("\n", "\nname: second name\n", 1))
    assert "line 2: key 'name' appears twice in the same section (first on line 1)" in message


def test_missing_file_names_the_path(tmp_path):
    with pytest.raises(InputError, match="nowhere.yaml: file not found"):
        load_site(tmp_path / "nowhere.yaml")


# ---------------------------------------------------------------- blast patterns with holes

def _blast(**keys):
    work = {"name": "next blast", "kind": "blast_pattern",
            "polygon_m": [[2, 1, 8], [14, 1, 8], [14, 9, 8], [2, 9, 8]]}
    work.update(keys)
    return _site(planned_works=[work])


def test_blast_pattern_with_listed_holes_depth_and_subdrill(tmp_path):
    site = load_site(_write(tmp_path, _blast(hole_depth_m=6, subdrill_m=0.8, holes=[
        {"id": "B1", "collar_m": [4, 5, 8]}, {"id": "B2", "collar_m": [7, 5, 8]}])))
    work = site.planned_works[0]
    assert work.has_holes and [h.id for h in work.holes] == ["B1", "B2"]
    # collar 8 m; the charge ends 6 m down (2 m), the subdrill 0.8 m further (1.2 m)
    assert work.hole_columns_m().ravel().tolist() == pytest.approx([8.0, 2.0, 1.2, 8.0, 2.0, 1.2])


def test_blast_pattern_grid_of_burden_and_spacing(tmp_path):
    # outline x 2..14, y 1..9 (first edge along x): rows half a burden in, at y = 2, 4, 6, 8 for a
    # 2 m burden; holes at x = 3.5, 6.5, 9.5, 12.5 for a 3 m spacing: 4 x 4 = 16 holes, counted by hand
    site = load_site(_write(tmp_path, _blast(hole_depth_m=5, burden_m=2, spacing_m=3)))
    work = site.planned_works[0]
    xy = sorted((h.collar_m[0], h.collar_m[1]) for h in work.holes)
    assert xy == [(x, y) for x in (3.5, 6.5, 9.5, 12.5) for y in (2.0, 4.0, 6.0, 8.0)]
    assert all(h.collar_m[2] == pytest.approx(8.0) for h in work.holes) and work.subdrill_m == 0.0
    assert work.holes[0].id == "R1H01"


@pytest.mark.parametrize("keys, expected", [
    ({"hole_depth_m": 6}, "planned_works[0]: give the blast holes either as holes (a list of {id, collar_m}) "
                          "or as both burden_m and spacing_m (a grid inside polygon_m); got neither"),
    ({"burden_m": 2, "spacing_m": 3}, "planned_works[0].hole_depth_m is missing; add it"),
    ({"hole_depth_m": -1, "burden_m": 2, "spacing_m": 3},
     "planned_works[0].hole_depth_m must be greater than 0 m (got -1)"),
    ({"hole_depth_m": 6, "subdrill_m": -0.5, "burden_m": 2, "spacing_m": 3},
     "planned_works[0].subdrill_m must be at least 0 m (got -0.5)"),
    ({"hole_depth_m": 6, "burden_m": 2}, "got burden_m"),
    ({"hole_depth_m": 6, "burden_m": 40, "spacing_m": 3}, "no hole of a 40 m x 3 m grid falls inside polygon_m"),
    ({"hole_depth_m": 6, "holes": [{"id": "B1", "collar_m": [4, 5]}]},
     "planned_works[0].holes[0].collar_m must be a list of 3 numbers [x, y, z] in m"),
    ({"hole_depth_m": 6, "holes": [{"id": "B1", "collar_m": [4, 5, 8]}, {"id": "B1", "collar_m": [6, 5, 8]}]},
     "planned_works[0].holes[1].id 'B1' repeats an earlier hole"),
    ({"hole_depth_m": 6, "holes": [{"id": "B1", "colar_m": [4, 5, 8]}]},
     "planned_works[0].holes[0].colar_m is not a known key; did you mean 'collar_m'?"),
    ({"hole_depht_m": 6}, "planned_works[0].hole_depht_m is not a known key; did you mean 'hole_depth_m'?"),
])
def test_bad_blast_holes_name_the_field_and_the_fix(tmp_path, keys, expected):
    assert expected in _message(tmp_path, _blast(**keys))


def test_holes_only_on_a_blast_pattern(tmp_path):
    data = _site(planned_works=[{"name": "road", "kind": "haul_road", "polyline_m": [[0, 0, 8], [9, 0, 8]],
                                 "hole_depth_m": 6}])
    assert ("planned_works[0]: hole_depth_m belong(s) to a blast_pattern only, this work is a haul_road; "
            "remove them or set kind: blast_pattern") in _message(tmp_path, data)


def test_demo_site_next_blast_has_holes_with_depth():
    # the demo's next blast: holes of 12 m (as drilled in B07 and B12) and an invented 1 m subdrill
    site = load_site(REFERENCE.parent / "site.yaml")
    blast = next(w for w in site.planned_works if w.kind == "blast_pattern")
    assert blast.hole_depth_m == 12.0 and blast.subdrill_m == 1.0
    drilled = {b.id: b for b in site.boreholes if b.kind == "blast_hole"}
    planned = {h.id: h for h in blast.holes}
    for hid, hole in drilled.items():
        assert planned[hid].collar_m == pytest.approx(hole.collar_m) and hole.length_m == blast.hole_depth_m
