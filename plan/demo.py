"""The ``voidcube`` command: the whole job on a demo site, from plan to void report.

``voidcube demo FOLDER --out OUT`` reads ``FOLDER/site.yaml`` (the site) and
``FOLDER/truth.yaml`` (the invented ground truth) and runs, in one process,
by calling the library:

1. **plan layout**: node layout within a budget (:func:`plan.layout.layouts.design_layout`),
   link budget and pair graph, radio mesh, shot schedule -> ``OUT/plan/``;
2. **plan report**: coverage of the heard pairs and ``OUT/plan/plan_report.html``;
3. **simulate picks**: true first arrivals through the truth model with bent
   rays (eikonal fields, air included) on the simulation grid, node clock
   offsets and Gaussian pick noise (:func:`plan.synthetic.simulate.simulate_picks`);
   pairs the link budget does not hear are left out -> ``OUT/picks.csv``;
4. **pick checks** (:func:`reconstruct.checks.picks.check_site_picks`) -> ``OUT/pick_checks/``;
5. **inversion, bodies and screening**: one call of
   :func:`reconstruct.pipeline.process_survey` with bent rays, the rules and
   defaults of the library (what ``voidcube reconstruct invert`` and ``voids`` run);
6. **writing** the model folder (:func:`reconstruct.pipeline.write_processing`:
   ``velocity.vti``, ``summary.json``, ``rays.vtp``, voids, meshes, pictures)
   and the report ``OUT/model/report.html``;

then compares the voids found with the truth bodies
(:func:`plan.synthetic.truth_match.match_truth_bodies`) and writes ``OUT/manifest.json``
(inputs with SHA-256, parameters, versions, each stage's time, the
comparison).

No inverse crime
----------------
The picks are simulated on the model grid refined ``refine`` times (the
truth model's ``refine``, 2 for the demo: 1 m cells under 2 m model
cells), so the truth bodies' edges do not follow the inversion's cells and
the travel times come from a finer eikonal lattice than the inversion uses.

Time
----
The settings of :class:`ChainSettings` were chosen by measurement so that the
demo finishes within 5 minutes on 2 cores from a fresh install (numba
compiles its kernels on the first run); see the demo's README for the figures.

Bad input
---------
A missing folder, site or truth file, a file that does not load, an output
path that is an existing file, or picks the checks find unusable raise
:class:`~reconstruct.errors.InputError` naming the file and the fix; the
command prints it and exits with code 2, no traceback.
"""

from __future__ import annotations

import argparse
import dataclasses
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reconstruct import __version__
from reconstruct.errors import InputError, is_whole_number
from reconstruct.pipeline import DEFAULT_BENT_ITERATIONS

__all__ = ["ChainSettings", "ChainResult", "STAGES", "run_demo", "closing_lines", "main"]

#: The stages in order, as printed and recorded in the manifest.
STAGES = ("plan layout", "plan report", "simulate picks", "pick checks", "inversion, bodies and screening",
          "writing the model folder and report")


