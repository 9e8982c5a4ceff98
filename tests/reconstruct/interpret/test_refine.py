"""Bodies refined against the picks (reconstruct.interpret.refine), on exact picks from outside references.

The picks are the exact first arrivals past a sphere (tests/references/sphere.py:
Fermat's principle, straight, refracted and around paths minimised with
scipy.optimize; Cerveny, V. (2001), Seismic Ray Theory, Cambridge University
Press) plus 0.5 ns of Gaussian noise; air at the SI speed of light, water at
0.033 m/ns (Davis and Annan 1989, tests/REFERENCES.md). Never the project's
own forward model. The refinement starts from a crude cube body (30 % too
large or too small, shifted up to a metre): tests/reconstruct/interpret/refine_cases.py.
"""

import json
import math

import numpy as np
import pytest

from reconstruct.interpret.refine import RefineOptions, refine_bodies, refine_body
from tests.reconstruct.interpret.refine_cases import FILL_AIR, FILL_WATER_OR_CLAY, sphere_case


@pytest.fixture(scope="module")
def air_case():
    return sphere_case(np.random.default_rng(0), radius_m=2.5, depth_m=12.0, fill=FILL_AIR)


@pytest.mark.slow
def test_refined_air_sphere_recovers_its_size_and_roof_within_bounds(air_case):
    fit = refine_body(air_case.inputs, air_case.body, RefineOptions(n_bootstrap=100))
    assert fit.converged, fit.message
    radius = (3.0 * fit.volume_m3.value / (4.0 * math.pi)) ** (1.0 / 3.0)
    assert radius == pytest.approx(air_case.radius_m, rel=0.10)  # the target: within 10 %
    assert fit.volume_m3.low95 <= air_case.volume_m3 <= fit.volume_m3.high95
    assert fit.roof_thickness_m.low95 <= air_case.roof_thickness_m <= fit.roof_thickness_m.high95
    top = air_case.centre_m[2] + air_case.radius_m
    assert fit.roof_elevation_m.low95 <= top <= fit.roof_elevation_m.high95
    for axis in range(3):
        assert fit.centre_m[axis].low95 <= air_case.centre_m[axis] <= fit.centre_m[axis].high95
    # the picks are explained to their noise (chi2 per pick near 1), the crude start was not
    assert fit.chi2_per_pick_refined < 1.5 < fit.chi2_per_pick_cube
    assert fit.nearest_work == "haul road" and not fit.lower_bound
    # the road runs over the sphere at the ground: rock below it = the roof's cover
    below = fit.roof_below_work_m["haul road"]
    assert below.low95 <= air_case.roof_thickness_m <= below.high95
    json.dumps(fit.as_dict())  # voids.json takes it as it stands


def test_no_pick_near_the_body_keeps_it_with_the_reason(air_case):
    inputs = air_case.inputs
    far = np.zeros(inputs.labels.shape, np.int32)
    far[0, 0, 0] = 1  # a body in a corner no pick passes near
    bodies = refine_bodies(type(inputs)(**{**inputs.__dict__, "labels": far}), [air_case.body],
                           RefineOptions(reach_sizes=0.1, n_bootstrap=0))
    assert len(bodies) == 1 and not bodies[0].refined.converged
    assert "fewer than 12 picks" in bodies[0].refined.message
    assert bodies[0].refined.as_dict()["volume_m3"]["value"] is None


@pytest.mark.slow
def test_water_filled_sphere_is_reported_as_a_lower_bound():
    case = sphere_case(np.random.default_rng(4), radius_m=3.0, depth_m=8.0, fill=FILL_WATER_OR_CLAY,
                       spacing_m=6.0, reference_starts=1)
    fit = refine_body(case.inputs, case.body, RefineOptions(n_bootstrap=20))
    assert fit.lower_bound and "first arrivals go around it" in fit.lower_bound_reason
    for figure in (fit.volume_m3, fit.span_m, fit.width_m, fit.length_m):
        assert math.isinf(figure.high95)
    # healing: the picks see at most the body; its lower 95 % end never above the truth
    assert fit.volume_m3.low95 <= case.volume_m3
    assert 0.03 * 0.115 <= fit.velocity_m_per_ns.value <= 0.9 * 0.115
    assert fit.chi2_per_pick_refined < fit.chi2_per_pick_cube


def test_voids_command_writes_each_fit_and_can_be_turned_off(make_inversion_folder):
    import csv

    from reconstruct.cli import main

    folder, _ = make_inversion_folder()
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    body = json.loads((folder / "voids.json").read_text(encoding="utf-8"))["bodies"][0]
    fit = body["refined"]
    assert set(fit) >= {"volume_m3", "roof_thickness_m", "span_m", "standoff_m", "converged", "message",
                        "lower_bound", "chi2_per_pick_refined"}
    assert fit["message"]  # in words, whether the fit converged or not
    with open(folder / "voids.csv", newline="", encoding="utf-8") as handle:
        row = next(csv.DictReader(handle))
    assert "refined_volume_low95_m3" in row and "refined_roof_thickness_low95_m" in row
    assert main(["voids", str(folder), "--no-pictures", "--quiet", "--no-refine"]) == 0
    body = json.loads((folder / "voids.json").read_text(encoding="utf-8"))["bodies"][0]
    assert "refined" not in body


def test_a_damaged_residuals_table_is_one_clear_error(tmp_path):
    from reconstruct.errors import InputError
    from reconstruct.interpret.refine import read_pick_times

    (tmp_path / "nodes_used.csv").write_text("node_id,x_m,y_m,z_m\nA,0,0,0\nB,10,0,0\n", encoding="utf-8")
    (tmp_path / "residuals.csv").write_text(
        "input_line,tx,rx,time_ns,predicted_time_ns,sigma_ns\n2,A,B,87.1,86.9,0.5\n3,A,B,eighty,86.9,0.5\n",
        encoding="utf-8")
    with pytest.raises(InputError, match=r"residuals.csv: line 3: .*not a number"):
        read_pick_times(tmp_path, 0.5)
    (tmp_path / "residuals.csv").write_text(
        "input_line,tx,rx,time_ns,predicted_time_ns,sigma_ns\n2,A,C,87.1,86.9,\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"line 2: 'C' missing or not in nodes_used.csv"):
        read_pick_times(tmp_path, 0.5)
