"""Tests for ``voidcube reconstruct check-picks`` (``reconstruct.report.pick_checks``) and the checks run by ``voidcube reconstruct invert``.

In-process runs of ``reconstruct.cli.main`` on a small invented site (flat
ground, two boreholes and four surface nodes) with picks simulated by our own
generator (straight rays, seeded clock offsets, noise and 2 % gross outliers).

Outside sources: the speed of light from ``scipy.constants`` (a pick at half
the straight distance over c is impossible); the HTML is parsed with the
standard library's ``html.parser``; CSV files are read with ``csv``.
"""

from __future__ import annotations

import csv
import hashlib
import html
import html.parser
import json
import re

import numpy as np
import pytest
import scipy.constants

from plan.synthetic.simulate import simulate_picks
from plan.synthetic.truth import parse_truth
from reconstruct.cli import main
from reconstruct.report.html import CAUTIONS
from reconstruct.io.site import load_site
from reconstruct.io.tables import read_nodes
from tests.cli_helpers import run_main

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9

SITE = """\
name: pick checks box (invented)
model: {origin_m: [0, 0, 0], size_m: [24, 8, 24], cell_m: 1.0}
ground: {flat_elevation_m: 22}
rock: {velocity_m_per_ns: 0.12, conductivity_ms_per_m: 1.0, antenna_frequency_mhz: 100}
"""


def _inputs(folder):
    folder.mkdir(parents=True, exist_ok=True)
    rows = ["node_id,x_m,y_m,z_m,kind,borehole"]
    xyz = {}
    for name, x in (("A", 4.0), ("B", 20.0)):
        for k, z in enumerate(np.arange(4.0, 20.0, 2.0)):
            xyz[f"{name}{k}"] = (x, 4.0, z)
            rows.append(f"{name}{k},{x},4,{z},borehole,{name}")
    for k, x in enumerate((2.0, 9.0, 15.0, 22.0)):
        xyz[f"S{k}"] = (x, 4.0, 22.0)
        rows.append(f"S{k},{x},4,22,surface,")
    site, nodes, picks = folder / "site.yaml", folder / "nodes.csv", folder / "picks.csv"
    site.write_text(SITE, encoding="utf-8")
    nodes.write_text("\n".join(rows) + "\n", encoding="utf-8")
    truth = parse_truth({"noise": {"sigma_ns": 0.3, "time_zero_sigma_ns": 1.0, "seed": 4,
                                   "outlier_fraction": 0.02, "outlier_size_ns": 20}, "refine": 1})
    table = read_nodes(nodes)
    survey = simulate_picks(load_site(site), table, truth, rays="straight")
    lines = ["tx,rx,time_ns,sigma_ns"]
    for a, b, t, s in zip(survey.tx, survey.rx, survey.time_ns, survey.sigma_ns):
        lines.append(f"{table.ids[a]},{table.ids[b]},{t:.3f},{s:.3f}")
    picks.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return site, nodes, picks, xyz


def _run(argv):
    return run_main(main, argv)


def _read_csv(path):
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def _sha(path):
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _plant_faster_than_air(picks, xyz, data_lines):
    """Rewrite the given physical lines with half the air time; returns them."""
    text = picks.read_text(encoding="utf-8").splitlines()
    for n in data_lines:
        tx, rx, _, sigma = text[n - 1].split(",")
        d = float(np.linalg.norm(np.subtract(xyz[tx], xyz[rx])))
        text[n - 1] = f"{tx},{rx},{0.5 * d / SPEED_OF_LIGHT_M_PER_NS:.3f},{sigma}"
    picks.write_text("\n".join(text) + "\n", encoding="utf-8")


class _Images(html.parser.HTMLParser):
    def __init__(self):
        super().__init__()
        self.images = 0

    def handle_starttag(self, tag, attrs):
        if tag == "img" and dict(attrs).get("src", "").startswith("data:image/png;base64,"):
            self.images += 1