@dataclass(frozen=True)
class ChainSettings:
    """Settings of the demo chain (the survey and processing choices the site does not hold).

    Parameters
    ----------
    budget : int
        Node budget of the layout (:class:`plan.layout.layouts.LayoutOptions`).
    hole_share, face_share : float
        Largest fractions of the budget put in holes and on bench faces.
    bent_iterations : int
        Bent-ray iterations after the straight-ray start (the library's
        :data:`reconstruct.pipeline.DEFAULT_BENT_ITERATIONS`; about 10 s each on
        the demo's 2 m grid).
    link_budget : bool
        Leave out the picks of pairs the link budget does not hear.
    pictures : bool
        Draw the pictures of the void report (off-screen rendering).
    workers : int or None
        Local worker processes for the travel-time fields (None: all cores).
    match_tolerance_cells : float
        Added, in model cells, to a truth body's largest half-size to give the
        distance within which a found body's centroid may match it.
    """

    budget: int = 70
    hole_share: float = 0.6
    face_share: float = 0.15
    bent_iterations: int = DEFAULT_BENT_ITERATIONS
    link_budget: bool = True
    pictures: bool = True
    workers: int | None = None
    match_tolerance_cells: float = 2.0

    def __post_init__(self):
        problems = []
        if not is_whole_number(self.bent_iterations, 1):
            problems.append(f"bent_iterations must be a whole number >= 1 (got {self.bent_iterations!r})")
        if not (isinstance(self.match_tolerance_cells, (int, float)) and self.match_tolerance_cells >= 0):
            problems.append(f"match_tolerance_cells must be a number >= 0 (got {self.match_tolerance_cells!r})")
        if problems:
            raise InputError(problems, source="chain settings")

    def processing(self):
        """The processing settings of the demo: the library's defaults (:mod:`reconstruct.pipeline`)
        with bent rays, ``bent_iterations`` iterations and the final rays kept for ``rays.vtp``."""
        from reconstruct.pipeline import ProcessingSettings

        return ProcessingSettings(rays="bent", bent_iterations=self.bent_iterations, keep_rays=True)


@dataclass(frozen=True)
class ChainResult:
    """What a chain run produced."""

    out: Path
    report_path: Path
    manifest_path: Path
    matches: tuple  # plan.synthetic.truth_match.TruthMatch per truth body
    stage_seconds: dict
    fit_lines: tuple = ()  # how the inversion ended and its warnings (reconstruct.inverse.straight.fit_warnings)
    coverage: dict | None = None  # the ground crossed by rays, predicted by the plan and got by the inversion


class _Stages:
    """Stage headers and timings on stderr; library progress under the current stage."""

    def __init__(self, quiet: bool):
        self.quiet = quiet
        self.start = time.perf_counter()
        self.seconds: dict[str, float] = {}
        self._stage_start = self.start
        self._last_print = self.start
        self._name = None

    def say(self, message: str) -> None:
        """Library progress; counters and solver details only to break a silence (as the commands)."""
        from reconstruct.cli import HEARTBEAT_S, is_detail_message

        now = time.perf_counter()
        if self.quiet or (is_detail_message(message) and now - self._last_print < HEARTBEAT_S):
            return
        self._last_print = now
        text = message[len("solver: "):] if message.startswith("solver: ") else message
        print(f"[{now - self.start:6.1f} s]   {text}", file=sys.stderr, flush=True)

    def begin(self, name: str) -> None:
        self._name = name
        self._stage_start = self._last_print = time.perf_counter()
        if not self.quiet:
            print(f"[{self._stage_start - self.start:6.1f} s] stage {STAGES.index(name) + 1}/{len(STAGES)}: {name}",
                  file=sys.stderr, flush=True)

    def end(self) -> None:
        seconds = time.perf_counter() - self._stage_start
        self.seconds[self._name] = round(seconds, 2)
        if not self.quiet:
            print(f"[{time.perf_counter() - self.start:6.1f} s] {self._name}: done in {seconds:.1f} s",
                  file=sys.stderr, flush=True)


def _demo_inputs(folder) -> tuple[Path, Path]:
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: no such folder; give the folder that holds site.yaml and truth.yaml, "
                         "e.g. 'voidcube demo demo_site --out demo_output'")
    missing = [name for name in ("site.yaml", "truth.yaml") if not (folder / name).is_file()]
    if missing:
        raise InputError(f"{folder}: {' and '.join(missing)} missing; the demo folder must hold the site "
                         "description (site.yaml) and the truth model (truth.yaml)")
    return folder / "site.yaml", folder / "truth.yaml"


def _output_root(out) -> Path:
    from reconstruct.io.outputs import make_output_folder

    path = Path(out)
    if path.exists() and not path.is_dir():
        raise InputError(f"--out {out}: this is an existing file, not a folder; give a folder path")
    return make_output_folder(path)


