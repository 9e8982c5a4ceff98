"""The ``plan`` command: survey design before fieldwork.

Thin layer: parse, call the library, write files, print a summary.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from reconstruct import __version__
from reconstruct.cli import _progress_printer, run_command
from reconstruct.errors import InputError

__all__ = ["main"]

_UNITS = "Units: metres (m), nanoseconds (ns), velocities in m/ns, conductivity in mS/m, frequency in MHz."


def _cmd_describe(args) -> int:
    import numpy as np

    from reconstruct.grid import ground_top_m
    from reconstruct.site import load_site
    from reconstruct.workflow import model_grid

    site = load_site(args.site)
    grid, ground = model_grid(site)
    top = ground_top_m(grid, ground)
    rock = site.rock
    print(f"site: {site.name}")
    print(f"model box: origin {tuple(site.model.origin_m)} m, size {tuple(site.model.size_m)} m")
    print(f"grid: {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} cells of "
          f"{grid.cell_m[0]:g} x {grid.cell_m[1]:g} x {grid.cell_m[2]:g} m = {grid.n_cells:,} cells; "
          f"{int(ground.sum()):,} ground (unknowns), {int((~ground).sum()):,} air (fixed at c)")
    if np.isfinite(top).any():
        print(f"ground surface ({site.ground.kind}): {np.nanmin(top):g} to {np.nanmax(top):g} m elevation")
    print(f"rock: {rock.velocity_m_per_ns:.4f} m/ns (K = {rock.relative_permittivity:.2f}), "
          f"{rock.conductivity_ms_per_m:g} mS/m, antenna {rock.antenna_frequency_mhz:g} MHz, "
          f"wavelength in rock {rock.velocity_m_per_ns / (rock.antenna_frequency_mhz * 1e-3):.2f} m")
    print(f"boreholes: {len(site.boreholes)}; planned works: {len(site.planned_works)}; "
          f"exclusion zones: {len(site.exclusion_zones)}")
    return 0


def _cmd_simulate(args) -> int:
    import numpy as np

    from reconstruct.outputs import write_csv_atomic
    from reconstruct.site import load_site
    from reconstruct.tables import read_nodes

    from .simulate import simulate_picks
    from .truth import load_truth

    start = time.perf_counter()

    def say(message):
        if not args.quiet:
            print(f"[{time.perf_counter() - start:7.1f} s] {message}", file=sys.stderr, flush=True)

    if not (np.isfinite(args.fade_sigma) and args.fade_sigma >= 0):
        raise InputError(f"--fade-sigma must be a number >= 0 in dB (got {args.fade_sigma:g})")
    if args.fade_sigma and not args.link_budget:
        raise InputError("--fade-sigma needs --link-budget; add it or drop --fade-sigma")
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    truth = load_truth(args.truth)
    from reconstruct.parallel import executor_from_options

    executor = executor_from_options(args.executor, args.workers, None)
    survey = simulate_picks(site, nodes, truth, both_directions=not args.one_way,
                            max_distance_m=args.max_distance, rays=args.rays, executor=executor,
                            progress=say)
    missed_note = ""
    if args.link_budget:
        from .link_budget import antenna_axes, link_budget_for_site, pair_links
        from .simulate import drop_missed_picks

        links = pair_links(site, link_budget_for_site(site), nodes.xyz_m, antenna_axes(site, nodes),
                           survey.tx, survey.rx)
        survey, missed = drop_missed_picks(survey, links.margin_db, fade_sigma_db=args.fade_sigma,
                                           seed=truth.seed)
        missed_note = f"; {int(missed.sum())} picks missed below the link budget"
    if survey.tx.size == 0:
        raise InputError(
            f"no transmitter-receiver pair to simulate ({len(nodes)} nodes"
            + (f", none within --max-distance {args.max_distance:g} m" if args.max_distance is not None else "")
            + "); give more nodes or a larger --max-distance")
    ids = nodes.ids
    write_csv_atomic(
        args.out, ["tx", "rx", "time_ns", "sigma_ns"],
        ([ids[a], ids[b], f"{t:.3f}", f"{s:.3f}"]
         for a, b, t, s in zip(survey.tx, survey.rx, survey.time_ns, survey.sigma_ns)),
    )
    if args.outliers_out:
        bad = np.flatnonzero(survey.outlier)
        write_csv_atomic(args.outliers_out, ["tx", "rx", "error_ns"],
                         ([ids[survey.tx[k]], ids[survey.rx[k]], f"{survey.outlier_error_ns[k]:.3f}"] for k in bad))
    if args.clock_out:
        write_csv_atomic(args.clock_out, ["node_id", "clock_offset_ns"],
                         ([ids[k], f"{survey.clock_offset_ns[k]:.4f}"] for k in range(len(ids))))
    print(f"{survey.tx.size} synthetic picks written to {Path(args.out)} "
          f"(noise {truth.noise_sigma_ns:g} ns, clock offsets sd {truth.clock_offset_sigma_ns:g} ns, "
          + (f"{int(survey.outlier.sum())} gross outliers, " if survey.outlier.any() else "")
          + f"times {np.min(survey.time_ns):.1f} to {np.max(survey.time_ns):.1f} ns){missed_note}")
    return 0


# --------------------------------------------------------------------------
# survey design: layout, pairs, mesh, schedule


def _write_manifest(out: Path, command: str, inputs: dict, args, written, started: str) -> None:
    """manifest.json of this run; an earlier plan run's manifest in the folder is kept inside it."""
    import json

    from reconstruct.outputs import build_manifest, utc_now_iso, write_json_atomic

    parameters = {k: v for k, v in vars(args).items() if k not in ("func", "quiet")}
    manifest = build_manifest(command=command, inputs=inputs, parameters=parameters,
                              outputs=[Path(p).name for p in written] + ["manifest.json"],
                              started=started, finished=utc_now_iso())
    earlier_path = out / "manifest.json"
    if earlier_path.is_file():
        try:
            earlier = json.loads(earlier_path.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            earlier = None
        if isinstance(earlier, dict) and str(earlier.get("command", "")).startswith("plan"):
            manifest["earlier_runs"] = earlier.pop("earlier_runs", []) + [earlier]
    write_json_atomic(earlier_path, manifest)


def _layout_options(args):
    from .layouts import LayoutOptions

    return LayoutOptions(
        budget=args.budget, pattern=args.pattern, surface_spacing_m=args.surface_spacing,
        face_spacing_m=args.face_spacing, hole_spacing_m=args.hole_spacing, hole_share=args.hole_share,
        face_share=args.face_share, jitter_m=args.jitter, seed=args.seed, setback_m=args.setback,
        min_face_height_m=args.min_face_height, min_hole_depth_m=args.min_hole_depth,
        candidate_factor=args.candidates)


def _schedule_options(args):
    from .schedule import ScheduleOptions

    return ScheduleOptions(
        stacks=args.stacks, pulse_repetition_khz=args.prf, sampling=args.sampling,
        record_length_ns=args.record_length, sample_interval_ns=args.sample_interval,
        command_overhead_s=args.command_overhead, data_rate_kbps=args.data_rate,
        transmitters=args.transmitters, deploy_minutes_per_node=args.deploy_node,
        deploy_minutes_per_string=args.deploy_string)


def _run_layout(site, args, out: Path, say) -> tuple[list, Path]:
    from .layouts import candidate_positions, design_layout, write_layout_csv

    options = _layout_options(args)
    layout = design_layout(site, options)
    candidates = candidate_positions(site, options, layout)
    say(f"layout of {len(layout)} nodes, {len(candidates)} candidate positions")
    nodes_path = write_layout_csv(out / "nodes.csv", layout)
    written = [nodes_path, write_layout_csv(out / "candidates.csv", candidates)]
    counts = layout.counts()
    spacing = ", ".join(f"{k} {v:.2f} m" for k, v in layout.spacing_m.items() if v is not None)
    print(f"layout: {len(layout)} of {options.budget} nodes ({counts['borehole']} in holes, {counts['face']} on "
          f"faces, {counts['surface']} on the surface; spacing {spacing or 'none'}); "
          f"{len(candidates)} candidate positions")
    return written, nodes_path


def _run_pairs(site, nodes, args, out: Path, say, *, write=True):
    from reconstruct.outputs import write_json_atomic

    from .link_budget import link_budget_for_site
    from .pair_graph import build_pair_graph, pair_graph_summary, write_graphml, write_pairs_csv

    budget = link_budget_for_site(site, system_performance_db=args.system_performance)
    pairs = build_pair_graph(site, nodes, budget, progress=say)
    summary = pair_graph_summary(pairs)
    written = []
    if write:
        written = [write_pairs_csv(out / "pairs.csv", pairs),
                   write_graphml(out / "pairs.graphml", pairs.graph),
                   write_json_atomic(out / "pairs_summary.json", summary)]
        p, d, lb = summary["pairs"], summary["degree"], summary["link_budget"]
        lo, hi = lb["rule_of_thumb_range_m"]
        print(f"pairs: {p['heard']} of {p['total']} heard ({100 * p['heard_fraction']:.0f} %), "
              f"{p['heard_air_flagged']} of them flagged (first arrival may be the air wave); degree "
              f"{d['min']:g} to {d['max']:g}, mean {d['mean']:.1f}; deaf stations: "
              f"{len(summary['deaf_stations'])}")
        print(f"link range: {lb['computed_range_m']:.1f} m by the link budget "
              f"({lb['attenuation_db_per_m']:.3f} dB/m exact, {lb['attenuation_low_loss_db_per_m']:.3f} dB/m "
              f"low-loss form); rule of thumb {lo:.1f} to {hi:.1f} m (10 to 15 wavelengths in resistive rock)")
    return pairs, written


def _run_mesh(site, nodes, args, out: Path, *, write=True):
    from reconstruct.outputs import write_json_atomic

    from .pair_graph import check_nodes_in_site, write_graphml
    from .radio_mesh import build_radio_mesh, mesh_summary, mesh_with_relays

    check_nodes_in_site(site, nodes)
    mesh = build_radio_mesh(site, nodes, range_m=args.radio_range)
    written = []
    if write:
        summary = mesh_summary(mesh)
        written = [write_graphml(out / "mesh.graphml", mesh_with_relays(mesh)),
                   write_json_atomic(out / "mesh_summary.json", summary)]
        state = "connected" if summary["connected"] else f"NOT connected ({len(mesh.disconnected)} nodes cut off)"
        print(f"radio mesh: {state}; max {summary['hops']['max']} hops to the gateway; "
              f"{len(mesh.articulation)} articulation points; {len(mesh.relays)} relays suggested")
    return mesh, written


def _run_schedule(site, pairs, mesh, args, out: Path):
    from reconstruct.outputs import write_json_atomic

    from .schedule import plan_schedule, schedule_summary, write_schedule_csv

    strings = len({h for h in (d.get("borehole") for _, d in pairs.graph.nodes(data=True)) if h})
    schedule = plan_schedule(pairs.graph, velocity_m_per_ns=site.rock.velocity_m_per_ns,
                             frequency_mhz=site.rock.antenna_frequency_mhz, options=_schedule_options(args),
                             hops=mesh.hops if mesh is not None else None, strings=strings)
    summary = schedule_summary(schedule)
    written = [write_schedule_csv(out / "schedule.csv", schedule),
               write_json_atomic(out / "schedule_summary.json", summary)]
    print(f"schedule: {summary['slots']} slots, record {summary['record_length_ns']:g} ns, "
          f"{summary['stacks']} stacks; acquisition {summary['survey_s'] / 60:.1f} min, time on site "
          f"{summary['time_on_site_hours']:.1f} h")
    return written


def _start(args):
    from reconstruct.cli import _check_output_folder
    from reconstruct.outputs import utc_now_iso
    from reconstruct.site import load_site

    started = utc_now_iso()
    _check_output_folder(args.out)
    return started, load_site(args.site), Path(args.out)


def _cmd_layout(args) -> int:
    started, site, out = _start(args)
    written, _ = _run_layout(site, args, out, _progress_printer(args.quiet))
    _write_manifest(out, "plan layout", {"site": args.site}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_pairs(args) -> int:
    from reconstruct.tables import read_nodes

    started, site, out = _start(args)
    _, written = _run_pairs(site, read_nodes(args.nodes), args, out, _progress_printer(args.quiet))
    _write_manifest(out, "plan pairs", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_mesh(args) -> int:
    from reconstruct.tables import read_nodes

    started, site, out = _start(args)
    _, written = _run_mesh(site, read_nodes(args.nodes), args, out)
    _write_manifest(out, "plan mesh", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_schedule(args) -> int:
    from reconstruct.tables import read_nodes

    started, site, out = _start(args)
    nodes = read_nodes(args.nodes)
    pairs, _ = _run_pairs(site, nodes, args, out, _progress_printer(args.quiet), write=False)
    mesh = _run_mesh(site, nodes, args, out, write=False)[0] if site.radio.gateway_m is not None else None
    written = _run_schedule(site, pairs, mesh, args, out)
    _write_manifest(out, "plan schedule", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_design(args) -> int:
    from reconstruct.tables import read_nodes

    started, site, out = _start(args)
    say = _progress_printer(args.quiet)
    written, nodes_path = _run_layout(site, args, out, say)
    nodes = read_nodes(nodes_path)
    pairs, more = _run_pairs(site, nodes, args, out, say)
    written += more
    mesh = None
    if site.radio.gateway_m is not None:
        mesh, more = _run_mesh(site, nodes, args, out)
        written += more
    else:
        print("radio mesh: skipped, the site gives no radio.gateway_m")
    written += _run_schedule(site, pairs, mesh, args, out)
    _write_manifest(out, "plan design", {"site": args.site}, args, written, started)
    print(f"output: {out}")
    return 0


def _add_layout_arguments(p):
    g = p.add_argument_group("layout")
    g.add_argument("--budget", type=int, required=True, metavar="N", help="largest number of nodes")
    g.add_argument("--pattern", choices=("staggered", "regular"), default="staggered",
                   help="surface grid: staggered (hexagonal, default) or regular (square)")
    g.add_argument("--surface-spacing", type=float, default=None, metavar="M",
                   help="surface node spacing in m (default: the densest grid that fits the budget)")
    g.add_argument("--face-spacing", type=float, default=None, metavar="M",
                   help="spacing along bench faces in m (default: fitted to the face share)")
    g.add_argument("--hole-spacing", type=float, default=None, metavar="M",
                   help="spacing along holes in m (default: fitted to the hole share)")
    g.add_argument("--hole-share", type=float, default=0.5, metavar="F",
                   help="largest fraction of the budget put in holes (default 0.5)")
    g.add_argument("--face-share", type=float, default=0.2, metavar="F",
                   help="largest fraction of the budget put on bench faces (default 0.2)")
    g.add_argument("--jitter", type=float, default=0.0, metavar="M",
                   help="random plan offset of surface nodes, radius in m (default 0: none)")
    g.add_argument("--seed", type=int, default=0, help="seed of the jitter (default 0)")
    g.add_argument("--setback", type=float, default=1.0, metavar="M",
                   help="distance kept between surface nodes and bench faces, m (default 1)")
    g.add_argument("--min-face-height", type=float, default=2.0, metavar="M",
                   help="smallest drop of the ground that counts as a face, m (default 2)")
    g.add_argument("--min-hole-depth", type=float, default=1.0, metavar="M",
                   help="shallowest hole node, m along the hole from the collar (default 1)")
    g.add_argument("--candidates", type=float, default=3.0, metavar="F",
                   help="candidate positions as a multiple of the budget (default 3)")


def _add_pairs_arguments(p):
    p.add_argument("--system-performance", type=float, default=None, metavar="DB",
                   help="overrides radar.system_performance_db of the site")


def _add_mesh_arguments(p):
    p.add_argument("--radio-range", type=float, default=None, metavar="M",
                   help="overrides radio.range_m of the site")


def _add_schedule_arguments(p):
    g = p.add_argument_group("schedule")
    g.add_argument("--stacks", type=int, default=32, help="traces stacked per record (default 32)")
    g.add_argument("--prf", type=float, default=100.0, metavar="KHZ",
                   help="pulse repetition frequency, kHz (default 100)")
    g.add_argument("--sampling", choices=("sequential", "real_time"), default="sequential",
                   help="sequential: one sample per pulse (default); real_time: a whole trace per pulse")
    g.add_argument("--record-length", type=float, default=None, metavar="NS",
                   help="record length, ns (default 1.5 x the longest heard straight-ray time)")
    g.add_argument("--sample-interval", type=float, default=None, metavar="NS",
                   help="sample interval, ns (default a tenth of the antenna period)")
    g.add_argument("--command-overhead", type=float, default=1.0, metavar="S",
                   help="radio command and synchronisation per slot, s (default 1)")
    g.add_argument("--data-rate", type=float, default=50.0, metavar="KBPS",
                   help="radio data rate for traces, kbit/s (default 50)")
    g.add_argument("--transmitters", choices=("all", "cover"), default="all",
                   help="all: every node transmits (both directions, default); cover: fewest transmitters "
                        "that record every heard pair once")
    g.add_argument("--deploy-node", type=float, default=5.0, metavar="MIN",
                   help="minutes to set out and pick up a surface or face node (default 5)")
    g.add_argument("--deploy-string", type=float, default=20.0, metavar="MIN",
                   help="minutes to lower and recover a hole string (default 20)")


def _design_parser(sub, name, *, help, description, func, nodes=True, quiet=True, groups=()):
    p = sub.add_parser(name, help=help, description=description, epilog=_UNITS)
    p.add_argument("site", help="site description (YAML)")
    if nodes:
        p.add_argument("--nodes", required=True, help="node table (CSV)")
    p.add_argument("--out", required=True, help="output folder (created if missing)")
    if quiet:
        p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    for add in groups:
        add(p)
    p.set_defaults(func=func)


def _add_design_parsers(sub):
    _design_parser(
        sub, "layout", help="node layout within a budget: surface grid, bench faces, hole strings",
        description="Choose node positions from the site description within a node budget: a regular or "
                    "staggered surface grid, lines along bench faces and strings in boreholes and blast "
                    "holes, outside exclusion zones. Writes nodes.csv, candidates.csv and manifest.json.",
        func=_cmd_layout, nodes=False, groups=(_add_layout_arguments,))
    _design_parser(
        sub, "pairs", help="link budget of every node pair and the graph of heard pairs",
        description="Compute the link budget (dB) of every pair of a node table and the graph of the "
                    "pairs heard. Writes pairs.csv, pairs.graphml, pairs_summary.json and manifest.json.",
        func=_cmd_pairs, groups=(_add_pairs_arguments,))
    _design_parser(
        sub, "mesh", help="radio mesh to the gateway: hops, articulation points, relays",
        description="Build the radio mesh of a node table (hole strings cabled to their collar) and check "
                    "that every node reaches the gateway. Writes mesh.graphml, mesh_summary.json and "
                    "manifest.json.",
        func=_cmd_mesh, quiet=False, groups=(_add_mesh_arguments,))
    _design_parser(
        sub, "schedule", help="shot schedule: transmitter slots, listeners, time on site",
        description="Plan which node transmits in which slot and who listens, and estimate the time on "
                    "site. Writes schedule.csv, schedule_summary.json and manifest.json.",
        func=_cmd_schedule, groups=(_add_pairs_arguments, _add_mesh_arguments, _add_schedule_arguments))
    _design_parser(
        sub, "design", help="layout, pairs, mesh and schedule in one run",
        description="Run layout, pairs, mesh (when the site gives a gateway) and schedule into one folder.",
        func=_cmd_design, nodes=False,
        groups=(_add_layout_arguments, _add_pairs_arguments, _add_mesh_arguments, _add_schedule_arguments))


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="plan", description="Design a radar tomography survey before fieldwork.",
                                     epilog=_UNITS)
    parser.add_argument("--version", action="version", version=f"voidcube {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("describe", help="summarise a site's model grid, ground and rock",
                       description="Load a site description and print its grid, ground and rock figures.",
                       epilog=_UNITS)
    p.add_argument("site", help="site description (YAML)")
    p.set_defaults(func=_cmd_describe)

    p = sub.add_parser(
        "simulate", help="synthetic picks from a truth model (straight rays, clock offsets, noise)",
        description="Simulate first-arrival picks for every transmitter-receiver pair of a node table "
                    "through a truth model (background rock with air-, water- or clay-filled bodies), "
                    "on a grid finer than the model grid, adding node clock offsets and Gaussian "
                    "pick noise. Writes a pick table (CSV: tx,rx,time_ns,sigma_ns).",
        epilog=_UNITS)
    p.add_argument("--site", required=True, help="site description (YAML)")
    p.add_argument("--nodes", required=True, help="node table (CSV)")
    p.add_argument("--truth", required=True, help="truth model (YAML, see plan/truth.py)")
    p.add_argument("--out", required=True, help="pick table to write (CSV)")
    p.add_argument("--clock-out", help="also write the true clock offset per node (CSV), ns")
    p.add_argument("--outliers-out", help="also write the picks made gross outliers (CSV: tx,rx,error_ns)")
    p.add_argument("--one-way", action="store_true", help="one pick per pair instead of both directions")
    p.add_argument("--max-distance", type=float, default=None, metavar="M",
                   help="leave out pairs further apart than M metres")
    p.add_argument("--rays", choices=("bent", "straight"), default="bent",
                   help="'bent' (default): true first arrivals from eikonal travel-time fields, air "
                        "included (air waves, rays drawn into fast voids); 'straight': slowness "
                        "integrated along straight lines, for straight-ray tests only")
    p.add_argument("--executor", choices=("serial", "processes"), default="processes",
                   help="where the travel-time fields are computed (default: a local process pool)")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="number of worker processes (default: all cores)")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--link-budget", action="store_true",
                   help="leave out the pairs whose link-budget margin is below 0 dB (missed picks)")
    p.add_argument("--fade-sigma", type=float, default=0.0, metavar="DB",
                   help="with --link-budget: random fade added to every margin, standard deviation in dB "
                        "(seeded by the truth model's seed; default 0)")
    p.set_defaults(func=_cmd_simulate)
    _add_design_parsers(sub)
    return parser


def main(argv=None) -> int:
    return run_command(build_parser(), argv,
                       memory_hint="use a smaller refine in the truth model or larger cells")