def test_pick_checks_write_every_output_and_flag_input_lines(tmp_path):
    site, nodes, picks, xyz = _inputs(tmp_path / "in")
    _plant_faster_than_air(picks, xyz, [5])
    before = _sha(picks)
    out = tmp_path / "qc"
    code, stdout, stderr = _run(["check-picks", "--site", site, "--nodes", nodes, "--picks", picks, "--out", out])
    assert code == 0, stderr
    assert sorted(p.name for p in out.iterdir()) == ["manifest.json", "node_time_zero.csv", "pick_checks.csv",
                                                     "pick_checks.html", "pick_checks.json"]
    assert _sha(picks) == before  # the pick table is never changed
    rows = _read_csv(out / "pick_checks.csv")
    n_picks = len(picks.read_text().splitlines()) - 1
    assert len(rows) == n_picks
    by_line = {int(r["input_line"]): r for r in rows}
    assert "faster_than_air" in by_line[5]["flags"].split(";") and by_line[5]["action"] == "excluded"
    assert by_line[5]["reciprocal_input_line"] != ""  # every pair was measured both ways
    summary = json.loads((out / "pick_checks.json").read_text())
    assert summary["picks"]["flag_counts"]["faster_than_air"] >= 1
    assert summary["usable"] is True  # one impossible pick of 552 is under 1 %
    assert summary["reciprocity"]["pairs"] == n_picks // 2
    assert summary["sigma"]["pick_noise_from_reciprocity_ns"] == pytest.approx(0.3, rel=0.25)
    assert set(summary["time_zero"]["per_node"]) == set(xyz)
    time_zero = _read_csv(out / "node_time_zero.csv")
    assert [r["node_id"] for r in time_zero] == list(xyz)
    assert list(time_zero[0]) == ["node_id", "time_zero_ns", "delay_ns", "depth_m", "picks_as_tx", "picks_as_rx",
                                  "reciprocal_pairs", "median_residual_ns", "group_score", "off_as_group",
                                  "likely_cause"]
    assert {r["off_as_group"] for r in time_zero} <= {"yes", "no"}
    assert summary["nodes_off_as_group"]["count"] == sum(r["off_as_group"] == "yes" for r in time_zero)
    page = (out / "pick_checks.html").read_text(encoding="utf-8")
    text = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", page)
    assert "QC" not in text and "quality control" not in text.lower()  # docs/glossary.md: "pick checks"
    assert "Node time-zero offsets" in page and "input line" in page
    assert all(html.escape(c, quote=True) in page for c in CAUTIONS)
    parser = _Images()
    parser.feed(page)
    assert parser.images == 5  # time-distance, reciprocity, histogram, node map, apparent velocity by angle
    manifest = json.loads((out / "manifest.json").read_text())
    assert set(manifest["outputs"]) == {"manifest.json", "node_time_zero.csv", "pick_checks.csv", "pick_checks.html",
                                        "pick_checks.json"}
    assert {k for k in manifest["inputs"]} == {"site", "nodes", "picks"}
    assert "flagged: " in stdout and f"verdict: {summary['verdict']}" in stdout
    assert summary["verdict"] in ("usable", "usable with caution")  # one impossible pick: not refused
    assert summary["picks"]["flagged"] + summary["picks"]["not_flagged"] == n_picks
    assert 5 in summary["picks"]["faster_than_air_input_lines"]
    assert "faster than air (impossible)" in stdout and "lines 5" in stdout


def test_plot_legend_and_table_use_the_same_words_and_counts(tmp_path):
    from reconstruct.checks.picks import check_site_picks, usability_problems
    from reconstruct.io.tables import read_picks
    from reconstruct.report.pick_checks import pick_checks_summary, summary_rows, time_distance_classes

    site, nodes, picks, xyz = _inputs(tmp_path / "in")
    _plant_faster_than_air(picks, xyz, [5, 9])
    node_table = read_nodes(nodes)
    pick_table = read_picks(picks, node_table)
    _, checks = check_site_picks(load_site(site), node_table, pick_table)
    summary = pick_checks_summary(pick_table, node_table, checks, usability_problems(pick_table, checks))
    table = {str(words): value for words, value in summary_rows(summary, checks)}
    entries = time_distance_classes(checks)
    assert len(entries) >= 2  # not flagged, and at least the two impossible picks
    for label, mask, _, _ in entries:
        words, count = re.fullmatch(r"(.+) \((\d+)\)", label).groups()
        # the table says "flagged: <words> (<flag>)" per flag and "not flagged" for the rest
        match = [v for k, v in table.items() if k == words or k.startswith(f"flagged: {words} (")]
        assert match == [int(count)] and int(count) == int(mask.sum())
    # every pick is counted once, as flagged or as not flagged
    assert table["not flagged"] + table["flagged (a pick may carry several flags)"] == len(pick_table)