def _plan_layout(site, settings: ChainSettings, plan_dir: Path, say):
    """Layout, pair graph, radio mesh and schedule into ``plan_dir``; returns (nodes, pairs, written)."""
    from reconstruct.io.outputs import write_json_atomic
    from reconstruct.io.tables import read_nodes

    from plan.layout.layouts import LayoutOptions, candidate_positions, design_layout, write_layout_csv
    from plan.radio.link_budget import link_budget_for_site
    from plan.radio.pair_graph import build_pair_graph, pair_graph_summary, write_graphml, write_pairs_csv
    from plan.radio.mesh import build_radio_mesh, mesh_summary, mesh_with_relays
    from plan.radio.schedule import plan_schedule, schedule_summary, write_schedule_csv

    options = LayoutOptions(budget=settings.budget, hole_share=settings.hole_share,
                            face_share=settings.face_share)
    layout = design_layout(site, options)
    counts = layout.counts()
    say(f"layout: {len(layout)} nodes ({counts['borehole']} in holes, {counts['face']} on faces, "
        f"{counts['surface']} on the surface)")
    written = [write_layout_csv(plan_dir / "nodes.csv", layout, site),
               write_layout_csv(plan_dir / "candidates.csv", candidate_positions(site, options, layout), site)]
    nodes = read_nodes(plan_dir / "nodes.csv")
    pairs = build_pair_graph(site, nodes, link_budget_for_site(site), progress=say)
    summary = pair_graph_summary(pairs)
    written += [write_pairs_csv(plan_dir / "pairs.csv", pairs), write_graphml(plan_dir / "pairs.graphml", pairs.graph),
                write_json_atomic(plan_dir / "pairs_summary.json", summary)]
    say(f"pairs: {summary['pairs']['heard']} of {summary['pairs']['total']} heard by the link budget")
    from plan.report import air_wave_warning

    warning = air_wave_warning(summary)
    if warning:
        say(f"WARNING: {warning}")
    if summary["range_check"]["warning"]:
        say(f"WARNING: {summary['range_check']['warning']}")
    mesh = None
    if site.radio.gateway_m is not None:
        mesh = build_radio_mesh(site, nodes)
        written += [write_graphml(plan_dir / "mesh.graphml", mesh_with_relays(mesh)),
                    write_json_atomic(plan_dir / "mesh_summary.json", mesh_summary(mesh))]
    strings = len({h for h in nodes.boreholes if h})
    schedule = plan_schedule(pairs.graph, velocity_m_per_ns=site.rock.velocity_m_per_ns,
                             frequency_mhz=site.rock.antenna_frequency_mhz,
                             hops=mesh.hops if mesh is not None else None, strings=strings)
    written += [write_schedule_csv(plan_dir / "schedule.csv", schedule),
                write_json_atomic(plan_dir / "schedule_summary.json", schedule_summary(schedule))]
    return nodes, pairs, written


def _plan_report(site, nodes, pairs, plan_dir: Path, say):
    """Coverage of the heard pairs, ``coverage.vti`` and the plan report; returns the files written."""
    from reconstruct.io.outputs import write_cell_arrays_vti, write_json_atomic, write_text_atomic
    from reconstruct.model.placement import place_nodes
    from reconstruct.io.site import model_grid

    from plan.assess.coverage import compute_coverage, coverage_cell_arrays
    from plan.report import low_coverage_warning, plan_report_html

    grid, ground = model_grid(site)
    xyz = place_nodes(nodes, grid, ground).xyz_m
    heard = pairs.links.heard
    coverage = compute_coverage(site, xyz, pairs=(pairs.links.a[heard], pairs.links.b[heard]), progress=say)
    page, _ = plan_report_html(site, coverage, nodes.ids, xyz, nodes.kinds, plan_dir)
    tv = coverage.summary()["target_volume"]
    say(f"target volume covered to the standard: {100 * tv['covered_fraction']:.1f} %")
    if warning := low_coverage_warning(tv):
        say(f"WARNING: {warning}")
    return [write_cell_arrays_vti(plan_dir / "coverage.vti", coverage.grid, coverage_cell_arrays(coverage)),
            write_json_atomic(plan_dir / "coverage_summary.json", coverage.summary()),
            write_text_atomic(plan_dir / "plan_report.html", page)]


