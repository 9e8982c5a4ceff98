"""How the inversion says how well it fits: the ``fit``, ``clipping`` and
``bent_rays`` blocks of summary.json and the warnings of the command.

Outside references: the discrepancy principle's target chi^2 = N (Constable,
S. C., Parker, R. L. and Constable, C. G. (1987), Occam's inversion: a
practical algorithm for generating smooth models from electromagnetic sounding
data, Geophysics 52(3), 289-300: a model fitting to the noise has chi^2 near N);
chi-square recomputed with numpy from the residual table; the speed of light
from scipy.constants (SI definition). The picks are simulated by
plan.synthetic.simulate through an invented truth model on the small test site.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
import scipy.constants

from plan.synthetic.simulate import simulate_picks
from plan.synthetic.truth import parse_truth
from reconstruct.cli import main
from reconstruct.inverse.solver import InversionOptions
from reconstruct.inverse.straight import fit_warnings, run_summary, straight_ray_tomography
from reconstruct.io.site import load_site
from reconstruct.io.tables import read_nodes, read_picks
from tests.cli_helpers import run_main
from tests.reconstruct.small_site import SITE_YAML

SPEED_OF_LIGHT_M_PER_NS = scipy.constants.c * 1e-9
NOISE_SIGMA_NS = 0.3
STOP_REASONS = ("iteration limit reached", "misfit plateau", "no step lowers the misfit", "target misfit reached")


def _write_inputs(folder, *, sigma_written_ns, time_factor=1.0):
    """Small site, nodes in two boreholes and on the surface, picks simulated
    with noise NOISE_SIGMA_NS but written with ``sigma_written_ns`` and times
    scaled by ``time_factor``."""
    folder.mkdir(parents=True, exist_ok=True)
    site, nodes, picks = folder / "site.yaml", folder / "nodes.csv", folder / "picks.csv"
    site.write_text(SITE_YAML.format(cell="1.0"), encoding="utf-8")
    rows = ["node_id,x_m,y_m,z_m,kind,borehole"]
    for hole, x in (("BH1", 4), ("BH2", 16)):
        rows += [f"{hole}-{k + 1:02d},{x},5,{z},borehole,{hole}" for k, z in enumerate(range(16, 3, -2))]
    rows += [f"S{k + 1},{x},5,18,surface," for k, x in enumerate((2, 10, 18))]
    nodes.write_text("\n".join(rows) + "\n", encoding="utf-8")
    truth = parse_truth({"bodies": [{"name": "fast box", "shape": "box", "centre_m": [10, 5, 10],
                                     "size_m": [4, 4, 4], "fill": "air"}],
                         "noise": {"sigma_ns": NOISE_SIGMA_NS, "time_zero_sigma_ns": 0.0, "seed": 5},
                         "refine": 2})
    table = read_nodes(nodes)
    survey = simulate_picks(load_site(site), table, truth, rays="straight")
    lines = ["tx,rx,time_ns,sigma_ns"] + [
        f"{table.ids[a]},{table.ids[b]},{t * time_factor:.4f},{sigma_written_ns:.4f}"
        for a, b, t in zip(survey.tx, survey.rx, survey.time_ns)]
    picks.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return site, nodes, picks


@pytest.mark.slow
def test_bent_run_that_cannot_reach_the_target_says_so(tmp_path):
    # sigmas written 30 times smaller than the simulated noise: chi^2 / N cannot
    # come near 1 (a model fitting to the noise has chi^2 ~ 900 N here); the pick
    # checks find the picks noisier than stated, so they are inverted on request
    site, nodes, picks = _write_inputs(tmp_path / "in", sigma_written_ns=NOISE_SIGMA_NS / 30)
    out = tmp_path / "out"
    code, stdout, stderr = run_main(main, ["invert", "--site", site, "--nodes", nodes, "--picks", picks,
                                           "--out", out, "--rays", "bent", "--bent-iterations", "2",
                                           "--executor", "serial", "--invert-unusable"])
    assert code == 0, stderr
    summary = json.loads((out / "summary.json").read_text())
    fit = summary["fit"]
    assert fit["target_reached"] is False
    with open(out / "residuals.csv", newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    chi2 = sum((float(r["residual_ns"]) / float(r["sigma_ns"])) ** 2 for r in rows)
    assert fit["n_picks"] == len(rows)
    assert fit["chi2"] == pytest.approx(chi2, rel=1e-3)  # residuals written to 4 decimals
    assert fit["chi2_per_pick"] == pytest.approx(chi2 / len(rows), rel=1e-3) and fit["chi2_per_pick"] > 10
    assert "does not explain the picks" in fit["words"]
    reason = summary["bent_rays"]["stop_reason"]
    assert reason.startswith(STOP_REASONS) and not reason.startswith("target misfit reached")
    # every accepted iteration lowered the misfit
    chi2s = [h["chi2"] for h in summary["iterations"]]
    assert all(b < a for a, b in zip(chi2s, chi2s[1:]))
    assert "WARNING: target misfit not reached" in stdout and f"{fit['chi2_per_pick']:.3g}" in stdout
    assert f"bent-ray iterations stopped: {reason}" in stdout


def test_clipping_at_the_speed_of_light_is_recorded_and_warned(tmp_path):
    # times shrunk to 40 %: the straight rays need ground faster than light; the
    # band ends at the speed of light (scipy.constants.c, just below 0.30 m/ns)
    site, nodes, picks = _write_inputs(tmp_path / "in", sigma_written_ns=NOISE_SIGMA_NS, time_factor=0.4)
    site_, nodes_ = load_site(site), read_nodes(nodes)
    options = InversionOptions(time_zero="none", smoothing=1e-3, bounds_in_solve=False)
    run = straight_ray_tomography(site_, nodes_, read_picks(picks, nodes_), options)
    summary = run_summary(run)
    clipping = summary["clipping"]
    velocity = run.result.velocity_m_per_ns.reshape(run.grid.shape)[run.ground]
    assert velocity.max() == pytest.approx(SPEED_OF_LIGHT_M_PER_NS, rel=1e-9)
    at_max = int(np.sum(np.isclose(velocity, SPEED_OF_LIGHT_M_PER_NS, rtol=1e-9)))
    assert clipping["cells_clipped_at_max"] == at_max > 0
    assert clipping["cells_clipped"] == at_max + clipping["cells_clipped_at_min"]
    # the misfit after clipping is that of the model written, recomputed from its residuals
    sigma = np.full(run.result.n_picks, NOISE_SIGMA_NS)
    assert clipping["chi2_after"] == pytest.approx(float(np.sum((run.result.residual_ns / sigma) ** 2)), rel=1e-9)
    assert clipping["chi2_after"] > 1.05 * clipping["chi2_before"]
    assert clipping["warning"] is True and f"{at_max + clipping['cells_clipped_at_min']} cells" in clipping["words"]
    assert any(line.startswith("WARNING:") and "clipped" in line for line in fit_warnings(summary))


def test_no_clipping_warning_when_nothing_is_clipped(tmp_path):
    site, nodes, picks = _write_inputs(tmp_path / "in", sigma_written_ns=NOISE_SIGMA_NS)
    site_, nodes_ = load_site(site), read_nodes(nodes)
    run = straight_ray_tomography(site_, nodes_, read_picks(picks, nodes_),
                                  InversionOptions(time_zero="none", smoothing=1.0))
    clipping = run_summary(run)["clipping"]
    assert clipping["cells_clipped"] == 0 and clipping["warning"] is False
    assert clipping["chi2_after"] == pytest.approx(clipping["chi2_before"], rel=1e-12)


def test_band_kept_inside_the_solve_clips_nothing_and_fits_better_than_clipping(tmp_path):
    # the same data that need ground faster than light (scipy.constants.c): with
    # the band inside the solve no cell is clipped, the fastest cells sit at the
    # speed of light, and the misfit (recomputed from the residuals) is below
    # that of the clipped model, since the bounded least-squares solution is the
    # best model inside the band and the clipped one is merely inside it
    site, nodes, picks = _write_inputs(tmp_path / "in", sigma_written_ns=NOISE_SIGMA_NS, time_factor=0.4)
    site_, nodes_ = load_site(site), read_nodes(nodes)
    runs = {}
    for inside in (False, True):
        options = InversionOptions(time_zero="none", smoothing=1e-3, bounds_in_solve=inside)
        runs[inside] = straight_ray_tomography(site_, nodes_, read_picks(picks, nodes_), options)
    summary = run_summary(runs[True])
    clipping = summary["clipping"]
    assert clipping["cells_clipped"] == 0 and clipping["warning"] is False and clipping["bounds_in_solve"]
    assert "kept inside the solve" in clipping["words"]
    velocity = runs[True].result.velocity_m_per_ns.reshape(runs[True].grid.shape)[runs[True].ground]
    assert velocity.max() == pytest.approx(SPEED_OF_LIGHT_M_PER_NS, rel=1e-6)
    sigma = np.full(runs[True].result.n_picks, NOISE_SIGMA_NS)
    chi2 = {k: float(np.sum((r.result.residual_ns / sigma) ** 2)) for k, r in runs.items()}
    assert chi2[True] < chi2[False]
    assert summary["regularisation"] == {"kind": "smooth", "reweightings": 0, "bounds_in_solve": True}


def test_compact_regularisation_is_recorded_in_the_summary(tmp_path):
    # the command's --regularisation reaches the inversion; summary.json says
    # which regularisation ran and how many reweightings it made, and its beta
    # follows the stated rule: focusing_fraction x (rock slowness - 1 / c) here,
    # the smaller full contrast of the band (c from scipy.constants)
    site, nodes, picks = _write_inputs(tmp_path / "in", sigma_written_ns=NOISE_SIGMA_NS)
    out = tmp_path / "out"
    code, stdout, stderr = run_main(main, ["invert", "--site", site, "--nodes", nodes, "--picks", picks,
                                           "--out", out, "--rays", "straight", "--regularisation", "compact",
                                           "--time-zero", "none"])
    assert code == 0, stderr
    summary = json.loads((out / "summary.json").read_text())
    record = summary["regularisation"]
    assert record["kind"] == "compact" and record["reweightings"] >= 1
    rock = load_site(site).rock.velocity_m_per_ns
    expected_beta = record["focusing_fraction"] * (1 / rock - 1 / SPEED_OF_LIGHT_M_PER_NS)
    assert record["focusing_beta_ns_per_m"] == pytest.approx(expected_beta, rel=1e-6)
    assert f"regularisation: compact, {record['reweightings']} reweightings" in stdout
    manifest = json.loads((out / "manifest.json").read_text())
    assert "compact" in json.dumps(manifest)
