"""The ``reconstruct`` command: from pick tables to a velocity voxel cube.

Thin layer: parse arguments, call the library, write files, print a summary.
A user's mistake ends as clear lines on stderr and exit code 2, never a traceback.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from reconstruct import __version__
from reconstruct.errors import InputError

__all__ = ["main"]

_EPILOG_UNITS = "Units: metres (m), nanoseconds (ns), velocities in m/ns, conductivity in mS/m."


def _progress_printer(quiet: bool):
    start = time.perf_counter()
    last = [0.0]

    def say(message: str):
        if quiet:
            return
        now = time.perf_counter()
        # ray batches report often; keep stderr readable
        if message.startswith("straight rays:") and now - last[0] < 1.0 and "/" in message:
            done, total = message.split(":")[1].strip().split("/")
            if done != total:
                return
        last[0] = now
        print(f"[{now - start:7.1f} s] {message}", file=sys.stderr, flush=True)

    return say


def _add_inversion_arguments(p: argparse.ArgumentParser):
    g = p.add_argument_group("inversion")
    g.add_argument("--smoothing", type=float, default=None, metavar="LAMBDA",
                   help="smoothing weight lambda_s in the column-scaled system (dimensionless); "
                        "default: chosen automatically (discrepancy principle chi^2 = N when the "
                        "picks carry sigma_ns, else the L-curve corner)")
    g.add_argument("--damping-ratio", type=float, default=0.1, metavar="R",
                   help="damping towards the reference velocity as a fraction of lambda_s "
                        "(lambda_d = R * lambda_s; default 0.1)")
    g.add_argument("--horizontal-weight", type=float, default=1.0, metavar="W",
                   help="weight of roughness along x and y (default 1)")
    g.add_argument("--vertical-weight", type=float, default=1.0, metavar="W",
                   help="weight of roughness along z (default 1); lower it to allow sharper "
                        "vertical changes")
    g.add_argument("--velocity-min", type=float, default=0.03, metavar="M_PER_NS",
                   help="lowest velocity kept, m/ns (default 0.03: water is about 0.033)")
    g.add_argument("--velocity-max", type=float, default=0.30, metavar="M_PER_NS",
                   help="highest velocity kept, m/ns (default 0.30: air; never above c = 0.2998)")
    g.add_argument("--time-zero", choices=("clock", "delay", "none"), default="clock",
                   help="time-zero term per node: 'clock' (default) t = t_ray + tau_rx - tau_tx "
                        "for node clock offsets, reported relative to their mean; 'delay' "
                        "t = t_ray + tau_tx + tau_rx for instrument delays; 'none'")
    g.add_argument("--max-iterations", type=int, default=400, metavar="N",
                   help="LSQR iteration limit per solve (default 400)")
    g.add_argument("--default-sigma", type=float, default=1.0, metavar="NS",
                   help="pick uncertainty in ns assumed when the pick table has no sigma_ns "
                        "column (weights only; default 1 ns)")
    g.add_argument("--snap-tolerance", type=float, default=None, metavar="M",
                   help="largest allowed shift in metres when a node is snapped onto the ground "
                        "(default: the larger of 2 m and two cell diagonals)")
    g.add_argument("--robust", choices=("none", "huber", "tukey"), default=None,
                   help="reweighting against gross pick errors inside the LSQR loop: 'huber', 'tukey' "
                        "(Huber first, then Tukey's biweight) or 'none' (plain least squares); default "
                        "'huber' with straight rays, 'none' with bent rays (their steps are judged by the "
                        "plain misfit); picks ending with weight below 0.1 are listed in rejected_picks.csv")
    _add_qc_arguments(p)
    b = p.add_argument_group("bent rays")
    b.add_argument("--rays", choices=("straight", "bent"), default="bent",
                   help="forward model: 'bent' rays (default) traced through eikonal travel-time "
                        "fields (air included), iterated from the straight-ray model, or 'straight' "
                        "rays only (faster; air waves cannot be explained)")
    b.add_argument("--iterations", type=int, default=4, metavar="N",
                   help="bent-ray iterations after the straight-ray start (default 4); stops earlier "
                        "when the misfit improves by less than 2 %%")
    b.add_argument("--executor", choices=("serial", "processes", "dask"), default="processes",
                   help="where the per-node travel-time fields are computed: 'processes' (default, a "
                        "local process pool on all cores), 'serial', or 'dask'")
    b.add_argument("--workers", type=int, default=None, metavar="N",
                   help="number of local worker processes (default: all cores)")
    b.add_argument("--scheduler", default=None, metavar="tcp://HOST:PORT",
                   help="address of a running Dask scheduler; sends the per-node work to that "
                        "cluster (implies --executor dask)")
    b.add_argument("--write-rays", action="store_true",
                   help="also write rays.vtp: the final bent rays as polylines with pair ids and "
                        "observed and predicted times (ns)")


def _add_input_arguments(p: argparse.ArgumentParser):
    p.add_argument("--site", required=True, help="site description (YAML)")
    p.add_argument("--nodes", required=True, help="node table (CSV: node_id,x_m,y_m,z_m[,kind,borehole])")
    p.add_argument("--picks", required=True,
                   help="pick table (CSV: tx,rx,time_ns[,sigma_ns,amplitude,quality]); times in ns")
    p.add_argument("--out", required=True, help="output folder (created if missing)")


def _add_qc_arguments(p: argparse.ArgumentParser):
    q = p.add_argument_group("pick checks")
    q.add_argument("--keep-flagged", default="", metavar="FLAG[,FLAG]",
                   help="keep picks with these flags in the inversion instead of leaving them out "
                        "(faster_than_air, slower_than_band, air_direct, air_refracted)")


def _keep_flagged(args) -> tuple:
    return tuple(f.strip() for f in args.keep_flagged.split(",") if f.strip())


def _options_from(args):
    from reconstruct.inverse.solver import InversionOptions

    return InversionOptions(
        velocity_min_m_per_ns=args.velocity_min, velocity_max_m_per_ns=args.velocity_max,
        horizontal_weight=args.horizontal_weight, vertical_weight=args.vertical_weight,
        smoothing=args.smoothing, damping_ratio=args.damping_ratio, time_zero=args.time_zero,
        max_iterations=args.max_iterations, default_sigma_ns=args.default_sigma,
        robust=args.robust or ("huber" if getattr(args, "rays", "straight") == "straight" else "none"),
    )


def _check_output_folder(out) -> None:
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise InputError(f"--out {out}: this is an existing file, not a folder; give a folder path")


def _cmd_invert(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes, read_picks
    from reconstruct.inverse.straight import straight_ray_tomography
    from reconstruct.report.folders import write_tomography

    started = utc_now_iso()
    _check_output_folder(args.out)
    say = _progress_printer(args.quiet)
    options = _options_from(args)
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    picks = read_picks(args.picks, nodes)
    say(f"read {len(nodes)} nodes and {picks.n_rows} pick rows ({len(picks.excluded)} excluded on reading)")
    picks, exempt, qc_summary = _checked_picks(args, site, nodes, picks, say)
    if args.rays == "bent":
        from reconstruct.inverse.bent import BentOptions, bent_ray_tomography
        from reconstruct.parallel import executor_from_options

        executor = executor_from_options(args.executor if args.scheduler is None else "dask",
                                         args.workers, args.scheduler)
        bent = BentOptions(max_iterations=args.iterations, keep_rays=args.write_rays)
        run = bent_ray_tomography(site, nodes, picks, options, bent=bent, executor=executor,
                                  snap_tolerance_m=args.snap_tolerance, progress=say)
    else:
        if args.write_rays:
            raise InputError("--write-rays needs --rays bent (straight rays are the node-to-node lines)")
        run = straight_ray_tomography(site, nodes, picks, options, snap_tolerance_m=args.snap_tolerance,
                                      progress=say, robust_exempt=exempt)
    parameters = {k: v for k, v in vars(args).items() if k not in ("func", "quiet")}
    if args.rays == "bent":
        parameters["executor"] = executor.kind  # as used: --scheduler implies dask
    summary = write_tomography(
        run, args.out, inputs={"site": args.site, "nodes": args.nodes, "picks": args.picks},
        parameters=parameters, started=started, command="reconstruct invert", extra_summary={"pick_checks": qc_summary},
    )
    m, lam, v = summary["misfit"], summary["lambda"], summary["velocity_m_per_ns"]
    chi = "" if m["chi2"] is None else f", chi^2/N {m['chi2_per_pick']:.3f}"
    print(f"site: {summary['site']}")
    print(f"picks inverted: {summary['picks']['inverted']} (excluded {summary['picks']['excluded']}, "
          f"see excluded_picks.csv)")
    if len(summary["iterations"]) > 1:
        steps = ", ".join(f"{h['rms_ns']:.3f}" for h in summary["iterations"])
        print(f"rays: {summary['rays']}; RMS per iteration (ns): {steps}")
    print(f"misfit: RMS {m['rms_ns']:.3f} ns{chi}")
    print(f"lambda: {lam['smoothing']:.4g} by {lam['method']} ({lam['note']})")
    print(f"ground velocity: {v['ground_min']:.4f} to {v['ground_max']:.4f} m/ns, median "
          f"{v['ground_median']:.4f}; {summary['nodes']['snapped']} nodes snapped to the ground")
    if "robust" in summary:
        rb = summary["robust"]
        print(f"robust weights ({rb['loss']}): {rb['rejected']} picks rejected (see rejected_picks.csv)")
    print(f"output: {Path(args.out)}")
    return 0


def _checked_picks(args, site, nodes, picks, say):
    """Run the pick checks; refuse unusable data unless --accept-flags; return
    the picks to invert (a new selection; the table is untouched), the mask of
    those confirmed by an agreeing reciprocal pick (full weight in the robust
    reweighting) and a summary."""
    from reconstruct.checks.picks import (
        check_site_picks,
        kept_by_flags,
        picks_for_inversion,
        reciprocal_confirmed,
        usability_problems,
    )

    keep = _keep_flagged(args)
    placement, checks = check_site_picks(site, nodes, picks, snap_tolerance_m=args.snap_tolerance)
    problems = usability_problems(picks, checks)
    if problems and not args.accept_flags:
        reasons = "; ".join(p[len(picks.source) + 2:] if p.startswith(picks.source) else p for p in problems)
        raise InputError(f"{picks.source}: picks not usable as they stand: {reasons}. Run 'reconstruct qc' for "
                         "every flagged pick, or add --accept-flags to invert anyway")
    chosen = picks_for_inversion(picks, nodes, checks, rays=args.rays, keep_flagged=keep)
    counts = checks.counts()
    say("pick checks: " + ", ".join(f"{n} {f}" for f, n in counts.items() if n) if any(counts.values())
        else "pick checks: no pick flagged")
    summary = {"flag_counts": counts, "left_out": len(chosen.excluded) - len(picks.excluded),
               "sigma_source": checks.sigma_source, "pick_noise_from_reciprocity_ns": checks.noise_sigma_ns,
               "reciprocal_pairs": checks.n_reciprocal_pairs, "problems": problems,
               "accepted_despite_problems": bool(problems), "kept_flags": list(keep)}
    exempt = reciprocal_confirmed(checks)[kept_by_flags(checks, rays=args.rays, keep_flagged=keep)]
    return chosen, exempt, summary


def _cmd_qc(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.checks.picks import check_site_picks, picks_for_inversion, usability_problems
    from reconstruct.report.pick_checks import write_pick_checks
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes, read_picks

    started = utc_now_iso()
    _check_output_folder(args.out)
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    picks = read_picks(args.picks, nodes)
    keep = _keep_flagged(args)
    placement, checks = check_site_picks(site, nodes, picks, snap_tolerance_m=args.snap_tolerance)
    picks_for_inversion(picks, nodes, checks, rays=args.rays, keep_flagged=keep)  # checks the flag names
    problems = usability_problems(picks, checks)
    parameters = {k: v for k, v in vars(args).items() if k not in ("func",)}
    summary = write_pick_checks(picks, nodes, checks, problems, args.out, xyz_m=placement.xyz_m, site_name=site.name,
                                inputs={"site": args.site, "nodes": args.nodes, "picks": args.picks},
                                parameters=parameters, started=started, command="reconstruct qc", rays=args.rays,
                                keep_flagged=keep)
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
    print("verdict: " + ("usable" if not problems else "NOT usable as it stands: " + " | ".join(problems)))
    print(f"output: {Path(args.out)}")
    return 0


def _cmd_check(args) -> int:
    from reconstruct.model.placement import place_nodes
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes, read_picks
    from reconstruct.io.site import model_grid

    if args.picks and not args.nodes:
        raise InputError("--picks needs --nodes: picks name nodes of the node table; give both")
    site = load_site(args.site)
    grid, ground = model_grid(site)
    print(f"site: {site.name}: grid {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} = "
          f"{grid.n_cells:,} cells, {int(ground.sum()):,} ground")
    if args.nodes:
        nodes = read_nodes(args.nodes)
        placement = place_nodes(nodes, grid, ground, snap_tolerance_m=args.snap_tolerance)
        print(f"nodes: {len(nodes)} read, {int(placement.snapped.sum())} would be snapped to the "
              f"ground (largest shift {placement.shift_length_m.max():.2f} m)")
        if args.picks:
            picks = read_picks(args.picks, nodes)
            print(f"picks: {picks.n_rows} rows, {len(picks)} usable, {len(picks.excluded)} excluded")
    print("inputs are valid")
    return 0


def _cmd_voids(args) -> int:
    from reconstruct.interpret.screening import ScreeningOptions
    from reconstruct.interpret.folder import load_inversion_folder, screen_folder
    from reconstruct.report.folders import write_void_outputs
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.interpret.bodies import VoidOptions

    started = utc_now_iso()
    say = _progress_printer(args.quiet)
    if args.max_pictures < 0:
        raise InputError(f"--max-pictures must be >= 0 (got {args.max_pictures})")
    void_options = VoidOptions(sigmas=args.sigmas, false_alarm=args.false_alarm)
    screening_options = ScreeningOptions(specific_gravity=args.specific_gravity, dip_deg=args.dip,
                                         rock_mass_q=args.rock_mass_q)
    if not args.no_pictures:
        from reconstruct.report.pictures import start_offscreen_probe

        start_offscreen_probe()  # runs while the cube is read and searched
    data = load_inversion_folder(args.folder, args.site)
    say(f"cube {data.grid.shape[0]} x {data.grid.shape[1]} x {data.grid.shape[2]} cells, site {data.site_path}")
    analysis, screening = screen_folder(data, void_options, screening_options)
    parameters = {"sigmas": args.sigmas, "false_alarm": args.false_alarm, "site": str(data.site_path), "pictures": not args.no_pictures,
                  "max_pictures": args.max_pictures,
                  "screening": {"specific_gravity": args.specific_gravity, "dip_deg": args.dip,
                                "rock_mass_q": args.rock_mass_q}}
    content = write_void_outputs(data, analysis, screening, pictures=not args.no_pictures,
                                 max_pictures=args.max_pictures, parameters=parameters, started=started,
                                 progress=say)
    counts = content["counts"]
    print(f"site: {content['site']}")
    print(f"voids: {counts['resolved']}, unresolved indications: {counts['unresolved']} "
          f"(threshold {content['method']['threshold_sigmas']:.2f} robust sigmas; see voids.json)")
    for entry in content["screening"]["ranked"][:5]:
        print(f"  {entry['rank']}. body {entry['body_id']} ({entry['status']}, confidence {entry['confidence']}): "
              f"{entry['reasons']}")
    print(f"pictures: {content['rendering']}")
    print(f"output: {Path(args.folder)} (voids.csv, voids.json, screening.csv, interpretation.vti, voids.vtp, "
          "ground.vtp, pictures/)")
    print("screening aid, not a design: confirm by probe drilling; a null result does not prove no void")
    return 0


def _cmd_report(args) -> int:
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.report.void_report import write_report

    started = utc_now_iso()
    path = write_report(args.folder, started=started)
    print(f"report: {path}")
    return 0


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="reconstruct",
        description="Radar travel-time tomography: from node and pick tables to a velocity voxel cube.",
        epilog=_EPILOG_UNITS,
    )
    parser.add_argument("--version", action="version", version=f"voidcube {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser(
        "invert", help="invert first-arrival times into a velocity cube (straight or bent rays)",
        description="Invert first-arrival pick times into a velocity voxel cube with straight or "
                    "bent rays, regularised LSQR and a time-zero term per node. Writes velocity.vti, "
                    "residuals.csv, time_zero.csv, nodes_used.csv, excluded_picks.csv, "
                    "summary.json, manifest.json and, with --write-rays, rays.vtp into OUT.",
        epilog=_EPILOG_UNITS,
    )
    _add_input_arguments(p)
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--accept-flags", action="store_true",
                   help="invert even when the pick checks find the data unusable (flagged picks are still "
                        "left out as listed in excluded_picks.csv)")
    _add_inversion_arguments(p)
    p.set_defaults(func=_cmd_invert)

    p = sub.add_parser(
        "qc", help="check picks: reciprocity, node clocks, velocity band, air waves; writes a report",
        description="Check every pick before inverting: reciprocal pairs, node clock (time-zero) estimates "
                    "as transmitter and receiver, apparent velocity against 0.03-0.30 m/ns, direct and "
                    "refracted air waves. Writes pick_checks.csv, node_time_zero.csv, pick_checks.json, "
                    "pick_checks.html and manifest.json into OUT. The pick table is never changed.",
        epilog=_EPILOG_UNITS)
    _add_input_arguments(p)
    p.add_argument("--rays", choices=("straight", "bent"), default="bent",
                   help="the forward model the picks are meant for: with 'bent' (default, as "
                        "`reconstruct invert`) air-wave picks are kept, with 'straight' they are "
                        "marked as left out")
    p.add_argument("--snap-tolerance", type=float, default=None, metavar="M",
                   help="largest allowed snap onto the ground, metres")
    _add_qc_arguments(p)
    p.set_defaults(func=_cmd_qc)

    p = sub.add_parser("check", help="validate a site description and, optionally, node and pick tables",
                       description="Load and validate the inputs without inverting; list every problem.",
                       epilog=_EPILOG_UNITS)
    p.add_argument("--site", required=True, help="site description (YAML)")
    p.add_argument("--nodes", help="node table (CSV)")
    p.add_argument("--picks", help="pick table (CSV); needs --nodes")
    p.add_argument("--snap-tolerance", type=float, default=None, metavar="M",
                   help="largest allowed snap onto the ground, metres")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser(
        "voids", help="find void bodies in an inversion folder, screen them, write meshes and pictures",
        description="Find void bodies in the velocity cube of an inversion folder (robust background per "
                    "depth slab, threshold from the misfit and the resolution), rank them by roof "
                    "thickness, span and stand-off from planned works, and write voids.csv, voids.json, "
                    "screening.csv, interpretation.vti, voids.vtp, ground.vtp and pictures/ into FOLDER. "
                    "A screening aid, not a design.",
        epilog=_EPILOG_UNITS)
    p.add_argument("folder", metavar="FOLDER", help="output folder of 'reconstruct invert'")
    p.add_argument("--site", default=None,
                   help="site description (YAML); default: the file recorded in FOLDER/manifest.json")
    p.add_argument("--sigmas", type=float, default=None, metavar="K",
                   help="detection threshold in robust standard deviations of the anomaly (default: "
                        "derived from --false-alarm and the smoothness and size of the cube)")
    p.add_argument("--false-alarm", type=float, default=0.05, metavar="P",
                   help="chance that a cube of pure noise yields any body (default 0.05); sets the "
                        "threshold unless --sigmas is given")
    p.add_argument("--specific-gravity", type=float, default=2.7, metavar="G",
                   help="specific gravity of the rock over the voids, t/m^3 (default 2.7)")
    p.add_argument("--dip", type=float, default=0.0, metavar="DEG",
                   help="dip of the void walls for the scaled span, degrees (default 0, the cautious value)")
    p.add_argument("--rock-mass-q", type=float, default=None, metavar="Q",
                   help="rock mass quality Q of the crown; when given, the critical span is compared")
    p.add_argument("--no-pictures", action="store_true", help="write tables and meshes but no PNG pictures")
    p.add_argument("--max-pictures", type=int, default=20, metavar="N",
                   help="draw plan and section slices for at most N voids (default 20)")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.set_defaults(func=_cmd_voids)

    p = sub.add_parser(
        "report", help="write report.html: cautions, void table, screening, pictures, data quality",
        description="Write one self-contained HTML report (pictures embedded, no network) into FOLDER "
                    "from the outputs of 'reconstruct invert' and 'reconstruct voids'.",
        epilog=_EPILOG_UNITS)
    p.add_argument("folder", metavar="FOLDER", help="output folder of 'reconstruct invert' and 'reconstruct voids'")
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
    import sys

    sys.exit(main())