def _heard_margins_db(pairs, tx, rx) -> np.ndarray:
    """Link margin (dB) of every ordered pick pair, from the pair table of unordered pairs."""
    n = len(pairs.ids)
    margin = np.full((n, n), -np.inf)
    margin[pairs.links.a, pairs.links.b] = pairs.links.margin_db
    margin[pairs.links.b, pairs.links.a] = pairs.links.margin_db
    return margin[tx, rx]


def _simulate(site, nodes, truth, pairs, settings: ChainSettings, executor, out: Path, say):
    """Simulated picks written to ``out/picks.csv``; returns (path, survey, fine grid shape)."""
    from reconstruct.io.outputs import write_csv_atomic

    from plan.synthetic.simulate import drop_missed_picks, refined_grid, simulate_picks

    survey = simulate_picks(site, nodes, truth, rays="bent", executor=executor, progress=say)
    if settings.link_budget:
        survey, missed = drop_missed_picks(survey, _heard_margins_db(pairs, survey.tx, survey.rx), seed=truth.seed)
        say(f"{int(missed.sum())} picks of pairs the link budget does not hear left out")
    if survey.tx.size == 0:
        raise InputError(f"{site.source_path}: no pair of the layout is heard, so no pick can be simulated; "
                         "raise radar.system_performance_db or the node budget")
    ids = nodes.ids
    path = write_csv_atomic(out / "picks.csv", ["tx", "rx", "time_ns", "sigma_ns"],
                            ([ids[a], ids[b], f"{t:.3f}", f"{s:.3f}"]
                             for a, b, t, s in zip(survey.tx, survey.rx, survey.time_ns, survey.sigma_ns)))
    say(f"{survey.tx.size:,} picks written to {path}")
    return path, survey, refined_grid(site.grid(), truth.refine)


def _pick_checks(site_path, site, nodes, nodes_path, picks_path, checks_dir: Path, truth_path, say):
    """Pick checks written to ``checks_dir``; returns the picks. Unusable picks stop the chain."""
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.checks.picks import check_site_picks, usability_problems
    from reconstruct.report.pick_checks import write_pick_checks
    from reconstruct.io.tables import read_picks

    started = utc_now_iso()
    picks = read_picks(picks_path, nodes)
    placement, checks = check_site_picks(site, nodes, picks)
    problems = usability_problems(picks, checks)
    summary = write_pick_checks(picks, nodes, checks, problems, checks_dir, xyz_m=placement.xyz_m, site_name=site.name,
                       inputs={"site": site_path, "nodes": nodes_path, "picks": picks_path},
                       parameters={"rays": "bent"}, started=started, command="voidcube demo (pick checks)",
                       rays="bent")
    counts = summary["picks"]["flag_counts"]
    say("flags: " + (", ".join(f"{n} {f}" for f, n in counts.items() if n) or "none"))
    say(f"verdict: {summary['verdict']}" + (": " + " | ".join(summary["cautions"]) if summary["cautions"] else ""))
    if problems:
        raise InputError(f"{truth_path}: the simulated picks are not usable as they stand ({'; '.join(problems)}); "
                         f"see the pick-check page in {checks_dir} and lower noise.sigma_ns or "
                         "noise.outlier_fraction")
    return picks


def _write_model(result, model_dir: Path, inputs: dict, pictures: bool, say) -> dict:
    """The inversion and void outputs into ``model/``; returns the summary."""
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.pipeline import write_processing

    parameters = {"settings": result.settings.as_dict()}
    summary, content = write_processing(result, model_dir, inputs=inputs, parameters=parameters,
                                        started=utc_now_iso(), command="voidcube demo (inversion and voids)",
                                        pictures=pictures, progress=say)
    say(f"{content['counts']['resolved']} voids, {content['counts']['unresolved']} unresolved bodies, "
        f"{content['counts']['weak_indications']} weak indications; {content['rendering']}")
    return summary


