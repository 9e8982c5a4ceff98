"""The ``voidcube reconstruct`` commands: from pick tables to a velocity voxel cube and voids.

Thin layer: parse arguments, call the library (:mod:`reconstruct.pipeline`, which holds
every processing rule and default), write files, print a summary.
A user's mistake ends as clear lines on stderr and exit code 2, never a traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from reconstruct import __version__
from reconstruct.errors import InputError

__all__ = ["main", "build_parser", "run_command", "progress_printer", "is_detail_message", "HEARTBEAT_S", "add_executor_arguments", "executor_from_args"]

_EPILOG_UNITS = "Units: metres (m), nanoseconds (ns), velocities in m/ns, conductivity in mS/m."


#: Progress messages shown only after this many seconds without any other message.
HEARTBEAT_S = 5.0


def is_detail_message(message: str) -> bool:
    """A counter ("travel-time fields: 3/16") or a solver detail: shown only to break a silence."""
    if message.startswith("solver: "):
        return True
    head, _, tail = message.rpartition(": ")
    done, slash, total = tail.partition("/")
    return bool(head and slash and done.replace(",", "").isdigit() and total.replace(",", "").isdigit())


def progress_printer(quiet: bool):
    """A ``progress(message)`` callback that prints on stderr with the elapsed time.

    Messages in words are always shown; counters and solver details are shown
    only when nothing was printed for a few seconds, so that a long step is
    never silent and a short one is not a screenful of numbers.
    """
    start = time.perf_counter()
    last = [start]

    def say(message: str):
        if quiet:
            return
        now = time.perf_counter()
        if is_detail_message(message) and now - last[0] < HEARTBEAT_S:
            return
        last[0] = now
        text = message[len("solver: "):] if message.startswith("solver: ") else message
        print(f"[{now - start:7.1f} s] {text}", file=sys.stderr, flush=True)

    return say


def _ratio_or_auto(text: str):
    """A number, or 'auto' (the anisotropy ratio from the pick checks)."""
    if text.strip().lower() == "auto":
        return "auto"
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number such as 1.1, or auto (got {text!r})") from None


def _add_inversion_arguments(p: argparse.ArgumentParser):
    from reconstruct.inverse.options import REGULARISATIONS
    from reconstruct.inverse.time_zero import TIME_ZERO_MODELS
    from reconstruct.inverse.solver import InversionOptions
    from reconstruct.pipeline import DEFAULT_BENT_ITERATIONS, ProcessingSettings, robust_rule

    o, d = InversionOptions(), ProcessingSettings()
    g = p.add_argument_group("inversion")
    g.add_argument("--smoothing", type=float, default=o.smoothing, metavar="LAMBDA",
                   help="regularisation weight lambda in the column-scaled system (dimensionless); "
                        "default: chosen automatically (discrepancy principle chi^2 = N when the "
                        "picks carry sigma_ns, else the L-curve corner)")
    g.add_argument("--damping-ratio", type=float, default=o.damping_ratio, metavar="R",
                   help="damping towards the reference velocity as a fraction of lambda "
                        f"(dimensionless; default {o.damping_ratio:g})")
    g.add_argument("--horizontal-weight", type=float, default=o.horizontal_weight, metavar="W",
                   help=f"weight of roughness along x and y (dimensionless; default {o.horizontal_weight:g})")
    g.add_argument("--vertical-weight", type=float, default=o.vertical_weight, metavar="W",
                   help=f"weight of roughness along z (dimensionless; default {o.vertical_weight:g}); lower it "
                        "to allow sharper vertical changes")
    g.add_argument("--regularisation", choices=REGULARISATIONS, default=o.regularisation,
                   help="'smooth' (default): first differences and damping towards the reference velocity; "
                        "'compact': the same reweighted (minimum gradient support and minimum support) so "
                        "that bodies come out sharp and compact rather than smeared")
    g.add_argument("--velocity-min", type=float, default=o.velocity_min_m_per_ns, metavar="M_PER_NS",
                   help=f"lowest velocity kept, m/ns (default {o.velocity_min_m_per_ns:g}: water is about 0.033)")
    g.add_argument("--velocity-max", type=float, default=o.velocity_max_m_per_ns, metavar="M_PER_NS",
                   help=f"highest velocity kept, m/ns (default {o.velocity_max_m_per_ns:g}: air; never above "
                        "c = 0.2998)")
    g.add_argument("--time-zero", choices=TIME_ZERO_MODELS, default=o.time_zero,
                   help="time-zero offset per node: 'clock' (default) t = t_ray + tau_rx - tau_tx "
                        "for node clock offsets, reported relative to their mean; 'delay' "
                        "t = t_ray + tau_tx + tau_rx for instrument delays; 'clock_drift' clock offsets "
                        "that drift linearly during the survey (needs a shot_time_s column in the picks; "
                        "drifts in ns per hour in time_zero.csv); 'none'")
    g.add_argument("--anisotropy-ratio", type=_ratio_or_auto, default=o.anisotropy_ratio, metavar="R",
                   help="elliptical anisotropy: velocity along the bedding over velocity across it "
                        "(default 1: isotropic; 'auto': the pick checks' fit, beds horizontal, when it is "
                        "measurable); the cube then holds the velocity along the bedding")
    g.add_argument("--anisotropy-axis", default=o.anisotropy_axis, metavar="AXIS",
                   help="symmetry axis of the anisotropy, the normal to the bedding: z (default, horizontal "
                        "beds), x, y, or the beds' DIP/DIPDIRECTION in degrees such as 30/120")
    g.add_argument("--lsqr-iterations", type=int, default=o.max_iterations, metavar="N",
                   help=f"LSQR iteration limit per solve (default {o.max_iterations})")
    g.add_argument("--default-sigma", type=float, default=o.default_sigma_ns, metavar="NS",
                   help="pick uncertainty in ns assumed when the pick table has no sigma_ns "
                        f"column (weights only; default {o.default_sigma_ns:g} ns)")
    g.add_argument("--snap-tolerance", type=float, default=d.snap_tolerance_m, metavar="M",
                   help="largest allowed shift in metres when a node is snapped onto the ground "
                        "(default: the larger of 2 m and two cell diagonals)")
    g.add_argument("--robust", choices=("none", "huber", "tukey"), default=d.robust,
                   help="reweighting against gross pick errors inside the LSQR loop: 'huber', 'tukey' "
                        "(Huber first, then Tukey's biweight) or 'none' (plain least squares); default "
                        f"'{robust_rule('straight')}' with straight rays, '{robust_rule('bent')}' with bent "
                        "rays (their steps are judged by the plain misfit). With robust weighting on, the "
                        f"picks ending with weight below {o.rejection_weight:g} are listed in rejected_picks.csv")
    _add_check_arguments(p)
    b = p.add_argument_group("bent rays")
    b.add_argument("--rays", choices=("straight", "bent"), default=d.rays,
                   help="forward model: 'bent' rays (default) traced through eikonal travel-time "
                        "fields (air included), iterated from the straight-ray model, or 'straight' "
                        "rays only (faster; air waves cannot be explained)")
    b.add_argument("--bent-iterations", type=int, default=DEFAULT_BENT_ITERATIONS, metavar="N",
                   help=f"bent-ray iterations after the straight-ray start (default {DEFAULT_BENT_ITERATIONS}; "
                        "'voidcube demo' runs 3 to stay within 5 minutes); stops earlier when the misfit "
                        "improves by less than 2 %%")
    add_executor_arguments(b)
    b.add_argument("--write-rays", action="store_true",
                   help="also write rays.vtp: the final bent rays as polylines with pair ids and "
                        "observed and predicted times (ns)")


def add_executor_arguments(group):
    """--executor, --workers and --scheduler, shared with 'voidcube plan simulate'."""
    group.add_argument("--executor", choices=("serial", "processes", "dask"), default=None,
                       help="where the per-node travel-time fields are computed: 'processes' (default, a "
                            "local process pool on all cores), 'serial', or 'dask' (with --scheduler)")
    group.add_argument("--workers", type=int, default=None, metavar="N",
                       help="number of local worker processes (default: all cores)")
    group.add_argument("--scheduler", default=None, metavar="tcp://HOST:PORT",
                       help="address of a running Dask scheduler; sends the per-node work to that "
                            "cluster (implies --executor dask)")


def executor_from_args(args):
    """The executor the options name (see :func:`reconstruct.parallel.executor_from_options`)."""
    from reconstruct.parallel import executor_from_options

    return executor_from_options(args.executor, args.workers, args.scheduler)


def _add_input_arguments(p: argparse.ArgumentParser):
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", required=True, metavar="FILE",
                   help="node table (CSV: node_id,x_m,y_m,z_m[,kind,borehole])")
    p.add_argument("--picks", required=True, metavar="FILE",
                   help="pick table (CSV: tx,rx,time_ns[,sigma_ns,amplitude,quality,shot_time_s]); times in ns")
    p.add_argument("--schedule", metavar="FILE",
                   help="shot schedule (CSV with transmitter,start_s, as 'voidcube plan schedule' writes): "
                        "each pick's shot time, for clock drift, when the picks have no shot_time_s column")
    p.add_argument("--out", required=True, metavar="FOLDER", help="output folder (created if missing)")


def _add_check_arguments(p: argparse.ArgumentParser):
    q = p.add_argument_group("pick checks")
    q.add_argument("--keep-flagged", default="", metavar="FLAG[,FLAG]",
                   help="keep picks with these flags in the inversion instead of leaving them out "
                        "(faster_than_air, slower_than_band, air_direct, air_refracted)")


def _keep_flagged(args) -> tuple:
    return tuple(f.strip() for f in args.keep_flagged.split(",") if f.strip())


def _settings_from(args, *, find_bodies: bool = False):
    from reconstruct.inverse.solver import InversionOptions
    from reconstruct.pipeline import ProcessingSettings

    inversion = InversionOptions(
        velocity_min_m_per_ns=args.velocity_min, velocity_max_m_per_ns=args.velocity_max,
        horizontal_weight=args.horizontal_weight, vertical_weight=args.vertical_weight,
        smoothing=args.smoothing, damping_ratio=args.damping_ratio, time_zero=args.time_zero,
        max_iterations=args.lsqr_iterations, default_sigma_ns=args.default_sigma,
        regularisation=args.regularisation,
        anisotropy_ratio=1.0 if args.anisotropy_ratio == "auto" else args.anisotropy_ratio,
        anisotropy_axis=args.anisotropy_axis)
    if args.write_rays and args.rays != "bent":
        raise InputError("--write-rays needs --rays bent (straight rays are the node-to-node lines)")
    return ProcessingSettings(
        rays=args.rays, bent_iterations=args.bent_iterations, inversion=inversion, robust=args.robust,
        keep_flagged=_keep_flagged(args), invert_unusable=args.invert_unusable,
        snap_tolerance_m=args.snap_tolerance, keep_rays=args.write_rays, find_bodies=find_bodies,
        anisotropy_from_picks=args.anisotropy_ratio == "auto")


def _check_output_folder(out) -> None:
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise InputError(f"--out {out}: this is an existing file, not a folder; give a folder path")


def _read_inputs(args, say):
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes, read_picks

    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    picks = read_picks(args.picks, nodes)
    say(f"read {len(nodes)} nodes and {picks.n_rows} pick rows ({len(picks.excluded)} excluded on reading)")
    if args.schedule:
        from reconstruct.io.tables import shot_times_from_schedule

        picks = shot_times_from_schedule(picks, nodes, args.schedule)
    return site, nodes, picks


def _cmd_invert(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.pipeline import process_survey, write_inversion

    started = utc_now_iso()
    _check_output_folder(args.out)
    say = progress_printer(args.quiet)
    settings = _settings_from(args)
    executor = executor_from_args(args)
    site, nodes, picks = _read_inputs(args, say)
    result = process_survey(site, nodes, picks, settings, executor=executor, progress=say)
    parameters = {k: v for k, v in vars(args).items() if k not in ("func", "quiet")}
    parameters.update(executor=executor.kind, robust_used=settings.robust_weighting)
    inputs = {"site": args.site, "nodes": args.nodes, "picks": args.picks,
              **({"schedule": args.schedule} if args.schedule else {})}
    summary = write_inversion(result, args.out, inputs=inputs,
                              parameters=parameters, started=started, command="voidcube reconstruct invert")
    _print_inversion(summary, args.out)
    return 0


def _print_inversion(summary: dict, out) -> None:
    from reconstruct.inverse.straight import fit_warnings

    m, lam, v = summary["misfit"], summary["lambda"], summary["velocity_m_per_ns"]
    chi = "" if m["chi2"] is None else f", chi^2/N {m['chi2_per_pick']:.3f}"
    print(f"site: {summary['site']}")
    print(f"picks inverted: {summary['picks']['inverted']} (excluded {summary['picks']['excluded']}, "
          f"see excluded_picks.csv)")
    if len(summary["iterations"]) > 1:
        steps = ", ".join(f"{h['rms_ns']:.3f}" for h in summary["iterations"])
        print(f"rays: {summary['rays']}; RMS misfit per bent-ray iteration (ns; 0 is the starting model): {steps}")
    print(f"misfit: RMS {m['rms_ns']:.3f} ns{chi}")
    if "bent_rays" in summary:
        print(f"bent-ray iterations stopped: {summary['bent_rays']['stop_reason']}")
    for line in fit_warnings(summary):
        print(line)
    print(f"regularisation weight: {lam['smoothing']:.4g} by {lam['method']} ({lam['note']})")
    reg = summary.get("regularisation")
    if reg and reg["kind"] == "compact":
        print(f"regularisation: compact, {reg['reweightings']} reweightings")
    print(f"ground velocity: {v['ground_min']:.4f} to {v['ground_max']:.4f} m/ns, median "
          f"{v['ground_median']:.4f}; {summary['nodes']['snapped']} nodes snapped to the ground")
    if "robust" in summary:
        rb = summary["robust"]
        print(f"robust weights ({rb['loss']}): {rb['rejected']} picks rejected (see rejected_picks.csv)")
    print(f"output: {Path(out)}")


def _cmd_check_picks(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.checks.picks import check_site_picks, picks_for_inversion, usability_problems
    from reconstruct.report.pick_checks import write_pick_checks

    started = utc_now_iso()
    _check_output_folder(args.out)
    from reconstruct.pipeline import node_positions_from_surveys

    site, nodes, picks = _read_inputs(args, progress_printer(args.quiet))
    nodes, _ = node_positions_from_surveys(site, nodes, progress_printer(args.quiet))
    keep = _keep_flagged(args)
    placement, checks = check_site_picks(site, nodes, picks, snap_tolerance_m=args.snap_tolerance)
    picks_for_inversion(picks, nodes, checks, rays=args.rays, keep_flagged=keep)  # checks the flag names
    problems = usability_problems(picks, checks)
    parameters = {k: v for k, v in vars(args).items() if k not in ("func", "quiet")}
    summary = write_pick_checks(picks, nodes, checks, problems, args.out, xyz_m=placement.xyz_m, site_name=site.name,
                       inputs={"site": args.site, "nodes": args.nodes, "picks": args.picks,
                               **({"schedule": args.schedule} if args.schedule else {})},
                       parameters=parameters, started=started, command="voidcube reconstruct check-picks",
                       rays=args.rays, keep_flagged=keep)
    counts = summary["picks"]["flag_counts"]
    print(f"site: {site.name}")
    print(f"picks checked: {len(picks)} ({len(picks.excluded)} excluded on reading); flagged: "
          + (", ".join(f"{n} {f}" for f, n in counts.items() if n) or "none"))
    noise = "" if checks.noise_sigma_ns is None else f"; pick noise from reciprocity {checks.noise_sigma_ns:.3f} ns"
    print(f"reciprocal pairs: {checks.n_reciprocal_pairs} ({checks.reciprocity['mismatched_pairs']} mismatched)"
          f"{noise}; sigma from {checks.sigma_source}")
    fast = summary["picks"]["faster_than_air_input_lines"]
    if fast:
        print(f"faster than air (impossible): {len(fast)} picks, lines {', '.join(map(str, fast[:20]))}"
              + (", ..." if len(fast) > 20 else ""))
    print(f"left out of a {args.rays}-ray inversion: {summary['picks']['excluded_by_flags']} picks")
    off = summary["nodes_off_as_group"]
    if off["count"]:
        print(f"nodes off as a group: {off['count']} (" + ", ".join(
            f"{n['node_id']} {n['median_residual_ns']:+.1f} ns" for n in off["nodes"][:8])
            + (", ..." if off["count"] > 8 else "") + "); see node_time_zero.csv")
    reasons = summary["problems"] + summary["cautions"]
    print(f"verdict: {summary['verdict']}" + (": " + " | ".join(reasons) if reasons else ""))
    print(f"output: {Path(args.out)}")
    return 0


def _cmd_check_inputs(args) -> int:
    from reconstruct.model.placement import place_nodes
    from reconstruct.io.site import load_site, model_grid
    from reconstruct.io.tables import read_nodes, read_picks

    if args.picks and not args.nodes:
        raise InputError("--picks needs --nodes: picks name nodes of the node table; give both")
    site = load_site(args.site)
    grid, ground = model_grid(site)
    print(f"site: {site.name}: grid {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} = "
          f"{grid.n_cells:,} cells, {int(ground.sum()):,} ground")
    if site.planned_works_dxf:
        print(f"planned works: {len(site.planned_works)}, read with those of "
              f"{len(site.planned_works_dxf)} DXF drawing(s)")
    for note in site.notes:
        print(f"note: {note}")
    if args.nodes:
        from reconstruct.pipeline import node_positions_from_surveys

        nodes, _ = node_positions_from_surveys(site, read_nodes(args.nodes), print)
        placement = place_nodes(nodes, grid, ground, snap_tolerance_m=args.snap_tolerance)
        print(f"nodes: {len(nodes)} read, {int(placement.snapped.sum())} would be snapped to the "
              f"ground (largest shift {placement.shift_length_m.max():.2f} m)")
        if args.picks:
            picks = read_picks(args.picks, nodes)
            print(f"picks: {picks.n_rows} rows, {len(picks)} usable, {len(picks.excluded)} excluded")
    print("inputs are valid")
    return 0


def _void_settings(args):
    from reconstruct.interpret.bodies import VoidOptions
    from reconstruct.interpret.screening import ScreeningOptions
    from reconstruct.pipeline import ProcessingSettings

    if args.max_pictures < 0:
        raise InputError(f"--max-pictures must be >= 0 (got {args.max_pictures})")
    return ProcessingSettings(
        refine_bodies=not args.no_refine,
        voids=VoidOptions(sigmas=args.threshold_sigmas, false_alarm=args.false_alarm),
        screening=ScreeningOptions(specific_gravity=args.specific_gravity, dip_deg=args.wall_dip_deg,
                                rock_mass_q=args.rock_mass_q, hole_standoff_m=args.hole_standoff))


def _cmd_voids(args) -> int:
    from reconstruct.interpret.folder import load_inversion_folder
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.pipeline import interpret_inversion, write_interpretation

    started = utc_now_iso()
    say = progress_printer(args.quiet)
    settings = _void_settings(args)
    if not args.no_pictures:
        from reconstruct.report.pictures import start_offscreen_probe

        start_offscreen_probe()  # runs while the cube is read and searched
    data = load_inversion_folder(args.folder, args.site)
    say(f"cube {data.grid.shape[0]} x {data.grid.shape[1]} x {data.grid.shape[2]} cells, site {data.site_path}")
    analysis, screening, detectability = interpret_inversion(data, settings, say)
    content = write_interpretation(data, analysis, screening, settings, detectability=detectability,
                                   pictures=not args.no_pictures,
                                   max_pictures=args.max_pictures, started=started, progress=say)
    counts = content["counts"]
    print(f"site: {content['site']}")
    print(f"voids: {counts['resolved']}, unresolved bodies: {counts['unresolved']}, weak indications: "
          f"{counts['weak_indications']} (threshold {content['method']['threshold_sigmas']:.2f} robust standard "
          "deviations of the anomaly; see voids.json)")
    if content["threshold_override"]["overridden"]:
        print(content["threshold_override"]["words"])
    for entry in content["detectability"]:
        print(f"  {entry['work']}: {entry['words']}")
    for entry in content["screening"]["ranked"][:5]:
        what = (f"body {entry['body_id']}" if entry.get("body_id") is not None
                else f"weak indication {entry.get('indication_id')}")
        print(f"  {entry['rank']}. {what} ({entry['status']}, confidence {entry['confidence']}): "
              f"{entry['reasons']}")
    print(f"pictures: {content['rendering']}")
    print(f"output: {Path(args.folder)} (voids.csv, voids.json, weak_indications.csv, screening.csv, "
          "interpretation.vti, voids.vtp, "
          "ground.vtp, pictures/; for mine planning voids.dxf, voids.obj, voids.stl, block_model.csv)")
    print("screening aid, not a design: confirm by probe drilling; a null result does not prove no void")
    return 0


def _cmd_report(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.report.void_report import write_report

    started = utc_now_iso()
    path = write_report(args.folder, started=started)
    print(f"report: {path}")
    return 0


def _add_invert_parser(sub):
    p = sub.add_parser(
        "invert", help="invert first-arrival times into a velocity cube (straight or bent rays)",
        description="Check the picks, then invert first-arrival pick times into a velocity voxel cube with "
                    "straight or bent rays, regularised LSQR and a time-zero offset per node. Writes "
                    "velocity.vti, residuals.csv, time_zero.csv, nodes_used.csv, excluded_picks.csv, "
                    "summary.json, manifest.json, rejected_picks.csv (with robust weighting) and, with "
                    "--write-rays, rays.vtp into OUT.",
        epilog=_EPILOG_UNITS)
    _add_input_arguments(p)
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--invert-unusable", action="store_true",
                   help="invert even when the pick checks find the data unusable (flagged picks are still "
                        "left out as listed in excluded_picks.csv)")
    _add_inversion_arguments(p)
    p.set_defaults(func=_cmd_invert)


def _add_check_parsers(sub):
    p = sub.add_parser(
        "check-picks", help="pick checks: reciprocity, time-zero offsets, velocity band, air waves; a report",
        description="Check every pick before inverting: reciprocal pairs, node time-zero offsets "
                    "as transmitter and receiver, apparent velocity against 0.03-0.30 m/ns, direct and "
                    "refracted air waves. Writes pick_checks.csv, node_time_zero.csv, pick_checks.json, "
                    "pick_checks.html and manifest.json into OUT. The pick table is never changed.",
        epilog=_EPILOG_UNITS)
    _add_input_arguments(p)
    p.add_argument("--rays", choices=("straight", "bent"), default="bent",
                   help="the forward model the picks are meant for: with 'bent' (default, as "
                        "'voidcube reconstruct invert') air-wave picks are kept, with 'straight' they are "
                        "marked as left out")
    p.add_argument("--snap-tolerance", type=float, default=None, metavar="M",
                   help="largest allowed snap onto the ground, metres")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    _add_check_arguments(p)
    p.set_defaults(func=_cmd_check_picks)

    p = sub.add_parser("check-inputs", help="validate a site description and, optionally, node and pick tables",
                       description="Load and validate the inputs without inverting; list every problem.",
                       epilog=_EPILOG_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", metavar="FILE", help="node table (CSV)")
    p.add_argument("--picks", metavar="FILE", help="pick table (CSV); needs --nodes")
    p.add_argument("--snap-tolerance", type=float, default=None, metavar="M",
                   help="largest allowed snap onto the ground, metres")
    p.set_defaults(func=_cmd_check_inputs)


def _add_voids_parser(sub):
    from reconstruct.interpret.bodies import VoidOptions
    from reconstruct.interpret.screening import ScreeningOptions

    v, h = VoidOptions(), ScreeningOptions()
    p = sub.add_parser(
        "voids", help="find void bodies in an inversion folder, screen them, write meshes and pictures",
        description="Find bodies in the velocity cube of an inversion folder (robust background per "
                    "depth slab, threshold from the misfit and the resolution), rank them by roof "
                    "thickness, span and stand-off from planned works, and write voids.csv, voids.json, "
                    "screening.csv, interpretation.vti, voids.vtp, ground.vtp, pictures/ and, for "
                    "mine-planning software, voids.dxf, voids.obj, voids.stl and block_model.csv into FOLDER. "
                    "A screening aid, not a design.",
        epilog=_EPILOG_UNITS)
    p.add_argument("folder", metavar="FOLDER", help="output folder of 'voidcube reconstruct invert'")
    p.add_argument("--site", default=None, metavar="FILE",
                   help="site description (YAML); default: the file recorded in FOLDER/manifest.json")
    p.add_argument("--threshold-sigmas", type=float, default=v.sigmas, metavar="K",
                   help="detection threshold in robust standard deviations of the anomaly (dimensionless; "
                        "default: derived from --false-alarm and the smoothness and size of the cube)")
    p.add_argument("--false-alarm", type=float, default=v.false_alarm, metavar="P",
                   help=f"probability, 0..1, that a cube of pure noise yields any body (default {v.false_alarm:g}); "
                        "sets the threshold unless --threshold-sigmas is given")
    p.add_argument("--specific-gravity", type=float, default=h.specific_gravity, metavar="G",
                   help=f"specific gravity of the rock over the voids, t/m^3 (default {h.specific_gravity:g})")
    p.add_argument("--wall-dip-deg", type=float, default=h.dip_deg, metavar="DEG",
                   help=f"dip of the void walls for the scaled span, degrees (default {h.dip_deg:g}, the "
                        "cautious value)")
    p.add_argument("--rock-mass-q", type=float, default=h.rock_mass_q, metavar="Q",
                   help="rock mass quality Q of the crown (dimensionless); when given, the critical span, the "
                        "crown factor of safety and its acceptance class (Carter 2014) are reported")
    p.add_argument("--hole-standoff", type=float, default=h.hole_standoff_m, metavar="M",
                   help="list the blast holes whose charged column or subdrill comes within this distance of "
                        f"a body, metres (default {h.hole_standoff_m:g}, about one burden)")
    p.add_argument("--no-pictures", action="store_true", help="write tables and meshes but no PNG pictures")
    p.add_argument("--no-refine", action="store_true",
                   help="do not fit each body again against the picks as a sharp ellipsoid (faster; the "
                        "sizes are then the cube's, without bounds)")
    p.add_argument("--max-pictures", type=int, default=20, metavar="N",
                   help="draw plan and section slices for at most N voids (default 20)")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.set_defaults(func=_cmd_voids)


def build_parser(prog: str = "voidcube reconstruct") -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog=prog,
        description="Radar travel-time tomography: from node and pick tables to a velocity voxel cube, "
                    "bodies and the void report.",
        epilog=_EPILOG_UNITS,
    )
    parser.add_argument("--version", action="version", version=f"voidcube {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    _add_check_parsers(sub)
    _add_invert_parser(sub)
    _add_voids_parser(sub)
    p = sub.add_parser(
        "report", help="write report.html: cautions, void table, screening, pictures, data quality",
        description="Write one self-contained HTML report (pictures embedded, no network) into FOLDER "
                    "from the outputs of 'voidcube reconstruct invert' and 'voidcube reconstruct voids'.",
        epilog=_EPILOG_UNITS)
    p.add_argument("folder", metavar="FOLDER",
                   help="output folder of 'voidcube reconstruct invert' and 'voidcube reconstruct voids'")
    p.set_defaults(func=_cmd_report)
    return parser


def run_command(parser: argparse.ArgumentParser, argv, *, memory_hint: str) -> int:
    """Parse ``argv``, run the chosen subcommand and turn user errors into exit codes.

    Shared by the ``reconstruct`` and ``plan`` commands: an :class:`InputError`
    prints its message on stderr and returns 2; running out of memory returns 3
    with ``memory_hint``; Ctrl-C returns 130. Other exceptions are bugs and
    keep their traceback.
    """
    from reconstruct.allocator import keep_freed_memory_for_reuse

    keep_freed_memory_for_reuse()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return args.func(args)
    except InputError as error:
        print(f"error: {error}", file=sys.stderr)
        return 2
    except MemoryError:
        print(f"error: out of memory; {memory_hint}", file=sys.stderr)
        return 3
    except KeyboardInterrupt:
        print("interrupted; files already written are complete, none is half-written", file=sys.stderr)
        return 130


def main(argv=None) -> int:
    return run_command(build_parser(), argv,
                       memory_hint="use larger cells (model.cell_m) or a smaller model box")


if __name__ == "__main__":
    sys.exit(main())
