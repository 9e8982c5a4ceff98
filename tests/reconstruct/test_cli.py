"""Tests for the ``voidcube reconstruct`` commands (``reconstruct.cli.main``).

Every run is in-process (``main([...])``) on a SMALL invented site written to
pytest's tmp_path: a 20 x 10 x 20 m box of 1 m cells, flat ground at 18 m
elevation (two layers of air above it), two vertical boreholes of nodes and
three surface nodes. Picks are simulated with ``plan.synthetic.simulate.simulate_picks``
from a truth model with one fast (air-filled) box; all values are invented.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
import subprocess
import sys
import tracemalloc
from pathlib import Path

import numpy as np
import pytest
import scipy.constants

from plan.synthetic.simulate import simulate_picks
from plan.synthetic.truth import parse_truth
from reconstruct.cli import main
from reconstruct.io.site import load_site
from reconstruct.io.tables import EXCLUDED_NO_PICK, EXCLUDED_NOT_POSITIVE, read_nodes
from tests.reconstruct.small_site import SITE_YAML
from tests.cli_helpers import assert_user_error, run_main

REPO = Path(__file__).resolve().parents[2]
SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9  # SI definition of c, 299 792 458 m/s

GROUND_M = 18.0
SHAPE = (20, 10, 20)
OUTPUTS = ("velocity.vti", "residuals.csv", "rejected_picks.csv", "time_zero.csv", "nodes_used.csv",
           "excluded_picks.csv", "summary.json", "manifest.json")



def _site_text(cell="1.0"):
    return SITE_YAML.format(cell=cell)


def _node_rows():
    rows = []
    for hole, x in (("BH1", 4), ("BH2", 16)):
        for k, z in enumerate(range(16, 3, -2)):
            rows.append(f"{hole}-{k + 1:02d},{x},5,{z},borehole,{hole}")
    for k, x in enumerate((2, 10, 18)):
        rows.append(f"S{k + 1},{x},5,18,surface,")
    return rows


NODES_HEADER = "node_id,x_m,y_m,z_m,kind,borehole"


def _write_inputs(folder: Path, *, node_rows=None):
    """Write site.yaml, nodes.csv and picks.csv (simulated from the good tables).

    ``node_rows`` replaces the node table's rows AFTER the picks were simulated,
    to plant a mistake. Returns the three paths.
    """
    folder.mkdir(parents=True, exist_ok=True)
    site = folder / "site.yaml"
    nodes = folder / "nodes.csv"
    picks = folder / "picks.csv"
    site.write_text(_site_text(), encoding="utf-8")
    nodes.write_text("\n".join([NODES_HEADER, *_node_rows()]) + "\n", encoding="utf-8")
    truth = parse_truth({
        "bodies": [{"name": "fast box", "shape": "box", "centre_m": [10, 5, 10],
                    "size_m": [4, 4, 4], "fill": "air"}],
        "noise": {"sigma_ns": 0.3, "time_zero_sigma_ns": 1.0, "seed": 3},
        "refine": 2,
    })
    table = read_nodes(nodes)
    survey = simulate_picks(load_site(site), table, truth, rays="straight")
    lines = ["tx,rx,time_ns,sigma_ns"]
    for a, b, t, s in zip(survey.tx, survey.rx, survey.time_ns, survey.sigma_ns):
        lines.append(f"{table.ids[a]},{table.ids[b]},{t:.3f},{s:.3f}")
    picks.write_text("\n".join(lines) + "\n", encoding="utf-8")
    if node_rows is not None:
        nodes.write_text("\n".join([NODES_HEADER, *node_rows]) + "\n", encoding="utf-8")
    return site, nodes, picks


def _run(argv):
    return run_main(main, argv)


def _invert_args(site, nodes, picks, out, *extra):
    """Arguments of a straight-ray inversion (the picks here are simulated with
    straight rays) unless ``extra`` names the forward model."""
    rays = () if "--rays" in extra else ("--rays", "straight")
    return ["invert", "--site", site, "--nodes", nodes, "--picks", picks, "--out", out, *rays, *extra]


def _assert_user_error(code, stdout, stderr, *fragments):
    return assert_user_error(code, stdout, stderr, *fragments, progress_before=True)


# -------------------------------------------------------------- a good run

@pytest.fixture(scope="module")
def good(tmp_path_factory):
    """One inversion with --smoothing 1 on the small site, shared by several tests."""
    folder = tmp_path_factory.mktemp("good")
    site, nodes, picks = _write_inputs(folder / "in")
    before = {p: p.read_bytes() for p in (site, nodes, picks)}
    out = folder / "out"
    code, stdout, stderr = _run(_invert_args(site, nodes, picks, out, "--smoothing", "1"))
    return dict(site=site, nodes=nodes, picks=picks, before=before, out=out,
                code=code, stdout=stdout, stderr=stderr)


def _vti_cells(path: Path) -> dict:
    import pyvista

    image = pyvista.read(str(path))
    shape = tuple(int(d) - 1 for d in image.dimensions)
    # VTK stores cells with x varying fastest
    arrays = {name: np.asarray(image.cell_data[name]).reshape(shape, order="F")
              for name in image.cell_data.keys()}
    return dict(image=image, shape=shape, arrays=arrays)


def _expected_ground():
    # cell centres at z = iz + 0.5 m; a cell is ground when its centre is below 18 m
    z_centre = np.arange(SHAPE[2]) + 0.5
    return np.broadcast_to(z_centre < GROUND_M, SHAPE)


def test_invert_exits_0_and_writes_every_output(good):
    assert good["code"] == 0, good["stderr"]
    names = sorted(p.name for p in good["out"].iterdir())
    assert names == sorted(OUTPUTS)


def test_invert_leaves_no_partial_files(good):
    for folder in (good["out"], good["site"].parent):
        leftovers = [p.name for p in folder.iterdir() if "partial" in p.name or p.name.endswith(".tmp")]
        assert leftovers == []


def test_invert_does_not_modify_inputs(good):
    for path, data in good["before"].items():
        assert path.read_bytes() == data, path


def test_velocity_vti_holds_the_cell_arrays(good):
    cells = _vti_cells(good["out"] / "velocity.vti")
    image, arrays = cells["image"], cells["arrays"]
    assert cells["shape"] == SHAPE
    assert tuple(image.origin) == (0.0, 0.0, 0.0)
    assert tuple(image.spacing) == (1.0, 1.0, 1.0)
    assert {"velocity_m_per_ns", "slowness_ns_per_m", "ray_length_m", "ray_count", "ground"} <= set(arrays)
    np.testing.assert_allclose(arrays["velocity_m_per_ns"], 1.0 / arrays["slowness_ns_per_m"], rtol=1e-12)
    np.testing.assert_array_equal(arrays["ground"].astype(bool), _expected_ground())
    assert np.all(arrays["ray_count"] >= 0)
    assert np.all(arrays["ray_length_m"] >= 0)
    # a cell with ray length has at least one ray through it, and the reverse
    np.testing.assert_array_equal(arrays["ray_length_m"] > 0, arrays["ray_count"] > 0)


def test_air_cells_move_at_the_speed_of_light(good):
    # air above the ground is fixed at c (SI definition: c = 299 792 458 m/s)
    arrays = _vti_cells(good["out"] / "velocity.vti")["arrays"]
    air = ~arrays["ground"].astype(bool)
    assert air.sum() == SHAPE[0] * SHAPE[1] * 2
    np.testing.assert_allclose(arrays["velocity_m_per_ns"][air], SPEED_OF_LIGHT_M_PER_NS, rtol=1e-12)
    # ground cells stay inside the default velocity band 0.03..0.30 m/ns
    v_ground = arrays["velocity_m_per_ns"][~air]
    assert v_ground.min() >= 0.03 - 1e-12 and v_ground.max() <= SPEED_OF_LIGHT_M_PER_NS + 1e-12


def _read_csv(path: Path):
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def test_summary_json_has_misfit_lambda_and_solver(good):
    summary = json.loads((good["out"] / "summary.json").read_text())
    rows = _read_csv(good["out"] / "residuals.csv")
    residual = np.array([float(r["residual_ns"]) for r in rows])
    sigma = np.array([float(r["sigma_ns"]) for r in rows])
    assert summary["picks"]["inverted"] == len(rows) == 17 * 16
    # RMS and chi-square recomputed with numpy from the written residuals
    # (rounded to 1e-4 ns in the file)
    assert summary["misfit"]["rms_ns"] == pytest.approx(np.sqrt(np.mean(residual**2)), abs=1e-3)
    assert summary["misfit"]["chi2"] == pytest.approx(np.sum((residual / sigma) ** 2), rel=1e-3)
    assert summary["lambda"]["smoothing"] == 1.0
    assert summary["lambda"]["method"] == "user"
    assert isinstance(summary["solver"]["iterations"], int) and summary["solver"]["iterations"] > 0
    # scipy.sparse.linalg.lsqr stop codes are 0..7
    assert summary["solver"]["stop_code"] in range(8)
    assert summary["picks"]["excluded"] == 0


def test_manifest_lists_inputs_with_sha256(good):
    manifest = json.loads((good["out"] / "manifest.json").read_text())
    for role in ("site", "nodes", "picks"):
        entry = manifest["inputs"][role]
        data = good[role].read_bytes()
        assert Path(entry["path"]) == good[role]
        assert entry["sha256"] == hashlib.sha256(data).hexdigest()
        assert entry["bytes"] == len(data)
    assert sorted(manifest["outputs"]) == sorted(OUTPUTS)
    assert manifest["parameters"]["smoothing"] == 1.0


def test_surface_nodes_are_snapped_onto_the_flat_ground(good):
    rows = {r["node_id"]: r for r in _read_csv(good["out"] / "nodes_used.csv")}
    assert len(rows) == 17
    for node in ("S1", "S2", "S3"):
        # the top face of the highest ground cell is the flat surface at 18 m
        assert float(rows[node]["z_m"]) == pytest.approx(GROUND_M, abs=1e-4)
    assert float(rows["BH1-03"]["z_m"]) == 12.0
    assert float(rows["BH1-03"]["shift_z_m"]) == 0.0


def test_stdout_has_the_short_summary_and_stderr_the_progress(good):
    out = good["stdout"]
    assert "site: test box" in out
    assert f"picks inverted: {17 * 16} (excluded 0, see excluded_picks.csv)" in out
    assert "misfit: RMS " in out and " ns" in out
    assert "regularisation weight: 1 by user" in out
    assert "m/ns" in out
    assert "3 nodes snapped to the ground" in out
    assert f"output: {good['out']}" in out
    assert len(out.strip().splitlines()) <= 8
    err = good["stderr"]
    assert "read 17 nodes and 272 pick rows" in err
    assert "grid 20 x 10 x 20 cells" in err
    assert "straight-ray model: RMS misfit" in err and "smoothing weight 1 (as given)" in err
    # a run of seconds shows no counters and no per-solve numbers: those only break a silence
    assert "straight rays:" not in err and "iterations" not in err
    assert len(err.strip().splitlines()) <= 8
    assert "straight rays" not in out


def test_quiet_silences_stderr(tmp_path):
    site, nodes, picks = _write_inputs(tmp_path / "in")
    code, stdout, stderr = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1", "--quiet"))
    assert code == 0
    assert stderr == ""
    assert "misfit: RMS" in stdout


def test_automatic_lambda_by_discrepancy_principle(tmp_path):
    site, nodes, picks = _write_inputs(tmp_path / "in")
    code, stdout, stderr = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--quiet"))
    assert code == 0, stderr
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    # the picks carry sigma_ns, so lambda is chosen where chi^2 = N:
    # Morozov, V. A. (1966), On the solution of functional equations by the
    # method of regularization, Soviet Mathematics Doklady 7, 414-417.
    # chi^2 itself spreads by sqrt(2 N) ~ 8 % of N = 272, so 10 % is the tolerance
    assert summary["lambda"]["method"] == "discrepancy"
    assert summary["misfit"]["chi2"] == pytest.approx(summary["misfit"]["n_picks"], rel=0.10)
    assert len(summary["lambda"]["search"]) >= 9
    assert "by discrepancy" in stdout


# -------------------------------------------------------------- bad input

@pytest.fixture()
def inputs(tmp_path):
    return _write_inputs(tmp_path / "in")


def _replace_line(path: Path, line: int, text: str):
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[line - 1] = text
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def _time_on_line(path: Path, line: int, time_text: str):
    cells = path.read_text(encoding="utf-8").splitlines()[line - 1].split(",")
    cells[2] = time_text
    _replace_line(path, line, ",".join(cells))
    return cells[0], cells[1]


def test_malformed_yaml_names_the_line(inputs, tmp_path):
    site, nodes, picks = inputs
    text = _site_text().replace("  flat_elevation_m: 18", "  flat_elevation_m: 18: 3")
    site.write_text(text, encoding="utf-8")
    line = text.splitlines().index("  flat_elevation_m: 18: 3") + 1
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(site), f"line {line}", "YAML syntax error")
    assert not (tmp_path / "out").exists()


def test_unknown_site_key_is_refused_with_a_suggestion(inputs, tmp_path):
    site, nodes, picks = inputs
    site.write_text(_site_text() + "boreholess: []\n", encoding="utf-8")
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(site), "boreholess is not a known key",
                       "did you mean 'boreholes'?")


def test_duplicate_node_id_names_both_lines(tmp_path):
    rows = _node_rows()
    rows.append("BH1-01,4,5,3,borehole,BH1")  # repeats the first data row (line 2)
    site, nodes, picks = _write_inputs(tmp_path / "in", node_rows=rows)
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(nodes),
                       f"line {len(rows) + 1}: node_id 'BH1-01' repeats line 2")


def test_pick_with_unknown_node_names_file_and_line(inputs, tmp_path):
    site, nodes, picks = inputs
    _replace_line(picks, 5, "BH1-01,BH9-99,40.0,0.3")
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(picks), "line 5: rx 'BH9-99' is not in the node table",
                       "add it to the node table or remove the row")


def test_text_in_time_ns_names_the_line(inputs, tmp_path):
    site, nodes, picks = inputs
    _time_on_line(picks, 4, "12.3ns")
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(picks), "line 4, column time_ns: '12.3ns' is not a number")


def test_nan_and_zero_times_are_excluded_and_counted(inputs, tmp_path):
    site, nodes, picks = inputs
    nan_pair = _time_on_line(picks, 2, "NaN")
    zero_pair = _time_on_line(picks, 3, "0")
    out_dir = tmp_path / "out"
    code, out, err = _run(_invert_args(site, nodes, picks, out_dir, "--smoothing", "1", "--quiet"))
    assert code == 0, err
    summary = json.loads((out_dir / "summary.json").read_text())
    assert summary["picks"]["rows_read"] == 272
    assert summary["picks"]["inverted"] == 270
    assert summary["picks"]["excluded"] == 2
    assert summary["picks"]["excluded_by_reason"] == {EXCLUDED_NO_PICK: 1, EXCLUDED_NOT_POSITIVE: 1}
    assert "no pick" in EXCLUDED_NO_PICK and "time <= 0" in EXCLUDED_NOT_POSITIVE
    rows = _read_csv(out_dir / "excluded_picks.csv")
    assert [(r["input_line"], r["tx"], r["rx"], r["time_ns"], r["reason"]) for r in rows] == [
        ("2", *nan_pair, "NaN", EXCLUDED_NO_PICK),
        ("3", *zero_pair, "0", EXCLUDED_NOT_POSITIVE),
    ]
    assert "(excluded 2, see excluded_picks.csv)" in out
    assert len(_read_csv(out_dir / "residuals.csv")) == 270


def test_all_picks_excluded_is_an_error(inputs, tmp_path):
    site, nodes, picks = inputs
    picks.write_text("tx,rx,time_ns\nBH1-01,BH2-01,\nBH2-01,BH1-01,nan\n", encoding="utf-8")
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(picks), "no usable picks left to invert")


def test_node_outside_the_model_box_names_file_and_line(tmp_path):
    rows = [*_node_rows(), "FAR,50,5,10,borehole,"]
    site, nodes, picks = _write_inputs(tmp_path / "in", node_rows=rows)
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(nodes), f"line {len(rows) + 1}: node FAR",
                       "lies outside the model box", "x 0..20")


def test_grid_too_large_for_memory_names_cell_size_without_allocating(inputs, tmp_path):
    site, nodes, picks = inputs
    # 0.5 mm cells: 40 000 x 20 000 x 40 000 = 3.2e13 cells, far beyond any memory
    site.write_text(_site_text(cell="0.0005"), encoding="utf-8")
    tracemalloc.start()
    try:
        code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1"))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    _assert_user_error(code, out, err, str(site), "model.cell_m", "GiB", "use cells of at least")
    assert peak < 50 * 2**20, f"peak {peak / 2**20:.0f} MiB traced while refusing the grid"


def test_missing_files_are_named(inputs, tmp_path):
    site, nodes, picks = inputs
    missing = tmp_path / "nowhere.yaml"
    code, out, err = _run(_invert_args(missing, nodes, picks, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(missing), "file not found")
    missing = tmp_path / "nowhere.csv"
    code, out, err = _run(_invert_args(site, nodes, missing, tmp_path / "out", "--smoothing", "1"))
    _assert_user_error(code, out, err, str(missing), "file not found; check the path")


def test_velocity_band_faster_than_light_is_refused(inputs, tmp_path):
    site, nodes, picks = inputs
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "out", "--smoothing", "1",
                                       "--velocity-max", "0.5"))
    _assert_user_error(code, out, err, "faster than light", "use at most 0.30")


def test_out_naming_an_existing_file_is_a_user_error(inputs, tmp_path):
    site, nodes, picks = inputs
    clash = tmp_path / "results"
    clash.write_text("not a folder\n")
    code, out, err = _run(_invert_args(site, nodes, picks, clash, "--smoothing", "1", "--quiet"))
    _assert_user_error(code, out, err, str(clash))


# -------------------------------------------------------------- help and entry points

def _help(argv, capsys) -> str:
    with pytest.raises(SystemExit) as stop:
        main(argv)
    assert stop.value.code == 0
    return " ".join(capsys.readouterr().out.split())  # argparse wraps lines


def test_top_level_help_mentions_units(capsys):
    text = _help(["--help"], capsys)
    assert "invert" in text and "check-inputs" in text and "check-picks" in text
    for unit in ("metres (m)", "nanoseconds (ns)", "m/ns"):
        assert unit in text


def test_invert_help_mentions_units_and_outputs(capsys):
    text = _help(["invert", "--help"], capsys)
    for unit in ("metres (m)", "nanoseconds (ns)", "m/ns", "times in ns"):
        assert unit in text
    for name in OUTPUTS:
        assert name in text
    assert "--smoothing" in text and "--quiet" in text


def test_no_subcommand_prints_help_and_exits_2(capsys):
    assert main([]) == 2
    assert "usage: voidcube reconstruct" in capsys.readouterr().out


@pytest.mark.parametrize("package", ["reconstruct", "plan"])
def test_python_dash_m_help(package):
    result = subprocess.run([sys.executable, "-m", package, "--help"], cwd=REPO,
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0, result.stderr
    assert f"usage: voidcube {package}" in result.stdout
    assert "m/ns" in result.stdout


# -------------------------------------------------------------- check

def test_check_reports_valid_inputs(inputs):
    site, nodes, picks = inputs
    code, out, err = _run(["check-inputs", "--site", site, "--nodes", nodes, "--picks", picks])
    assert code == 0, err
    ground_cells = int(_expected_ground().sum())
    assert ground_cells == 20 * 10 * 18
    assert f"grid 20 x 10 x 20 = {math.prod(SHAPE):,} cells, {ground_cells:,} ground" in out
    assert "nodes: 17 read, 3 would be snapped to the ground" in out
    assert "picks: 272 rows, 272 usable, 0 excluded" in out
    assert out.rstrip().endswith("inputs are valid")


def test_check_site_only(inputs):
    site, _, _ = inputs
    code, out, err = _run(["check-inputs", "--site", site])
    assert code == 0 and "inputs are valid" in out


def test_check_invalid_inputs_exit_2(tmp_path):
    rows = [*_node_rows(), "BH1-01,4,5,3,borehole,BH1"]
    site, nodes, picks = _write_inputs(tmp_path / "in", node_rows=rows)
    code, out, err = _run(["check-inputs", "--site", site, "--nodes", nodes])
    _assert_user_error(code, out, err, "repeats line 2")
    assert "inputs are valid" not in out

    site.write_text(_site_text() + "colour: red\n", encoding="utf-8")
    code, out, err = _run(["check-inputs", "--site", site])
    _assert_user_error(code, out, err, "colour is not a known key")
    assert "inputs are valid" not in out


def test_check_node_outside_box_exit_2(tmp_path):
    rows = [*_node_rows(), "LOW,10,5,-3,borehole,"]
    site, nodes, _ = _write_inputs(tmp_path / "in", node_rows=rows)
    code, out, err = _run(["check-inputs", "--site", site, "--nodes", nodes])
    _assert_user_error(code, out, err, f"line {len(rows) + 1}: node LOW", "outside the model box")


def test_check_picks_without_nodes_is_refused(inputs):
    site, _, _ = inputs
    code, out, err = _run(["check-inputs", "--site", site, "--picks", site.parent / "no_such_picks.csv"])
    assert code == 2
    assert "inputs are valid" not in out


@pytest.mark.slow
def test_bent_rays_through_the_command_line_write_iterations_and_rays(inputs, tmp_path):
    site, nodes, picks = inputs
    out = tmp_path / "bent"
    # no --rays: bent rays are the default
    code, stdout, stderr = _run(["invert", "--site", site, "--nodes", nodes, "--picks", picks, "--out", out,
                                 "--bent-iterations", "1", "--executor", "serial", "--smoothing", "1", "--write-rays"])
    assert code == 0, stderr
    summary = json.loads((out / "summary.json").read_text())
    assert summary["rays"] == "bent"
    assert summary["iterations"][0]["iteration"] == 0
    assert all("rms_ns" in step for step in summary["iterations"])
    import pyvista

    rays = pyvista.read(str(out / "rays.vtp"))
    residuals = _read_csv(out / "residuals.csv")
    assert rays.n_cells == len(residuals)  # one polyline per inverted pick
    assert {"tx", "rx", "time_ns", "predicted_time_ns", "pair_index", "input_line"} <= set(rays.cell_data.keys())
    assert "rays: bent" in stdout and "0 is the starting model" in stdout
    # the progress says in words what iteration 0 is, and each iteration is one short line
    assert "bent-ray iteration 0, the starting model: RMS misfit" in stderr
    assert "misfit^2" not in stderr
    assert len([line for line in stderr.splitlines() if "bent-ray iteration 1" in line]) <= 4  # step halvings


def test_write_rays_needs_bent_rays(inputs, tmp_path):
    site, nodes, picks = inputs
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "o", "--rays", "straight", "--write-rays"))
    _assert_user_error(code, out, err, "--write-rays needs --rays bent")


@pytest.mark.slow
def test_a_run_on_a_dask_scheduler_records_the_dask_executor(inputs, tmp_path):
    # the manifest names the engine that computed the fields (dask.distributed's
    # LocalCluster stands for a user's cluster)
    from distributed import LocalCluster

    site, nodes, picks = inputs
    out = tmp_path / "dask"
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, dashboard_address="127.0.0.1:0") as cluster:
        code, _, stderr = _run(_invert_args(site, nodes, picks, out, "--rays", "bent", "--bent-iterations", "1",
                                            "--smoothing", "1", "--quiet", "--scheduler", cluster.scheduler_address))
    assert code == 0, stderr
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["parameters"]["executor"] == "dask"


def test_a_malformed_scheduler_address_is_refused(inputs, tmp_path):
    site, nodes, picks = inputs
    code, out, err = _run(_invert_args(site, nodes, picks, tmp_path / "o", "--rays", "bent",
                                       "--scheduler", "localhost-8786"))
    _assert_user_error(code, out, err, "tcp://")