def _expected_resolved(truth, data, analysis) -> list[bool | None]:
    """Per truth body: is its largest extent at least the resolution at its depth?"""
    out = []
    for body in truth.bodies:
        x, y, z = body.centre_m
        depth = float(data.site.ground.elevation_m(np.array(x), np.array(y))) - z
        slab = next((s for s in analysis.slabs
                     if s.get("depth_from_m") is not None and s["depth_from_m"] <= depth < s["depth_to_m"]), None)
        if slab is None or slab.get("resolution_m") is None:
            out.append(None)
        else:
            out.append(bool(2.0 * max(body.half_size_m) >= slab["resolution_m"]))
    return out


def _truth_roof_depths_m(truth, site) -> list[float]:
    """Per truth body, the depth of its top below the ground surface over its centre, m (the
    bodies are axis-aligned ellipsoids or boxes: the top is the centre plus the vertical half-size)."""
    return [float(site.ground.elevation_m(np.array(b.centre_m[0]), np.array(b.centre_m[1])))
            - (b.centre_m[2] + b.half_size_m[2]) for b in truth.bodies]


def _write_truth_check(truth, truth_path, result, settings: ChainSettings, model_dir: Path) -> list:
    """Match the truth bodies with the bodies found and write the comparison into the model folder
    (:data:`reconstruct.report.truth_check.TRUTH_CHECK_FILE`, which the void report shows in a section
    of its own; no other command writes it). Returns the matches."""
    from reconstruct.interpret.bodies import void_table_rows
    from reconstruct.io.outputs import write_json_atomic
    from reconstruct.report.truth_check import TRUTH_CHECK_FILE

    from plan.synthetic.truth_match import match_truth_bodies

    data, analysis = result.inversion, result.analysis
    background = truth.background_velocity_m_per_ns or data.site.rock.velocity_m_per_ns
    tolerance_m = settings.match_tolerance_cells * max(data.grid.cell_m)
    matches = match_truth_bodies(
        truth.bodies, void_table_rows(analysis.bodies), background_velocity_m_per_ns=background,
        tolerance_m=tolerance_m, expected_resolved=_expected_resolved(truth, data, analysis),
        truth_roof_depths_m=_truth_roof_depths_m(truth, data.site))
    write_json_atomic(model_dir / TRUTH_CHECK_FILE, {
        "truth_file": str(truth_path),
        "match_rule": (f"a body found matches an invented body when its fill class is the invented one and its "
                       f"centre lies within the invented body's largest half-size plus {tolerance_m:g} m of the "
                       "invented centre; nearest pairs first, one to one. Roof depth: the top of the body below "
                       "the ground surface."),
        "bodies": [m.as_dict() for m in matches]})
    return matches


def coverage_against_plan(plan_coverage: dict, model_summary: dict) -> dict | None:
    """The share of the ground crossed by rays: predicted by the plan, got by the inversion.

    The plan counts the ground cells crossed by the straight rays of the heard
    pairs (``coverage_summary.json``, key ``ground``); the inversion those
    crossed by its final rays (``summary.json``, key ``coverage``), on the same
    model grid. None when either figure is missing.
    """
    ground = (plan_coverage or {}).get("ground") or {}
    got = ((model_summary or {}).get("coverage") or {}).get("fraction_of_ground_with_rays")
    if not ground.get("cells") or "cells_with_rays" not in ground or got is None:
        return None
    predicted = ground["cells_with_rays"] / ground["cells"]
    return {"predicted_fraction_of_ground_with_rays": predicted, "inverted_fraction_of_ground_with_rays": got,
            "ratio": got / predicted if predicted > 0 else None,
            "note": "the plan counts the straight rays of the heard pairs; the inversion its final rays, "
                    "which follow the air waves along the ground and the bench faces where those come first"}


