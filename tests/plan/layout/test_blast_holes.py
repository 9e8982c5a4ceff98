"""Tests for ``plan.layout.blast_holes``: nodes placed in blast holes are flagged (radio near explosives).

Outside facts: radio-frequency energy can fire electric detonators, so nodes
and radios keep the separation distances of the applicable standard from
charged or primed holes (BS 6657, cited from memory; common practice, no
published source quoted here for the distances); the node-in-hole test is
plain geometry (distance from a point to a vertical line, by hand). Sites and
nodes are invented.
"""

from __future__ import annotations

import pytest

from plan.cli import main
from plan.layout.blast_holes import IN_HOLE_TOLERANCE_M, blast_hole_warning, nodes_in_blast_holes
from reconstruct.io.site import load_site
from reconstruct.report.html import CAUTIONS, escape
from tests.cli_helpers import run_main

SITE_YAML = """\
# invented test site: one drilled blast hole B1, and a pattern with two planned holes P1, P2
name: blast test
model: {origin_m: [0, 0, 0], size_m: [20, 10, 20], cell_m: 1.0}
ground: {flat_elevation_m: 18}
rock: {velocity_m_per_ns: 0.12, conductivity_ms_per_m: 2.5, antenna_frequency_mhz: 100}
boreholes:
  - {id: BH1, collar_m: [4, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 14}
  - {id: B1, kind: blast_hole, collar_m: [10, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 8}
planned_works:
  - name: next blast
    kind: blast_pattern
    polygon_m: [[12, 2, 18], [19, 2, 18], [19, 8, 18], [12, 8, 18]]
    hole_depth_m: 8
    subdrill_m: 1
    holes: [{id: P1, collar_m: [14, 5, 18]}, {id: P2, collar_m: [17, 5, 18]}]
"""


@pytest.fixture()
def site_path(tmp_path):
    path = tmp_path / "site.yaml"
    path.write_text(SITE_YAML, encoding="utf-8")
    return path


def test_nodes_in_drilled_and_planned_blast_holes_are_found(site_path):
    site = load_site(site_path)
    ids = ["BH1-01", "B1-01", "B1-deep", "P1-01", "P2-below", "S1", "near-P2"]
    xyz = [[4, 5, 12],          # in an ordinary borehole: not a blast hole
           [10, 5, 14],         # 4 m down blast hole B1
           [10, 5, 9],          # below B1's 8 m: 1 m past its toe, farther than the tolerance
           [14, 5, 10.5],       # in planned hole P1 (collar 18, toe 18 - 8 - 1 = 9)
           [17, 5, 7.0],        # 2 m below P2's toe
           [6, 5, 18],          # on the surface
           [17 + 0.8 * IN_HOLE_TOLERANCE_M, 5, 12]]  # inside the tolerance of P2's axis
    found = dict(nodes_in_blast_holes(site, ids, xyz))
    assert set(found) == {"B1-01", "P1-01", "near-P2"}
    assert found["B1-01"] == "blast hole B1"
    assert found["P1-01"] == "planned hole P1 of 'next blast'"
    warning = blast_hole_warning(site, ids, xyz)
    assert warning.startswith("3 nodes are placed in blast holes (B1-01 in blast hole B1;")
    assert "electric detonators" in warning and "BS 6657" in warning and "explosives rules" in warning
    assert blast_hole_warning(site, ["S1"], [[6, 5, 18]]) is None


def test_plan_report_and_command_warn_about_nodes_in_blast_holes(site_path, tmp_path):
    plan = tmp_path / "plan"
    plan.mkdir()
    rows = ["node_id,x_m,y_m,z_m,kind,borehole", "BH1-01,4,5,14,borehole,BH1", "BH1-02,4,5,8,borehole,BH1",
            "B1-01,10,5,14,borehole,B1", "S1,2,2,18,surface,", "S2,18,8,18,surface,", "S3,10,9,18,surface,"]
    (plan / "nodes.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    code, out, err = run_main(main, ["report", plan, "--site", site_path, "--quiet"])
    assert code == 0, err
    assert "WARNING: 1 node is placed in blast holes (B1-01 in blast hole B1)" in out
    page = (plan / "plan_report.html").read_text(encoding="utf-8")
    assert "Warning: nodes in blast holes" in page and "B1-01 in blast hole B1" in page
    for caution in CAUTIONS:  # the radio caution is among the cautions of every report
        assert escape(caution) in page
    assert any("BS 6657" in c and "electric detonators" in c for c in CAUTIONS)


def test_layout_command_warns_when_it_puts_nodes_in_a_blast_hole(site_path, tmp_path):
    out_dir = tmp_path / "layout"
    code, out, err = run_main(main, ["layout", "--site", site_path, "--out", out_dir, "--budget", "12", "--quiet"])
    assert code == 0, err
    assert "WARNING:" in out and "in blast hole B1" in out
