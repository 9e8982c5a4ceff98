"""Tests for deviated holes: surveys in the site file or a CSV, node positions from them,
and the planned-against-surveyed record.

Outside checks: the geometry of a circular arc (a hole building inclination at a
constant rate from vertical to horizontal over pi R / 2 is a quarter circle of
radius R; the minimum curvature method is exact on it: Sawaryn and Thorogood
2005, A compendium of directional calculations based on the minimum curvature
method, SPE Drilling & Completion 20(1)); wellpathpy (PyPI) for the positions of
a general survey. The site values are invented.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import yaml

from reconstruct.errors import InputError
from reconstruct.io.site import load_site
from reconstruct.io.surveys import hole_deviation_rows
from reconstruct.io.tables import nodes_on_surveyed_holes, read_nodes

RADIUS_M = 20.0
ARC_M = math.pi * RADIUS_M / 2.0  # about 31.4 m


def _site(hole_changes=None):
    hole = {"id": "BH1", "collar_m": [10, 10, 40], "azimuth_deg": 90, "dip_deg": 90, "length_m": ARC_M}
    hole.update(hole_changes or {})
    return {
        "name": "deviated test",
        "model": {"origin_m": [0, 0, 0], "size_m": [40, 20, 42], "cell_m": 1.0},
        "ground": {"flat_elevation_m": 40.0},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "boreholes": [hole],
    }


def _quarter_circle_survey(n=4):
    md = np.linspace(0.0, ARC_M, n)
    return [[float(d), float(np.degrees(d / RADIUS_M)), 90.0] for d in md]


def _load(tmp_path, data):
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return load_site(path)


def _message(tmp_path, data):
    with pytest.raises(InputError) as info:
        _load(tmp_path, data)
    return str(info.value)


def test_inline_survey_places_points_on_the_arc_and_keeps_the_plan(tmp_path):
    hole = _load(tmp_path, _site({"survey": _quarter_circle_survey()})).boreholes[0]
    depth = np.array([0.0, 7.0, 19.0, ARC_M])
    angle = depth / RADIUS_M
    exact = np.column_stack([10 + RADIUS_M * (1 - np.cos(angle)), np.full(4, 10.0), 40 - RADIUS_M * np.sin(angle)])
    assert np.max(np.abs(hole.point_at(depth) - exact)) < 1e-9
    assert np.allclose(hole.planned_point_at(depth), np.column_stack([np.full(4, 10.0), np.full(4, 10.0), 40 - depth]))
    assert np.allclose(hole.direction_at(ARC_M), [1.0, 0.0, 0.0], atol=1e-9)  # horizontal, east, at the toe
    # the depth of a point on the hole is found back to well under a millimetre
    assert hole.depth_nearest_m(hole.point_at([12.345]))[0] == pytest.approx(12.345, abs=1e-4)


def test_survey_csv_relative_to_the_site_file_agrees_with_wellpathpy(tmp_path):
    wellpathpy = pytest.importorskip("wellpathpy")
    rows = [(0.0, 0.0, 0.0), (10.0, 2.0, 30.0), (20.0, 5.0, 45.0), (35.0, 9.0, 60.0)]
    (tmp_path / "holes").mkdir()
    (tmp_path / "holes" / "bh1.csv").write_text(
        "# from the drilling contractor\nmeasured_depth_m,inclination_deg,azimuth_deg,tool\n"
        + "".join(f"{md},{inc},{az},gyro\n" for md, inc, az in rows), encoding="utf-8")
    hole = _load(tmp_path, _site({"survey_csv": "holes/bh1.csv", "length_m": 35.0})).boreholes[0]
    md, inc, az = (np.array(c) for c in zip(*rows))
    tvd, northing, easting, _ = wellpathpy.mincurve.minimum_curvature(md, inc, az)
    assert np.max(np.abs(hole.point_at(md) - (np.array([10.0, 10.0, 40.0])
                                              + np.column_stack([easting, northing, -tvd])))) < 1e-9


@pytest.mark.parametrize("survey, fragment", [
    ([[2, 0, 0], [10, 1, 0]], "must start at the collar"),
    ([[0, 0, 0], [10, 1, 0], [10, 2, 0]], "does not increase"),
    ([[0, 0, 0], [10, 190, 0]], "inclination 190"),
    ([[0, 0, 0], [10, 1, 400]], "azimuth 400"),
    ([[0, 0], [10, 1, 0]], "boreholes[0].survey[0] must be a station of three"),
    ("0,0,0", "boreholes[0].survey must be a list of stations"),
])
def test_bad_inline_surveys_name_the_station_and_the_fix(tmp_path, survey, fragment):
    assert fragment in _message(tmp_path, _site({"survey": survey}))


def test_bad_survey_files_name_the_file_and_line(tmp_path):
    assert "not found" in _message(tmp_path, _site({"survey_csv": "none.csv"}))
    (tmp_path / "s.csv").write_text("measured_depth_m,inclination_deg\n0,0\n", encoding="utf-8")
    assert "lacks column azimuth_deg" in _message(tmp_path, _site({"survey_csv": "s.csv"}))
    (tmp_path / "s.csv").write_text("measured_depth_m,inclination_deg,azimuth_deg\n0,0,0\n5,abc,0\n",
                                    encoding="utf-8")
    message = _message(tmp_path, _site({"survey_csv": "s.csv"}))
    assert "line 3, column inclination_deg" in message and "'abc'" in message
    both = _site({"survey_csv": "s.csv", "survey": [[0, 0, 0]]})
    assert "both survey and survey_csv" in _message(tmp_path, both)


def test_nodes_take_the_surveyed_position_at_their_depth(tmp_path):
    site = _load(tmp_path, _site({"survey": _quarter_circle_survey()}))
    (tmp_path / "nodes.csv").write_text(
        "node_id,x_m,y_m,z_m,kind,borehole,depth_along_hole_m\n"
        "S1,5,5,40,surface,,\n"
        "H1,10,10,30,borehole,BH1,10\n"  # planned position: 10 m down the vertical line
        "H2,10,10,25,borehole,BH1,\n",  # no depth given: keeps the table's position
        encoding="utf-8")
    nodes = read_nodes(tmp_path / "nodes.csv")
    moved, shift = nodes_on_surveyed_holes(nodes, site.boreholes)
    angle = 10.0 / RADIUS_M
    expected = [10 + RADIUS_M * (1 - math.cos(angle)), 10.0, 40 - RADIUS_M * math.sin(angle)]
    assert np.allclose(moved.xyz_m[1], expected, atol=1e-9)
    assert np.allclose(moved.xyz_m[[0, 2]], nodes.xyz_m[[0, 2]])
    assert shift[1] == pytest.approx(np.linalg.norm(np.array(expected) - [10, 10, 30])) and shift[[0, 2]].max() == 0
    assert np.allclose(nodes.xyz_m[1], [10, 10, 30])  # the table read is not modified


def test_bad_depth_along_hole_names_the_line(tmp_path):
    (tmp_path / "nodes.csv").write_text("node_id,x_m,y_m,z_m,borehole,depth_along_hole_m\nH1,1,1,1,BH1,-2\n",
                                        encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_nodes(tmp_path / "nodes.csv")
    assert "line 2, column depth_along_hole_m" in str(info.value)


def test_planned_against_surveyed_record(tmp_path):
    site = _load(tmp_path, _site({"survey": _quarter_circle_survey()}))
    (row,) = hole_deviation_rows(site.boreholes)
    # planned: straight down ARC_M; drilled: a quarter circle ending R east and R down
    toe_offset = math.hypot(RADIUS_M, ARC_M - RADIUS_M)
    assert row["toe_offset_m"] == pytest.approx(toe_offset, abs=1e-6)
    assert row["largest_offset_m"] == pytest.approx(toe_offset, abs=1e-6)
    assert row["surveyed_toe_m"] == pytest.approx([10 + RADIUS_M, 10.0, 40 - RADIUS_M], abs=1e-3)
    assert hole_deviation_rows(_load(tmp_path, _site()).boreholes) == []


def test_the_run_record_and_the_reports_show_planned_against_surveyed(tmp_path):
    from reconstruct.pipeline import node_positions_from_surveys
    from reconstruct.report.html import hole_deviation_html

    site = _load(tmp_path, _site({"survey": _quarter_circle_survey()}))
    (tmp_path / "nodes.csv").write_text("node_id,x_m,y_m,z_m,kind,borehole,depth_along_hole_m\n"
                                        "H1,10,10,30,borehole,BH1,10\nH2,10,10,20,borehole,BH1,20\n",
                                        encoding="utf-8")
    said = []
    nodes, record = node_positions_from_surveys(site, read_nodes(tmp_path / "nodes.csv"), said.append)
    assert record["nodes_from_surveys"] == 2 and [m["node"] for m in record["moved"]] == ["H1", "H2"]
    assert record["largest_node_shift_m"] == pytest.approx(max(m["shift_m"] for m in record["moved"]), abs=1e-3)
    assert said and "2 node(s) placed on the surveyed paths" in said[0]
    page = hole_deviation_html(record["holes_with_survey"], record["nodes_from_surveys"])
    assert "Holes as drilled" in page and "BH1" in page
    assert f"{math.hypot(RADIUS_M, ARC_M - RADIUS_M):.2f}" in page  # the toe's offset from the plan
    assert hole_deviation_html([]) == ""