def coverage_line(comparison: dict | None) -> str | None:
    """One line for the closing summary, or None."""
    if comparison is None:
        return None
    p, g = comparison["predicted_fraction_of_ground_with_rays"], comparison["inverted_fraction_of_ground_with_rays"]
    return (f"ground crossed by rays: {p:.1%} predicted by the plan (straight rays of the heard pairs), "
            f"{g:.1%} in the inversion" + (" (its bent rays follow the air waves and fast paths, not the straight "
                                            "lines the plan counts)" if g < 0.8 * p else ""))


def run_demo(folder, out, settings: ChainSettings = ChainSettings(), *, quiet: bool = False) -> ChainResult:
    """Run the whole chain on the demo folder (see the module notes); returns what it produced.

    Progress goes to stderr (nothing when ``quiet``); nothing is printed on stdout.
    """
    from reconstruct.io.outputs import build_manifest, utc_now_iso, write_json_atomic
    from reconstruct.parallel import Executor
    from reconstruct.pipeline import process_survey
    from reconstruct.report.void_report import write_report
    from reconstruct.io.site import load_site

    from plan.synthetic.truth import load_truth

    started = utc_now_iso()
    stages = _Stages(quiet)
    say = stages.say
    site_path, truth_path = _demo_inputs(folder)
    site = load_site(site_path)
    truth = load_truth(truth_path)
    root = _output_root(out)
    if settings.pictures:
        from reconstruct.report.pictures import start_offscreen_probe

        start_offscreen_probe()  # runs in the background while the chain computes
    executor = Executor(kind="processes", workers=settings.workers)
    plan_dir, checks_dir, model_dir = root / "plan", root / "pick_checks", root / "model"
    plan_dir.mkdir(exist_ok=True)

    stages.begin("plan layout")
    nodes, pairs, plan_written = _plan_layout(site, settings, plan_dir, say)
    stages.end()
    stages.begin("plan report")
    plan_written += _plan_report(site, nodes, pairs, plan_dir, say)
    write_json_atomic(plan_dir / "manifest.json", build_manifest(
        command="voidcube demo (plan)", inputs={"site": site_path}, parameters={"budget": settings.budget},
        outputs=[Path(p).name for p in plan_written] + ["manifest.json"], started=started,
        finished=utc_now_iso()))
    stages.end()
    nodes_path = plan_dir / "nodes.csv"

    stages.begin("simulate picks")
    picks_path, survey, fine = _simulate(site, nodes, truth, pairs, settings, executor, root, say)
    stages.end()
    stages.begin("pick checks")
    picks = _pick_checks(site_path, site, nodes, nodes_path, picks_path, checks_dir, truth_path, say)
    stages.end()
    stages.begin("inversion, bodies and screening")
    result = process_survey(site, nodes, picks, settings.processing(), executor=executor, progress=say)
    stages.end()
    stages.begin("writing the model folder and report")
    summary = _write_model(result, model_dir, {"site": site_path, "nodes": nodes_path, "picks": picks_path},
                           settings.pictures, say)
    matches = _write_truth_check(truth, truth_path, result, settings, model_dir)
    report_path = write_report(model_dir)
    stages.end()
    grid = site.grid()
    parameters = {
        "settings": dataclasses.asdict(settings),
        "model_grid": {"cell_m": list(grid.cell_m), "shape": list(grid.shape)},
        "simulation": {"rays": "bent (eikonal first arrivals, air included)", "refine": truth.refine,
                       "cell_m": list(fine.cell_m), "shape": list(fine.shape),
                       "noise_sigma_ns": truth.noise_sigma_ns, "time_zero_sigma_ns": truth.time_zero_sigma_ns,
                       "seed": truth.seed, "picks": int(survey.tx.size)},
        "executor": {"kind": executor.kind, "workers": executor.n_workers},
    }
    manifest = build_manifest(
        command="voidcube demo " + " ".join(map(str, (folder, "--out", out))),
        inputs={"site": site_path, "truth": truth_path}, parameters=parameters,
        outputs=["plan/", "picks.csv", "pick_checks/", "model/", "manifest.json"], started=started, finished=utc_now_iso())
    manifest["stages"] = [{"stage": name, "seconds": stages.seconds[name]} for name in STAGES]
    manifest["total_seconds"] = round(time.perf_counter() - stages.start, 2)
    manifest["misfit_rms_ns_per_iteration"] = [h["rms_ns"] for h in summary["iterations"]]
    manifest["truth_comparison"] = [m.as_dict() for m in matches]
    plan_coverage, _ = _read_plan_json(plan_dir / "coverage_summary.json")
    manifest["coverage_predicted_against_inverted"] = coverage = coverage_against_plan(plan_coverage, summary)
    manifest_path = write_json_atomic(root / "manifest.json", manifest)
    return ChainResult(out=root, report_path=Path(report_path), manifest_path=manifest_path,
                       matches=tuple(matches), stage_seconds=dict(stages.seconds),
                       fit_lines=tuple(_fit_lines(summary)), coverage=coverage)


