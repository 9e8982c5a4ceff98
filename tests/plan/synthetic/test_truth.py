"""Tests for plan.synthetic.truth: the truth model of synthetic surveys.

Values are invented. Fill velocities are checked against Davis and Annan (1989)
and the speed of light against scipy.constants (SI definition of c).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.constants

from plan.synthetic.truth import (
    FILL_VELOCITY_M_PER_NS,
    Body,
    TruthModel,
    load_truth,
    parse_truth,
    truth_velocity,
)
from reconstruct.errors import InputError
from reconstruct.model.grid import Grid, ground_mask

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9


def _truth(**changes):
    data = {
        "background_velocity_m_per_ns": 0.115,
        "bodies": [{"name": "cavity", "shape": "ellipsoid", "centre_m": [40, 22, 101],
                    "semi_axes_m": [5, 4, 2.5], "fill": "air"}],
        "noise": {"sigma_ns": 0.5, "time_zero_sigma_ns": 1.5, "seed": 7},
        "refine": 2,
    }
    data.update(changes)
    return data


def _body(**changes):
    body = {"name": "b", "shape": "box", "centre_m": [1, 2, 3], "size_m": [2, 2, 2], "fill": "water"}
    body.update(changes)
    return body


def _problems(data) -> list[str]:
    with pytest.raises(InputError) as info:
        parse_truth(data, source="truth.yaml")
    return info.value.problems


# ---------------------------------------------------------------- parsing

def test_docstring_example_parses():
    truth = parse_truth(_truth(), source="truth.yaml")
    assert isinstance(truth, TruthModel)
    assert truth.background_velocity_m_per_ns == 0.115
    assert truth.noise_sigma_ns == 0.5 and truth.time_zero_sigma_ns == 1.5
    assert truth.seed == 7 and truth.refine == 2 and truth.source == "truth.yaml"
    (body,) = truth.bodies
    assert body.shape == "ellipsoid"
    assert body.centre_m == (40.0, 22.0, 101.0)
    assert body.half_size_m == (5.0, 4.0, 2.5)


def test_defaults():
    truth = parse_truth({})
    assert truth.background_velocity_m_per_ns is None  # the site's rock velocity is used
    assert truth.bodies == ()
    assert (truth.noise_sigma_ns, truth.time_zero_sigma_ns, truth.seed, truth.refine) == (0.5, 0.0, 0, 2)


def test_box_size_is_halved_into_half_edges():
    (body,) = parse_truth({"bodies": [_body(size_m=[2, 4, 6])]}).bodies
    assert body.half_size_m == (1.0, 2.0, 3.0)


def test_unknown_keys_are_rejected_with_a_suggestion():
    problems = _problems(_truth(bodys=[]))
    assert problems == ["truth.yaml: bodys: unknown key; did you mean 'bodies'?"]
    problems = _problems(_truth(noise={"sigma": 0.5}))
    assert "truth.yaml: noise.sigma: unknown key; did you mean 'sigma_ns'?" in problems
    body = _body()
    body["centre"] = body.pop("centre_m")
    problems = _problems({"bodies": [body]})
    assert "truth.yaml: bodies[0].centre: unknown key; did you mean 'centre_m'?" in problems
    assert any("bodies[0].centre_m must be a list of three numbers" in p for p in problems)


def test_unknown_key_without_a_near_match_lists_the_allowed_keys():
    (problem,) = _problems(_truth(zzz=1))
    assert "zzz: unknown key; allowed: background_velocity_m_per_ns, bodies, noise, refine" in problem


def test_bad_fill_is_rejected():
    problems = _problems({"bodies": [_body(fill="sand")]})
    assert "truth.yaml: bodies[0].fill must be one of air, water, clay (got 'sand')" in problems


def test_missing_velocity_is_rejected():
    body = _body()
    del body["fill"]
    problems = _problems({"bodies": [body]})
    assert problems == ["truth.yaml: bodies[0]: give a fill (air, water, clay) or velocity_m_per_ns"]


def test_velocity_faster_than_light_is_rejected():
    problems = _problems({"bodies": [_body(velocity_m_per_ns=0.5)]})
    assert problems == ["truth.yaml: bodies[0].velocity_m_per_ns 0.5 is faster than light"]


def test_velocity_overrides_fill():
    (body,) = parse_truth({"bodies": [_body(fill="clay", velocity_m_per_ns=0.07)]}).bodies
    assert body.fill == "clay" and body.velocity_m_per_ns == 0.07


@pytest.mark.parametrize("changes, expected", [
    ({"shape": "sphere"}, "bodies[0].shape must be one of ellipsoid, box (got 'sphere')"),
    ({"size_m": [2, 0, 2]}, "bodies[0].size_m[1] must be > 0 (got 0)"),
    ({"centre_m": [1, 2]}, "bodies[0].centre_m must be a list of three numbers [x, y, z]"),
    ({"centre_m": [1, "a", 3]}, "bodies[0].centre_m[1] must be a number (got 'a')"),
    ({"velocity_m_per_ns": -0.1}, "bodies[0].velocity_m_per_ns must be > 0 (got -0.1)"),
])
def test_bad_body_fields_name_the_key_path(changes, expected):
    problems = _problems({"bodies": [_body(**changes)]})
    assert any(expected in p for p in problems), problems


@pytest.mark.parametrize("data, expected", [
    ({"refine": 0}, "refine must be a whole number from 1 to 8 (got 0)"),
    ({"refine": 2.5}, "refine must be a whole number from 1 to 8 (got 2.5)"),
    ({"noise": {"sigma_ns": -1}}, "noise.sigma_ns must be >= 0.0 (got -1)"),
    ({"noise": {"seed": -3}}, "noise.seed must be a whole number >= 0 (got -3)"),
    ({"noise": {"seed": True}}, "noise.seed must be a whole number >= 0 (got True)"),
    ({"noise": 3}, "noise must be a mapping"),
    ({"bodies": {"name": "x"}}, "bodies must be a list"),
    ({"background_velocity_m_per_ns": "fast"}, "background_velocity_m_per_ns must be a number"),
])
def test_bad_top_level_fields(data, expected):
    problems = _problems(data)
    assert any(expected in p for p in problems), problems


def test_every_problem_is_listed_together():
    problems = _problems({"refine": 9, "bodies": [_body(fill="sand"), _body(shape="cone")]})
    assert len(problems) >= 3
    assert all(p.startswith("truth.yaml: ") for p in problems)


def test_not_a_mapping_is_rejected():
    with pytest.raises(InputError, match="the file must hold a mapping of keys"):
        parse_truth([1, 2], source="truth.yaml")


def test_load_truth_reports_yaml_line(tmp_path):
    path = tmp_path / "truth.yaml"
    path.write_text("refine: 2\nnoise:\n  sigma_ns: 0.5: 1\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_truth(path)
    assert f"{path}: line 3" in str(info.value)
    assert "not valid YAML" in str(info.value)


def test_load_truth_missing_file(tmp_path):
    path = tmp_path / "nowhere.yaml"
    with pytest.raises(InputError) as info:
        load_truth(path)
    assert str(path) in str(info.value)
    assert "cannot read the truth model" in str(info.value) and "check the path" in str(info.value)


def test_load_truth_reads_a_file(tmp_path):
    path = tmp_path / "truth.yaml"
    path.write_text("bodies:\n  - {shape: box, centre_m: [0, 0, 0], size_m: [1, 1, 1], fill: clay}\n",
                    encoding="utf-8")
    truth = load_truth(path)
    assert truth.source == str(path)
    assert truth.bodies[0].velocity_m_per_ns == 0.06


# ---------------------------------------------------------------- fill velocities

def test_fill_velocities_follow_davis_and_annan_1989():
    # Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
    # high-resolution mapping of soil and rock stratigraphy, Geophysical
    # Prospecting 37(5), 531-551, table of typical properties: fresh water
    # 0.033 m/ns, clays 0.06 m/ns, air 0.3 m/ns (here exactly c, SI definition
    # from scipy.constants).
    assert FILL_VELOCITY_M_PER_NS["air"] == pytest.approx(SPEED_OF_LIGHT_M_PER_NS, rel=1e-15)
    assert FILL_VELOCITY_M_PER_NS["air"] == pytest.approx(0.3, abs=0.001)
    assert FILL_VELOCITY_M_PER_NS["water"] == pytest.approx(0.033, abs=1e-12)
    assert FILL_VELOCITY_M_PER_NS["clay"] == pytest.approx(0.06, abs=1e-12)
    assert set(FILL_VELOCITY_M_PER_NS) == {"air", "water", "clay"}


@pytest.mark.parametrize("fill, expected", [("air", SPEED_OF_LIGHT_M_PER_NS), ("water", 0.033), ("clay", 0.06)])
def test_fill_sets_the_body_velocity(fill, expected):
    # Davis and Annan (1989), as above
    (body,) = parse_truth({"bodies": [_body(fill=fill)]}).bodies
    assert body.velocity_m_per_ns == pytest.approx(expected, rel=1e-12)


# ---------------------------------------------------------------- Body.contains

def _ellipsoid():
    return Body("e", "ellipsoid", (10.0, 20.0, 30.0), (4.0, 2.0, 1.0), "air", SPEED_OF_LIGHT_M_PER_NS)


def _box():
    return Body("b", "box", (10.0, 20.0, 30.0), (4.0, 2.0, 1.0), "clay", 0.06)


def test_ellipsoid_contains_points_by_its_equation():
    # (x/a)^2 + (y/b)^2 + (z/c)^2 <= 1 about the centre (geometry of the ellipsoid)
    e = _ellipsoid()
    inside = [(10, 20, 30), (13.99, 20, 30), (10, 21.99, 30), (10, 20, 30.99), (6.01, 20, 30)]
    outside = [(14.01, 20, 30), (10, 22.01, 30), (10, 20, 28.99), (13.9, 21.9, 30.9)]
    assert e.contains(inside).all()
    assert not e.contains(outside).any()
    # a corner of the bounding box is outside the ellipsoid but inside the box
    assert not e.contains([13.9, 21.9, 30.9])
    assert _box().contains([13.9, 21.9, 30.9])


def test_box_contains_points_within_half_edges():
    b = _box()
    inside = [(10, 20, 30), (6, 18, 29), (14, 22, 31), (13.99, 18.01, 30.99)]
    outside = [(14.01, 20, 30), (10, 17.99, 30), (10, 20, 31.01), (0, 0, 0)]
    assert b.contains(inside).all()
    assert not b.contains(outside).any()


def test_contains_broadcasts_over_grid_shaped_points():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (5, 4, 3))
    assert _box().contains(grid.cell_centres_m()).shape == (5, 4, 3)


@pytest.mark.parametrize("shape, volume", [
    ("ellipsoid", 4.0 / 3.0 * math.pi * 4 * 2 * 1),  # volume of an ellipsoid, 4/3 pi a b c
    ("box", 8 * 4 * 2),  # edges 8 x 4 x 2 m (twice the half edges)
])
def test_volume_matches_formula_and_counted_points(shape, volume):
    body = _ellipsoid() if shape == "ellipsoid" else _box()
    assert body.volume_m3 == pytest.approx(volume, rel=1e-12)
    # count points of a fine lattice (0.05 m) inside the body
    step = 0.05
    axes = [np.arange(c - h, c + h, step) + step / 2 for c, h in zip(body.centre_m, body.half_size_m)]
    points = np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)
    counted = body.contains(points).sum() * step**3
    assert counted == pytest.approx(volume, rel=0.01)


# ---------------------------------------------------------------- truth_velocity

def _flat_grid():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (10, 8, 10))
    ground = ground_mask(grid, lambda x, y: np.full(np.shape(x), 6.0))
    return grid, ground


def test_truth_velocity_paints_bodies_only_in_ground():
    grid, ground = _flat_grid()
    # an air-filled ellipsoid straddling the ground surface at 6 m, and a clay box
    truth = parse_truth({
        "background_velocity_m_per_ns": 0.1,
        "bodies": [
            {"shape": "ellipsoid", "centre_m": [5, 4, 6], "semi_axes_m": [3, 3, 3], "fill": "air"},
            {"shape": "box", "centre_m": [2, 2, 2], "size_m": [2, 2, 2], "fill": "clay"},
        ],
    })
    v = truth_velocity(truth, grid, ground, rock_velocity_m_per_ns=0.12)
    assert v.shape == grid.shape
    x, y, z = np.meshgrid(*(np.arange(n) + 0.5 for n in grid.shape), indexing="ij")
    is_ground = z < 6.0
    in_ellipsoid = ((x - 5) / 3) ** 2 + ((y - 4) / 3) ** 2 + ((z - 6) / 3) ** 2 <= 1
    in_box = (np.abs(x - 2) <= 1) & (np.abs(y - 2) <= 1) & (np.abs(z - 2) <= 1)
    np.testing.assert_array_equal(ground, is_ground)
    expected = np.where(is_ground, 0.1, SPEED_OF_LIGHT_M_PER_NS)
    expected[is_ground & in_ellipsoid] = SPEED_OF_LIGHT_M_PER_NS
    expected[is_ground & in_box] = 0.06
    np.testing.assert_allclose(v, expected, rtol=1e-15)
    # the ellipsoid reaches above ground, yet no air cell changed and body cells exist on both sides
    assert (in_ellipsoid & ~is_ground).any() and (in_ellipsoid & is_ground).any()
    np.testing.assert_allclose(v[~is_ground], SPEED_OF_LIGHT_M_PER_NS, rtol=1e-15)


def test_water_body_above_ground_leaves_air_at_c():
    grid, ground = _flat_grid()
    truth = parse_truth({"bodies": [{"shape": "box", "centre_m": [5, 4, 8], "size_m": [4, 4, 2],
                                     "fill": "water"}]})
    v = truth_velocity(truth, grid, ground, rock_velocity_m_per_ns=0.12)
    np.testing.assert_allclose(v[~ground], SPEED_OF_LIGHT_M_PER_NS, rtol=1e-15)
    np.testing.assert_allclose(v[ground], 0.12, rtol=1e-15)


def test_later_bodies_win_and_background_defaults_to_rock():
    grid, ground = _flat_grid()
    truth = parse_truth({"bodies": [
        {"shape": "box", "centre_m": [5, 4, 3], "size_m": [4, 4, 4], "fill": "water"},
        {"shape": "box", "centre_m": [5, 4, 3], "size_m": [2, 2, 2], "fill": "clay"},
    ]})
    v = truth_velocity(truth, grid, ground, rock_velocity_m_per_ns=0.12)
    assert v[5, 4, 3] == 0.06  # centre (5.5, 4.5, 3.5): inside both, the later (clay) wins
    assert v[3, 2, 1] == 0.033  # centre (3.5, 2.5, 1.5): only in the water box
    assert v[0, 0, 0] == 0.12  # rock velocity of the site


def test_outlier_settings_are_read_and_checked():
    truth = parse_truth({"noise": {"outlier_fraction": 0.02, "outlier_size_ns": 15}})
    assert (truth.outlier_fraction, truth.outlier_size_ns) == (0.02, 15.0)
    assert (parse_truth({}).outlier_fraction, parse_truth({}).outlier_size_ns) == (0.0, 20.0)
    problems = _problems({"noise": {"outlier_fraction": 0.7, "outlier_size_ns": -1}})
    assert any("noise.outlier_fraction must be at most 0.5" in p for p in problems)
    assert any("noise.outlier_size_ns must be > 0" in p for p in problems)