def test_invert_refuses_unusable_picks_then_accepts_with_the_flag(tmp_path):
    site, nodes, picks, xyz = _inputs(tmp_path / "in")
    planted = list(range(10, 40, 3))  # 10 of 552 picks: about 2 %
    _plant_faster_than_air(picks, xyz, planted)
    args = ["invert", "--site", site, "--nodes", nodes, "--picks", picks, "--smoothing", "0.01", "--quiet",
            "--rays", "straight"]
    code, stdout, stderr = _run(args + ["--out", tmp_path / "refused"])
    assert code == 2
    errors = [line for line in stderr.splitlines() if line.startswith("error:")]
    assert len(errors) == 1 and len(stderr.strip().splitlines()) == 1  # one line
    assert str(picks) in errors[0] and "--invert-unusable" in errors[0] and "lines 10, 13, 16" in errors[0]
    assert "Traceback" not in stderr
    assert not (tmp_path / "refused" / "velocity.vti").exists()

    out = tmp_path / "accepted"
    code, stdout, stderr = _run(args + ["--out", out, "--invert-unusable"])
    assert code == 0, stderr
    excluded = _read_csv(out / "excluded_picks.csv")
    # the planted lines, and perhaps an early gross outlier of the simulation
    assert set(planted) <= {int(r["input_line"]) for r in excluded if "faster than air" in r["reason"]}
    summary = json.loads((out / "summary.json").read_text())
    assert summary["pick_checks"]["inverted_despite_problems"] is True
    assert summary["picks"]["inverted"] == len(picks.read_text().splitlines()) - 1 - len(excluded)
    assert summary["robust"]["loss"] == "huber"
    residuals = _read_csv(out / "residuals.csv")
    assert all(0.0 <= float(r["robust_weight"]) <= 1.0 for r in residuals)
    rejected = _read_csv(out / "rejected_picks.csv")
    assert all(float(r["robust_weight"]) < 0.1 and "robust huber weight" in r["reason"] for r in rejected)

    # putting the flagged picks back: they are inverted (and now pull on the model)
    back = tmp_path / "back"
    code, _, stderr = _run(args + ["--out", back, "--invert-unusable", "--keep-flagged", "faster_than_air"])
    assert code == 0, stderr
    assert json.loads((back / "summary.json").read_text())["picks"]["excluded"] == 0


def test_unknown_flag_name_is_a_clear_error(tmp_path):
    site, nodes, picks, _ = _inputs(tmp_path / "in")
    code, _, stderr = _run(["check-picks", "--site", site, "--nodes", nodes, "--picks", picks, "--out", tmp_path / "o",
                            "--keep-flagged", "air_wave"])
    assert code == 2 and "unknown flag air_wave" in stderr and "air_direct" in stderr


@pytest.mark.parametrize("edit, fragments", [
    (lambda lines: ["tx,rx,time"] + lines[1:], ["missing required column time_ns"]),
    (lambda lines: lines[:3] + ["A0,A1,12.3ns,0.3"] + lines[4:], ["line 4, column time_ns: '12.3ns'"]),
    (lambda lines: lines[:3] + [lines[1]] + lines[4:], ["line 4: the pair tx 'A0' -> rx 'A1' repeats line 2"]),
    (lambda lines: lines[:3] + ["A0,Z9,40.0,0.3"] + lines[4:], ["line 4: rx 'Z9' is not in the node table"]),
])
def test_malformed_pick_tables_give_file_and_line(tmp_path, edit, fragments):
    site, nodes, picks, _ = _inputs(tmp_path / "in")
    lines = picks.read_text(encoding="utf-8").splitlines()
    picks.write_text("\n".join(edit(lines)) + "\n", encoding="utf-8")
    code, _, stderr = _run(["check-picks", "--site", site, "--nodes", nodes, "--picks", picks, "--out", tmp_path / "o"])
    assert code == 2 and "Traceback" not in stderr
    assert str(picks) in stderr and all(f in stderr for f in fragments), stderr


def test_invert_without_sigma_column_weights_by_the_reciprocity_noise(tmp_path):
    site, nodes, picks, _ = _inputs(tmp_path / "in")
    lines = picks.read_text(encoding="utf-8").splitlines()
    picks.write_text("\n".join(",".join(line.split(",")[:3]) for line in lines) + "\n", encoding="utf-8")
    out = tmp_path / "out"
    code, _, stderr = _run(["invert", "--site", site, "--nodes", nodes, "--picks", picks, "--out", out, "--quiet",
                            "--rays", "straight"])
    assert code == 0, stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["pick_checks"]["sigma_source"] == "reciprocity"
    assert summary["pick_checks"]["pick_noise_from_reciprocity_ns"] == pytest.approx(0.3, rel=0.25)
    # with sigmas, lambda is chosen by the discrepancy principle (chi^2 = N)
    assert summary["lambda"]["method"] == "discrepancy"
    sigmas = {r["sigma_ns"] for r in _read_csv(out / "residuals.csv")}
    assert sigmas == {f"{summary['pick_checks']['pick_noise_from_reciprocity_ns']:.4f}"}