def _read_plan_json(path: Path):
    import json

    try:
        return json.loads(path.read_text(encoding="utf-8")), None
    except (OSError, UnicodeDecodeError, ValueError) as error:
        return None, str(error)


def _fit_lines(summary: dict) -> list[str]:
    """The misfit per iteration, why the iterations stopped, and the fit warnings."""
    from reconstruct.inverse.straight import fit_warnings

    chi = [h.get("chi2") for h in summary["iterations"]]
    n = summary["misfit"]["n_picks"]
    lines = ["misfit per bent-ray iteration (0 is the start): RMS "
             + ", ".join(f"{h['rms_ns']:.3f}" for h in summary["iterations"]) + " ns"
             + ("" if None in chi else "; chi^2/N " + ", ".join(f"{c / n:.3g}" for c in chi))]
    if "bent_rays" in summary:
        lines.append(f"bent-ray iterations stopped: {summary['bent_rays']['stop_reason']}")
    return lines + fit_warnings(summary)


def closing_lines(result: ChainResult, truth_path, seconds: float) -> list[str]:
    """What the command prints at the end: time and manifest, the caution, the
    misfit per iteration, why the iterations stopped and the fit warnings, the
    ground crossed by rays as planned and as inverted, the report's path, then
    one line per truth body (the comparison with the truth)."""
    return [f"finished in {seconds:.0f} s; manifest: {result.manifest_path}",
            "an interpretation aid, not a guarantee: confirm voids by probe drilling",
            *result.fit_lines,
            *([line] if (line := coverage_line(result.coverage)) else []),
            f"report: {result.report_path}",
            f"voids found against the truth model ({truth_path}):",
            *(f"  {match.line()}" for match in result.matches)]


def _cmd_demo(args) -> int:
    start = time.perf_counter()
    result = run_demo(args.folder, args.out, quiet=args.quiet)
    for line in closing_lines(result, Path(args.folder) / "truth.yaml", time.perf_counter() - start):
        print(line)
    return 0


def build_parser(prog: str = "voidcube demo") -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog=prog,
        description="Plan a layout, simulate picks through the truth model, check them, invert them with "
                    "bent rays, find the voids and write the report; then compare the voids found with "
                    "the truth. Writes OUT/plan/, OUT/picks.csv, OUT/pick_checks/, OUT/model/ and "
                    "OUT/manifest.json.",
        epilog="Units: metres (m), nanoseconds (ns), velocities in m/ns.")
    parser.add_argument("--version", action="version", version=f"voidcube {__version__}")
    parser.add_argument("folder", metavar="FOLDER", help="folder holding site.yaml and truth.yaml (e.g. demo_site)")
    parser.add_argument("--out", required=True, metavar="FOLDER", help="output folder (created if missing)")
    parser.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    parser.set_defaults(func=_cmd_demo)
    return parser


def main(argv=None) -> int:
    """``voidcube demo FOLDER --out OUT``; returns the exit code."""
    from reconstruct.cli import run_command

    return run_command(build_parser(), argv, memory_hint="use larger cells (model.cell_m) or a smaller refine "
                                                         "in truth.yaml")
