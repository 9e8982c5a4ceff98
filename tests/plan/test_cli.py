"""Tests for the ``voidcube plan`` commands (``plan.cli.main``): describe, simulate and survey design.

Runs are in-process on a small invented site written to pytest's tmp_path
(20 x 10 x 20 m box, 1 m cells, flat ground at 18 m, 17 nodes).
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import scipy.constants

from plan.cli import SIMULATE_FILES, main
from reconstruct.io.tables import read_nodes, read_picks
from tests.cli_helpers import assert_user_error, run_main

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9

SITE_YAML = """\
# invented test site
name: test box
model:
  origin_m: [0, 0, 0]
  size_m: [20, 10, 20]
  cell_m: 1.0
ground:
  flat_elevation_m: 18
rock:
  velocity_m_per_ns: 0.12
  conductivity_ms_per_m: 2.5
  antenna_frequency_mhz: 100
boreholes:
  - {id: BH1, collar_m: [4, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 16}
  - {id: BH2, collar_m: [16, 5, 18], azimuth_deg: 0, dip_deg: 90, length_m: 16}
"""

TRUTH_YAML = """\
# invented truth model
bodies:
  - {name: fast box, shape: box, centre_m: [10, 5, 10], size_m: [4, 4, 4], fill: air}
noise: {sigma_ns: 0.3, time_zero_sigma_ns: 1.0, seed: 3}
refine: 2
"""

N_NODES = 17


def _node_text():
    rows = ["node_id,x_m,y_m,z_m,kind,borehole"]
    for hole, x in (("BH1", 4), ("BH2", 16)):
        for k, z in enumerate(range(16, 3, -2)):
            rows.append(f"{hole}-{k + 1:02d},{x},5,{z},borehole,{hole}")
    for k, x in enumerate((2, 10, 18)):
        rows.append(f"S{k + 1},{x},5,18,surface,")
    return "\n".join(rows) + "\n"


@pytest.fixture()
def files(tmp_path):
    paths = {"site": tmp_path / "site.yaml", "nodes": tmp_path / "nodes.csv", "truth": tmp_path / "truth.yaml"}
    paths["site"].write_text(SITE_YAML, encoding="utf-8")
    paths["nodes"].write_text(_node_text(), encoding="utf-8")
    paths["truth"].write_text(TRUTH_YAML, encoding="utf-8")
    return paths


def _run(argv):
    return run_main(main, argv)


def _simulate(files, picks_path, *extra):
    """'plan simulate' into the folder of ``picks_path`` (the pick table it writes there)."""
    return _run(["simulate", "--site", files["site"], "--nodes", files["nodes"],
                 "--truth", files["truth"], "--out", picks_path.parent, *extra])


def _assert_user_error(code, stdout, stderr, *fragments):
    return assert_user_error(code, stdout, stderr, *fragments)


# -------------------------------------------------------------- simulate

def test_simulate_writes_a_pick_table_that_reconstruct_reads(files, tmp_path):
    before = {k: p.read_bytes() for k, p in files.items()}
    out = tmp_path / "simulated" / "picks.csv"
    code, stdout, stderr = _simulate(files, out)
    assert code == 0, stderr
    nodes = read_nodes(files["nodes"])
    picks = read_picks(out, nodes)
    assert len(picks) == picks.n_rows == N_NODES * (N_NODES - 1)
    assert picks.excluded == ()
    np.testing.assert_array_equal(picks.sigma_ns, 0.3)
    pairs = set(zip(picks.tx.tolist(), picks.rx.tolist()))
    assert len(pairs) == math.perm(N_NODES, 2)
    # shortest pair: neighbouring nodes 2 m apart in one borehole; through rock
    # at 0.12 m/ns that is 16.7 ns before clock offsets and noise
    assert picks.time_ns.min() > 5 and picks.time_ns.max() < 300
    with open(out, newline="", encoding="utf-8") as f:
        assert next(csv.reader(f)) == ["tx", "rx", "time_ns", "sigma_ns", "shot_time_s"]
    np.testing.assert_allclose(picks.shot_time_s, 30.0 * picks.tx)  # node k fires at k x 30 s by default
    assert stdout.strip() == (
        f"{N_NODES * (N_NODES - 1)} synthetic picks written to {out} (noise 0.3 ns, time-zero offsets "
        f"sd 1 ns, times {picks.time_ns.min():.1f} to {picks.time_ns.max():.1f} ns)")
    assert "simulating 272 picks on a 40 x 20 x 40 grid" in stderr
    assert {k: p.read_bytes() for k, p in files.items()} == before
    assert sorted(p.name for p in out.parent.iterdir()) == sorted(SIMULATE_FILES)  # no temporary file left
    manifest = json.loads((out.parent / "manifest.json").read_text(encoding="utf-8"))
    assert manifest["command"] == "voidcube plan simulate"
    assert sorted(manifest["outputs"]) == sorted(SIMULATE_FILES)


def test_simulate_one_way_quiet_and_true_time_zero(files, tmp_path):
    out = tmp_path / "picks.csv"
    clock = tmp_path / "true_time_zero.csv"
    code, stdout, stderr = _simulate(files, out, "--one-way", "--quiet")
    assert code == 0
    assert stderr == ""
    picks = read_picks(out, read_nodes(files["nodes"]))
    assert len(picks) == math.comb(N_NODES, 2)
    with open(clock, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert [r["node_id"] for r in rows] == list(read_nodes(files["nodes"]).ids)
    tau = np.array([float(r["time_zero_ns"]) for r in rows])
    assert abs(tau.mean()) < 1e-3  # mean zero, written to 1e-4 ns
    assert tau.std() > 0.2


def test_simulate_adds_clock_drift_from_a_stream_of_its_own(files, tmp_path):
    # drifting clocks add tau_rx(t) - tau_tx(t) with tau_k(t) = drift_k (t - t_mid): the clock-drift
    # model (reconstruct.inverse.time_zero); every other number of the survey stays the same
    from reconstruct.inverse.time_zero import time_zero_matrix

    plain, drifting = tmp_path / "a" / "picks.csv", tmp_path / "b" / "picks.csv"
    assert _simulate(files, plain, "--quiet")[0] == 0
    files["truth"].write_text(TRUTH_YAML.replace("seed: 3}", "seed: 3, clock_drift_sigma_ns_per_h: 4,"
                                                             " shot_interval_s: 60}"), encoding="utf-8")
    assert _simulate(files, drifting, "--quiet")[0] == 0
    nodes = read_nodes(files["nodes"])
    a, b = read_picks(plain, nodes), read_picks(drifting, nodes)
    with open(drifting.parent / "true_time_zero.csv", newline="", encoding="utf-8") as f:
        drift = np.array([float(r["clock_drift_ns_per_h"]) for r in csv.DictReader(f)])
    assert abs(drift.mean()) < 1e-3 and drift.std() > 1.0
    np.testing.assert_allclose(b.shot_time_s, 60.0 * b.tx)
    expected = time_zero_matrix(b.tx, b.rx, len(nodes), "clock_drift", b.shot_time_s) @ np.r_[0 * drift, drift]
    np.testing.assert_allclose(b.time_ns - a.time_ns, expected, atol=2e-3)  # written to 1e-3 ns


def test_simulate_is_repeatable(files, tmp_path):
    a, b = tmp_path / "a" / "picks.csv", tmp_path / "b" / "picks.csv"
    assert _simulate(files, a, "--quiet")[0] == 0
    assert _simulate(files, b, "--quiet")[0] == 0
    assert a.read_bytes() == b.read_bytes()


def test_simulate_max_distance(files, tmp_path):
    out = tmp_path / "picks.csv"
    code, _, _ = _simulate(files, out, "--max-distance", "6", "--quiet")
    assert code == 0
    nodes = read_nodes(files["nodes"])
    picks = read_picks(out, nodes)
    # surface nodes are snapped to 18 m before distances are measured; all
    # other nodes keep their table positions
    xyz = np.array(nodes.xyz_m)
    xyz[[k for k, kind in enumerate(nodes.kinds) if kind == "surface"], 2] = 18.0
    d = np.linalg.norm(xyz[:, None] - xyz[None, :], axis=-1)
    expected = int(((d <= 6.0 + 1e-5) & ~np.eye(len(nodes), dtype=bool)).sum())
    assert len(picks) == expected


def test_simulate_bad_truth_is_a_user_error(files, tmp_path):
    files["truth"].write_text("bodys: []\n", encoding="utf-8")
    code, out, err = _simulate(files, tmp_path / "picks.csv")
    _assert_user_error(code, out, err, str(files["truth"]), "bodys: unknown key; did you mean 'bodies'?")
    assert not (tmp_path / "picks.csv").exists()


def test_simulate_missing_truth_file(files, tmp_path):
    missing = tmp_path / "nowhere.yaml"
    files["truth"] = missing
    code, out, err = _simulate(files, tmp_path / "picks.csv")
    _assert_user_error(code, out, err, str(missing), "cannot read the truth model")


def test_simulate_node_outside_box(files, tmp_path):
    with open(files["nodes"], "a", encoding="utf-8") as f:
        f.write("FAR,40,5,10,borehole,\n")
    code, out, err = _simulate(files, tmp_path / "picks.csv")
    _assert_user_error(code, out, err, str(files["nodes"]), f"line {N_NODES + 2}: node FAR",
                       "outside the model box")


def test_simulate_with_no_pairs_left_is_a_user_error(files, tmp_path):
    code, out, err = _simulate(files, tmp_path / "picks.csv", "--max-distance", "0.5", "--quiet")
    _assert_user_error(code, out, err, "--max-distance")


# -------------------------------------------------------------- describe

def test_describe_prints_grid_ground_and_rock(files):
    code, out, err = _run(["describe", "--site", files["site"]])
    assert code == 0, err
    assert "site: test box" in out
    # 20 x 10 x 20 cells; cell centres below 18 m: 18 of the 20 layers are ground
    assert "grid: 20 x 10 x 20 cells of 1 x 1 x 1 m = 4,000 cells; 3,600 ground (unknowns), 400 air" in out
    assert "ground surface (flat): 18 to 18 m elevation" in out
    # K = (c / v)^2 for low-loss rock; wavelength = v / f = 0.12 m/ns / 0.1 GHz
    k = (SPEED_OF_LIGHT_M_PER_NS / 0.12) ** 2
    assert f"rock: 0.1200 m/ns (K = {k:.2f})" in out
    assert f"K = {k:.2f}" == "K = 6.24"
    assert "2.5 mS/m, antenna 100 MHz, wavelength in rock 1.20 m" in out
    assert "boreholes: 2; planned works: 0; exclusion zones: 0" in out


def test_describe_bad_site_is_a_user_error(files):
    files["site"].write_text(SITE_YAML.replace("cell_m: 1.0", "cell_m: -1"), encoding="utf-8")
    code, out, err = _run(["describe", "--site", files["site"]])
    _assert_user_error(code, out, err, str(files["site"]), "model.cell_m must be greater than 0")


# -------------------------------------------------------------- help

def _help(argv, capsys) -> str:
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 0
    return " ".join(capsys.readouterr().out.split())  # argparse wraps lines


def test_plan_help_mentions_units(capsys):
    text = _help(["--help"], capsys)
    assert "describe" in text and "simulate" in text
    for unit in ("metres (m)", "nanoseconds (ns)", "m/ns", "MHz"):
        assert unit in text


def test_simulate_help_mentions_units(capsys):
    text = _help(["simulate", "--help"], capsys)
    for unit in ("metres (m)", "nanoseconds (ns)", "m/ns", "M metres", "tx,rx,time_ns,sigma_ns"):
        assert unit in text
    for option in ("--site", "--nodes", "--truth", "--out", "--one-way", "--max-distance", "--scheduler"):
        assert option in text


def test_no_subcommand_prints_help_and_exits_2(capsys):
    assert main([]) == 2
    assert "usage: voidcube plan" in capsys.readouterr().out


def test_simulate_lists_the_injected_gross_errors(files, tmp_path):
    files["truth"].write_text(TRUTH_YAML.replace("seed: 3}", "seed: 3, outlier_fraction: 0.05}"),
                              encoding="utf-8")
    out, listed = tmp_path / "picks.csv", tmp_path / "gross_errors.csv"
    code, stdout, stderr = _simulate(files, out, "--quiet", "--rays", "straight")
    assert code == 0, stderr
    with open(listed, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert len(rows) == round(0.05 * N_NODES * (N_NODES - 1))
    assert all(10.0 <= abs(float(r["error_ns"])) <= 30.0 for r in rows)
    assert f"{len(rows)} gross errors" in stdout


# -------------------------------------------------------------- survey design

DESIGN_FILES = ("nodes.csv", "candidates.csv", "pairs.csv", "pairs.graphml", "pairs_summary.json",
                "mesh.graphml", "mesh_summary.json", "schedule.csv", "schedule_summary.json", "manifest.json")


def test_simulate_leaves_out_pairs_below_the_link_budget(files, tmp_path):
    # nodes in one vertical hole lie on each other's dipole axis, the pattern null (common
    # practice, no published source): with 7 nodes per hole, 2 x 7 x 6 ordered pairs are missed;
    # the surface nodes S1 and S3, 16 m apart on flat ground, reach each other only by the ground
    # wave, whose amplitude falls as 1/r^2 (Annan 1973, from memory): the Friis loss (Friis 1946),
    # the rock loss and the further 20 log10(k r) leave less than the 100 dB default budget, which
    # the 8 m surface pairs keep; every other pair in this 20 m box is far inside the budget
    lam = 0.12 / 100e6 * 1e9
    alpha = 1.636 * 2.5 / math.sqrt((SPEED_OF_LIGHT_M_PER_NS / 0.12) ** 2)  # low-loss form, REFERENCES.md

    def ground_wave_margin(r):
        return 100 - 20 * math.log10(4 * math.pi * r / lam) - alpha * r - 20 * math.log10(2 * math.pi * r / lam)

    assert ground_wave_margin(16.0) < 0 < ground_wave_margin(8.0)
    out = tmp_path / "picks.csv"
    code, stdout, stderr = _simulate(files, out, "--rays", "straight", "--executor", "serial", "--quiet",
                                     "--link-budget")
    assert code == 0, stderr
    picks = read_picks(out, read_nodes(files["nodes"]))
    assert len(picks) == N_NODES * (N_NODES - 1) - 2 * 7 * 6 - 2
    assert "86 picks missed below the link budget" in stdout
    code, stdout, stderr = _simulate(files, out, "--fade-sigma", "3")
    _assert_user_error(code, stdout, stderr, "--fade-sigma needs --link-budget")


def test_design_writes_every_file_and_a_manifest(files, tmp_path):
    files["site"].write_text(SITE_YAML + "radio: {range_m: 15, gateway_m: [0, 5, 19]}\n", encoding="utf-8")
    before = files["site"].read_bytes()
    out = tmp_path / "design"
    code, stdout, stderr = _run(["design", "--site", files["site"], "--budget", "30", "--out", out, "--quiet"])
    assert code == 0, stderr
    assert sorted(p.name for p in out.iterdir()) == sorted(DESIGN_FILES)
    nodes = read_nodes(out / "nodes.csv")
    assert 2 <= len(nodes) <= 30
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["command"] == "voidcube plan design" and manifest["parameters"]["budget"] == 30
    assert sorted(manifest["outputs"]) == sorted(DESIGN_FILES)
    assert manifest["inputs"]["site"]["sha256"]
    pairs = json.loads((out / "pairs_summary.json").read_text())
    assert pairs["nodes"] == len(nodes)
    mesh = json.loads((out / "mesh_summary.json").read_text())
    assert mesh["radios"]["node"] == len(nodes)
    schedule = json.loads((out / "schedule_summary.json").read_text())
    assert schedule["slots"] + len(schedule["silent_nodes"]) == len(nodes)
    assert "layout:" in stdout and "pairs:" in stdout and "radio mesh:" in stdout and "schedule:" in stdout
    assert "rule of thumb 12.0 to 18.0 m" in stdout  # 10 and 15 wavelengths of 1.2 m
    assert files["site"].read_bytes() == before
    assert [p.name for p in out.iterdir() if "partial" in p.name] == []
    # a later command in the same folder keeps the earlier manifest inside its own
    code, stdout, stderr = _run(["pairs", "--site", files["site"], "--nodes", out / "nodes.csv", "--out", out, "--quiet"])
    assert code == 0, stderr
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["command"] == "voidcube plan pairs" and manifest["earlier_runs"][0]["command"] == "voidcube plan design"


def test_layout_mesh_and_schedule_commands(files, tmp_path):
    out = tmp_path / "plan"
    code, stdout, stderr = _run(["layout", "--site", files["site"], "--budget", "12", "--pattern", "regular", "--out", out])
    assert code == 0, stderr
    assert sorted(p.name for p in out.iterdir()) == ["candidates.csv", "manifest.json", "nodes.csv"]
    code, stdout, stderr = _run(["schedule", "--site", files["site"], "--nodes", files["nodes"], "--out", out,
                                 "--transmitters", "cover", "--quiet"])
    assert code == 0, stderr
    assert (out / "schedule.csv").is_file() and "schedule:" in stdout
    # no gateway in this site: the mesh needs one
    code, stdout, stderr = _run(["mesh", "--site", files["site"], "--nodes", files["nodes"], "--out", out])
    _assert_user_error(code, stdout, stderr, "radio.gateway_m is missing")


@pytest.mark.parametrize("argv_tail, fragments", [
    (["--budget", "1"], ["budget (--budget) must be a whole number from 2 to 20000 (got 1)"]),
    (["--budget", "10", "--hole-share", "0.9", "--face-share", "0.5"], ["hole_share + face_share must be at most 1"]),
])
def test_layout_bad_options_are_user_errors(files, tmp_path, argv_tail, fragments):
    code, out, err = _run(["layout", "--site", files["site"], "--out", tmp_path / "x", *argv_tail])
    _assert_user_error(code, out, err, *fragments)


def test_pairs_unknown_hole_is_a_user_error(files, tmp_path):
    files["nodes"].write_text(_node_text().replace(",BH2\n", ",BH9\n", 1), encoding="utf-8")
    code, out, err = _run(["pairs", "--site", files["site"], "--nodes", files["nodes"], "--out", tmp_path / "x"])
    _assert_user_error(code, out, err, "names borehole 'BH9', which is not in the site description")


@pytest.mark.parametrize("command, option, value, fragment", [
    ("pairs", "--system-performance", "nan", "--system-performance must be a number > 0 in dB (got nan)"),
    ("mesh", "--radio-range", "-5", "--radio-range must be a number > 0 in metres (got -5.0)"),
])
def test_bad_overrides_are_user_errors(files, tmp_path, command, option, value, fragment):
    files["site"].write_text(SITE_YAML + "radio: {gateway_m: [0, 5, 19]}\n", encoding="utf-8")
    code, out, err = _run([command, "--site", files["site"], "--nodes", files["nodes"], "--out", tmp_path / "x", option, value])
    _assert_user_error(code, out, err, fragment)


def test_coverage_standard_defaults_are_defined_once_in_the_library():
    from plan.assess.coverage import CoverageStandard
    from plan.cli import _standard_from, build_parser

    for command in ("coverage", "recover"):
        args = build_parser().parse_args([command, "--site", "s", "--nodes", "n", "--out", "o"])
        assert _standard_from(args) == CoverageStandard()
    assert CoverageStandard().min_rays == 10  # the standard the demo's plan report uses


def test_simulate_offers_the_dask_executor(files, tmp_path):
    from plan.cli import build_parser

    args = build_parser().parse_args(["simulate", "--site", "s", "--nodes", "n", "--truth", "t", "--out", "o",
                                      "--scheduler", "tcp://10.0.0.5:8786"])
    assert (args.executor, args.scheduler) == (None, "tcp://10.0.0.5:8786")  # None + scheduler: dask
    code, out, err = _simulate(files, tmp_path / "picks.csv", "--executor", "serial", "--scheduler", "tcp://h:1")
    _assert_user_error(code, out, err, "drop --scheduler or choose dask")


def test_pick_checks_find_the_drift_that_simulate_put_in(files, tmp_path):
    # the drift of each node's clock, drawn at random by 'plan simulate', against what the pick
    # checks estimate from the picks and their shot times (reconstruct.checks.drift)
    from reconstruct.cli import main as reconstruct_main

    files["truth"].write_text(TRUTH_YAML.replace("seed: 3}", "seed: 3, clock_drift_sigma_ns_per_h: 10,"
                                                             " shot_interval_s: 120}"), encoding="utf-8")
    picks = tmp_path / "sim" / "picks.csv"
    assert _simulate(files, picks, "--quiet")[0] == 0
    code, _, err = run_main(reconstruct_main, ["check-picks", "--site", files["site"], "--nodes", files["nodes"],
                                               "--picks", picks, "--out", tmp_path / "checks", "--quiet"])
    assert code == 0, err
    record = json.loads((tmp_path / "checks" / "pick_checks.json").read_text(encoding="utf-8"))["clock_drift"]
    with open(picks.parent / "true_time_zero.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    # every node fires once (node k at k x 120 s): reciprocal pairs see the drifts relative to their
    # straight-line trend with the firing time, so the truth is taken the same way (numpy.polyfit)
    firing = 120.0 * np.arange(len(rows))
    drift = np.array([float(r["clock_drift_ns_per_h"]) for r in rows])
    drift -= np.polyval(np.polyfit(firing, drift, 1), firing)
    truth = dict(zip((r["node_id"] for r in rows), drift - drift.mean()))
    assert "estimated_from" in record and "reciprocal pairs" in record["estimated_from"]
    ids = sorted(record["per_node"])
    estimate = np.array([record["per_node"][k]["drift_ns_per_h"] for k in ids])
    sd = np.array([record["per_node"][k]["sd_ns_per_h"] for k in ids])
    true = np.array([truth[k] for k in ids])
    assert np.corrcoef(estimate, true)[0, 1] > 0.9
    assert np.all(np.abs(estimate - true) < 4 * sd)
    assert record["drifting_nodes"] and all(np.sign(record["per_node"][k]["drift_ns_per_h"]) == np.sign(truth[k])
                                            for k in record["drifting_nodes"])
    page = (tmp_path / "checks" / "pick_checks.html").read_text(encoding="utf-8")
    assert "Clock drift" in page and "--time-zero clock_drift" in page
