"""The ``voidcube plan`` commands: survey design before fieldwork.

Thin layer: parse, call the library, write files, print a summary.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from reconstruct import __version__
from reconstruct.cli import add_executor_arguments, executor_from_args, progress_printer, run_command
from reconstruct.errors import InputError

__all__ = ["main"]

_UNITS = "Units: metres (m), nanoseconds (ns), velocities in m/ns, conductivity in mS/m, frequency in MHz."


def _cmd_describe(args) -> int:
    import numpy as np

    from reconstruct.model.grid import ground_top_m
    from reconstruct.io.site import load_site
    from reconstruct.io.site import model_grid

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


#: Files 'voidcube plan simulate' writes into its --out folder.
SIMULATE_FILES = ("picks.csv", "true_time_zero.csv", "gross_errors.csv", "manifest.json")


def _cmd_simulate(args) -> int:
    import numpy as np

    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes

    from plan.synthetic.simulate import simulate_picks
    from plan.synthetic.truth import load_truth

    started = utc_now_iso()
    say = progress_printer(args.quiet)
    if not (np.isfinite(args.fade_sigma) and args.fade_sigma >= 0):
        raise InputError(f"--fade-sigma must be a number >= 0 in dB (got {args.fade_sigma:g})")
    if args.fade_sigma and not args.link_budget:
        raise InputError("--fade-sigma needs --link-budget; add it or drop --fade-sigma")
    executor = executor_from_args(args)
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    truth = load_truth(args.truth)
    out = _output_folder(args.out)
    survey = simulate_picks(site, nodes, truth, both_directions=not args.one_way,
                            max_distance_m=args.max_distance, rays=args.rays, executor=executor,
                            progress=say)
    missed_note = ""
    if args.link_budget:
        from plan.radio.link_budget import link_budget_for_site, site_pair_links
        from plan.synthetic.simulate import drop_missed_picks

        links = site_pair_links(site, link_budget_for_site(site), nodes, survey.tx, survey.rx)
        survey, missed = drop_missed_picks(survey, links.margin_db, fade_sigma_db=args.fade_sigma,
                                           seed=truth.seed)
        missed_note = f"; {int(missed.sum())} picks missed below the link budget"
    if survey.tx.size == 0:
        raise InputError(
            f"no transmitter-receiver pair to simulate ({len(nodes)} nodes"
            + (f", none within --max-distance {args.max_distance:g} m" if args.max_distance is not None else "")
            + "); give more nodes or a larger --max-distance")
    written = _write_survey(out, nodes.ids, survey)
    _write_manifest(out, "voidcube plan simulate", {"site": args.site, "nodes": args.nodes, "truth": args.truth},
                    args, written, started)
    print(f"{survey.tx.size} synthetic picks written to {out / 'picks.csv'} "
          f"(noise {truth.noise_sigma_ns:g} ns, time-zero offsets sd {truth.time_zero_sigma_ns:g} ns, "
          + (f"{int(survey.outlier.sum())} gross errors, " if survey.outlier.any() else "")
          + f"times {np.min(survey.time_ns):.1f} to {np.max(survey.time_ns):.1f} ns){missed_note}")
    return 0


def _write_survey(out: Path, ids, survey) -> list:
    """picks.csv, true_time_zero.csv and gross_errors.csv of a simulated survey; returns the paths."""
    import numpy as np

    from reconstruct.io.outputs import write_csv_atomic

    bad = np.flatnonzero(survey.outlier)
    return [
        write_csv_atomic(out / "picks.csv", ["tx", "rx", "time_ns", "sigma_ns", "shot_time_s"],
                         ([ids[a], ids[b], f"{t:.3f}", f"{s:.3f}", f"{h:.1f}"]
                          for a, b, t, s, h in zip(survey.tx, survey.rx, survey.time_ns, survey.sigma_ns,
                                                   survey.shot_time_s))),
        write_csv_atomic(out / "true_time_zero.csv", ["node_id", "time_zero_ns", "clock_drift_ns_per_h"],
                         ([ids[k], f"{survey.time_zero_ns[k]:.4f}", f"{survey.clock_drift_ns_per_h[k]:.4f}"]
                          for k in range(len(ids)))),
        write_csv_atomic(out / "gross_errors.csv", ["tx", "rx", "error_ns"],
                         ([ids[survey.tx[k]], ids[survey.rx[k]], f"{survey.outlier_error_ns[k]:.3f}"] for k in bad)),
    ]


def _float_list(text: str):
    try:
        values = tuple(float(v) for v in text.split(",") if v.strip())
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected numbers separated by commas, e.g. 2,4,8 (got {text!r})") from None
    if not values:
        raise argparse.ArgumentTypeError("give at least one number")
    return values


def _add_standard_arguments(p: argparse.ArgumentParser):
    from plan.assess.coverage import CoverageStandard

    d = CoverageStandard()
    g = p.add_argument_group("coverage standard and target volume")
    g.add_argument("--min-rays", type=int, default=d.min_rays, metavar="N",
                   help=f"rays that must cross a target cell (default {d.min_rays})")
    g.add_argument("--min-angular", type=float, default=d.min_angular_coverage, metavar="A",
                   help=f"lowest angular coverage of a target cell, 0..1 (dimensionless; default "
                        f"{d.min_angular_coverage:g})")
    g.add_argument("--max-resolution", type=float, default=d.max_resolution_m, metavar="M",
                   help="widest acceptable resolution floor (first Fresnel zone width), metres (default: not used)")
    g.add_argument("--depth-of-interest", type=float, default=d.depth_of_interest_m, metavar="M",
                   help="depth below the ground or the planned work down to which the target reaches, metres "
                        f"(default {d.depth_of_interest_m:g} m)")
    g.add_argument("--works-buffer", type=float, default=d.works_buffer_m, metavar="M",
                   help="plan-view margin around planned works, and half-width of haul roads, metres "
                        f"(default {d.works_buffer_m:g} m)")
    g.add_argument("--max-distance", type=float, default=d.max_distance_m, metavar="M",
                   help="pairs further apart are not recorded (link range), metres (default: every pair)")


def _standard_from(args):
    from plan.assess.coverage import CoverageStandard

    return CoverageStandard(min_rays=args.min_rays, min_angular_coverage=args.min_angular,
                            max_resolution_m=args.max_resolution, depth_of_interest_m=args.depth_of_interest,
                            works_buffer_m=args.works_buffer, max_distance_m=args.max_distance)


def _placed(site, nodes):
    from reconstruct.model.placement import place_nodes
    from reconstruct.io.site import model_grid

    grid, ground = model_grid(site)
    return place_nodes(nodes, grid, ground).xyz_m


def _output_folder(out) -> Path:
    """The output folder, created if missing; a clear error if it is a file or cannot be made."""
    from reconstruct.cli import _check_output_folder
    from reconstruct.io.outputs import make_output_folder

    _check_output_folder(out)
    return make_output_folder(out)


# --------------------------------------------------------------------------
# survey design: layout, pairs, mesh, schedule


def _write_manifest(out: Path, command: str, inputs: dict, args, written, started: str) -> None:
    """manifest.json of this run; an earlier plan run's manifest in the folder is kept inside it."""
    import json

    from reconstruct.io.outputs import build_manifest, utc_now_iso, write_json_atomic

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
        if isinstance(earlier, dict) and str(earlier.get("command", "")).startswith(("voidcube plan", "plan")):
            manifest["earlier_runs"] = earlier.pop("earlier_runs", []) + [earlier]
    write_json_atomic(earlier_path, manifest)


def _layout_options(args):
    from plan.layout.layouts import LayoutOptions

    return LayoutOptions(
        budget=args.budget, pattern=args.pattern, surface_spacing_m=args.surface_spacing,
        face_spacing_m=args.face_spacing, hole_spacing_m=args.hole_spacing, hole_share=args.hole_share,
        face_share=args.face_share, jitter_m=args.jitter, seed=args.seed, setback_m=args.setback,
        min_face_height_m=args.min_face_height, min_hole_depth_m=args.min_hole_depth,
        candidate_factor=args.candidates)


def _schedule_options(args):
    from plan.radio.schedule import ScheduleOptions

    return ScheduleOptions(
        stacks=args.stacks, pulse_repetition_khz=args.prf, sampling=args.sampling,
        record_length_ns=args.record_length, sample_interval_ns=args.sample_interval,
        command_overhead_s=args.command_overhead, data_rate_kbps=args.data_rate,
        transmitters=args.transmitters, deploy_minutes_per_node=args.deploy_node,
        deploy_minutes_per_string=args.deploy_string)


def _run_layout(site, args, out: Path, say) -> tuple[list, Path]:
    from plan.layout.layouts import candidate_positions, design_layout, write_layout_csv

    options = _layout_options(args)
    layout = design_layout(site, options)
    candidates = candidate_positions(site, options, layout)
    say(f"layout of {len(layout)} nodes, {len(candidates)} candidate positions")
    nodes_path = write_layout_csv(out / "nodes.csv", layout, site)
    written = [nodes_path, write_layout_csv(out / "candidates.csv", candidates, site)]
    counts = layout.counts()
    spacing = ", ".join(f"{k} {v:.2f} m" for k, v in layout.spacing_m.items() if v is not None)
    print(f"layout: {len(layout)} of {options.budget} nodes ({counts['borehole']} in holes, {counts['face']} on "
          f"faces, {counts['surface']} on the surface; spacing {spacing or 'none'}); "
          f"{len(candidates)} candidate positions")
    _warn_blast_holes(site, layout.ids, layout.xyz_m)
    return written, nodes_path


def _warn_blast_holes(site, ids, xyz_m) -> None:
    """Print the warning about nodes placed in blast holes (radio near explosives), if any."""
    from plan.layout.blast_holes import blast_hole_warning

    warning = blast_hole_warning(site, ids, xyz_m)
    if warning:
        print(f"WARNING: {warning}")


def _run_pairs(site, nodes, args, out: Path, say, *, write=True):
    from reconstruct.io.outputs import write_json_atomic

    from plan.radio.link_budget import link_budget_for_site
    from plan.radio.pair_graph import build_pair_graph, pair_graph_summary, write_graphml, write_pairs_csv
    from plan.report import air_wave_warning

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
              f"{d['min']:g} to {d['max']:g}, mean {d['mean']:.1f}; deaf nodes: "
              f"{len(summary['deaf_nodes'])}")
        warning = air_wave_warning(summary)
        if warning:
            print(f"WARNING: {warning}")
        print(f"link range: {lb['computed_range_m']:.1f} m by the link budget "
              f"({lb['attenuation_db_per_m']:.3f} dB/m exact, {lb['attenuation_low_loss_db_per_m']:.3f} dB/m "
              f"low-loss form); rule of thumb {lo:.1f} to {hi:.1f} m (10 to 15 wavelengths in resistive rock)")
        _print_range_check(summary)
    return pairs, written


def _print_range_check(summary):
    """The heard lengths against the rule of thumb 35 / conductivity, and its warning."""
    check, lengths = summary["range_check"], summary["pairs"]["heard_length_m_percentiles"]
    if lengths is not None and check["rule_range_m"] is not None:
        print(f"heard pairs: median {lengths['50']:.1f} m, 95th percentile {lengths['95']:.1f} m long; "
              f"{check['heard_beyond_rule']} ({100 * check['share_of_heard_beyond_rule']:.0f} %) longer than "
              f"the {check['rule_range_m']:.0f} m of the rule of thumb 35 / conductivity (from memory)")
    if check["warning"]:
        print(f"WARNING: {check['warning']}")


def _run_mesh(site, nodes, args, out: Path, *, write=True):
    from reconstruct.io.outputs import write_json_atomic

    from plan.radio.pair_graph import check_nodes_in_site, write_graphml
    from plan.radio.mesh import build_radio_mesh, mesh_summary, mesh_with_relays

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
    from reconstruct.io.outputs import write_json_atomic

    from plan.radio.schedule import plan_schedule, schedule_summary, write_schedule_csv

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
    from reconstruct.io.outputs import utc_now_iso
    from reconstruct.io.site import load_site

    started = utc_now_iso()
    site = load_site(args.site)
    return started, site, _output_folder(args.out)


def _cmd_layout(args) -> int:
    started, site, out = _start(args)
    written, _ = _run_layout(site, args, out, progress_printer(args.quiet))
    _write_manifest(out, "voidcube plan layout", {"site": args.site}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_pairs(args) -> int:
    from reconstruct.io.tables import read_nodes

    started, site, out = _start(args)
    _, written = _run_pairs(site, read_nodes(args.nodes), args, out, progress_printer(args.quiet))
    _write_manifest(out, "voidcube plan pairs", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_mesh(args) -> int:
    from reconstruct.io.tables import read_nodes

    started, site, out = _start(args)
    _, written = _run_mesh(site, read_nodes(args.nodes), args, out)
    _write_manifest(out, "voidcube plan mesh", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_schedule(args) -> int:
    from reconstruct.io.tables import read_nodes

    started, site, out = _start(args)
    nodes = read_nodes(args.nodes)
    pairs, _ = _run_pairs(site, nodes, args, out, progress_printer(args.quiet), write=False)
    mesh = _run_mesh(site, nodes, args, out, write=False)[0] if site.radio.gateway_m is not None else None
    written = _run_schedule(site, pairs, mesh, args, out)
    _write_manifest(out, "voidcube plan schedule", {"site": args.site, "nodes": args.nodes}, args, written, started)
    print(f"output: {out}")
    return 0


def _cmd_design(args) -> int:
    from reconstruct.io.tables import read_nodes

    started, site, out = _start(args)
    say = progress_printer(args.quiet)
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
    _write_manifest(out, "voidcube plan design", {"site": args.site}, args, written, started)
    print(f"output: {out}")
    return 0


# ---------------------------------------------------------------- coverage, recovery, optimisation, report


def _heard_pairs(path, nodes, say):
    """The pairs of ``path`` (a pairs.csv of 'voidcube plan pairs') that the link budget hears."""
    from plan.radio.pair_graph import read_heard_pairs

    pairs = read_heard_pairs(path, nodes.ids)
    say(f"coverage of the {pairs[0].size:,} pairs heard by the link budget ({path})")
    return pairs


def _cmd_coverage(args) -> int:
    from reconstruct.io.outputs import utc_now_iso, write_cell_arrays_vti, write_json_atomic
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes

    from plan.assess.coverage import compute_coverage, coverage_cell_arrays

    started = utc_now_iso()
    out = _output_folder(args.out)
    say = progress_printer(args.quiet)
    standard = _standard_from(args)
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    inputs = {"site": args.site, "nodes": args.nodes}
    pairs = None
    if args.pairs:
        pairs = _heard_pairs(args.pairs, nodes, say)
        inputs["pairs"] = args.pairs
    coverage = compute_coverage(site, _placed(site, nodes), standard, pairs=pairs, progress=say)
    written = [write_cell_arrays_vti(out / "coverage.vti", coverage.grid, coverage_cell_arrays(coverage)),
               write_json_atomic(out / "coverage_summary.json", coverage.summary())]
    _write_manifest(out, "voidcube plan coverage", inputs, args, written, started)
    _print_coverage(coverage, out)
    return 0


def _print_coverage(coverage, out):
    tv = coverage.summary()["target_volume"]
    print(f"layout: {coverage.n_nodes} nodes, {coverage.n_rays:,} rays")
    print(f"target volume: {tv['cells']:,} cells ({tv['description']})")
    print(f"covered to the standard: {100 * tv['covered_fraction']:.1f} % (score {tv['score']:.3f}); "
          f"{tv['cells_without_rays']:,} target cells without rays")
    floor = tv["resolution_floor_m"]["median"]
    if floor is not None:
        print(f"resolution floor (first Fresnel zone width): median {floor:.2f} m in the target volume")
    print(f"output: {out}")


def _cmd_recover(args) -> int:
    from reconstruct.io.outputs import utc_now_iso, write_csv_atomic, write_json_atomic
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes

    from plan.assess.recovery import RecoveryOptions, run_recovery_tests

    started = utc_now_iso()
    out = _output_folder(args.out)
    say = progress_printer(args.quiet)
    standard = _standard_from(args)
    options = RecoveryOptions(void_sizes_m=args.void_sizes or (), depths_m=args.depths or (),
                              fills=tuple(args.fills.split(",")), noise_sigma_ns=args.noise,
                              max_cells=args.max_cells, checker_size_m=args.checker_size, seed=args.seed,
                              link_budget=not args.every_pair, noise_reference_margin_db=args.noise_reference_margin,
                              system_performance_db=args.system_performance)
    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    executor = executor_from_args(args)
    result = run_recovery_tests(site, nodes, standard, options, executor=executor, progress=say)
    columns = ["work", "fill", "velocity_m_per_ns", "depth_m", "diameter_m", "largest_time_change_ns",
               "pairs_changed_beyond_2_sigma", "seen_in_data", "recovered_change_m_per_ns",
               "true_cell_change_m_per_ns", "background_spread_m_per_ns", "strongest_anomaly_distance_m",
               "resolved", "note"]
    written = [
        write_json_atomic(out / "recovery_summary.json", result.summary()),
        write_csv_atomic(out / "recovery.csv", columns,
                         ([("" if v.get(c) is None else v.get(c)) for c in columns] for v in result.voids)),
    ]
    _write_manifest(out, "voidcube plan recover", {"site": args.site, "nodes": args.nodes}, args, written, started)
    c = result.checkerboard
    corr = "n/a" if c["correlation"] is None else f"{c['correlation']:.3f}"
    pairs = result.pairs
    print(f"recovery grid: cells of {result.grid.cell_m[0]:g} m; {result.n_pairs:,} pairs"
          + (f" heard by the link budget (of {pairs['pairs_within_range']:,}); pick noise {pairs['noise']}"
             if pairs.get("link_budget") else " (every pair, --every-pair)"))
    print(f"checkerboard ({c['cube_m']:g} m cubes): correlation {corr}")
    for statement in result.statements:
        print(statement)
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
                   help="system performance in dB; overrides radar.system_performance_db of the site")


def _add_mesh_arguments(p):
    p.add_argument("--radio-range", type=float, default=None, metavar="M",
                   help="radio range in metres; overrides radio.range_m of the site")


def _add_schedule_arguments(p):
    g = p.add_argument_group("schedule")
    g.add_argument("--stacks", type=int, default=32, metavar="N", help="traces stacked per record (default 32)")
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
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    if nodes:
        p.add_argument("--nodes", required=True, help="node table (CSV)")
    p.add_argument("--out", required=True, metavar="FOLDER", help="output folder (created if missing)")
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
def _cmd_optimise(args) -> int:
    import numpy as np

    from reconstruct.io.outputs import utc_now_iso, write_csv_atomic, write_json_atomic
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes

    from plan.assess.coverage import compute_coverage
    from plan.layout.optimise import OptimiseOptions, optimise_layout

    started = utc_now_iso()
    out = _output_folder(args.out)
    say = progress_printer(args.quiet)
    standard = _standard_from(args)
    site = load_site(args.site)
    candidates = read_nodes(args.candidates)
    start_nodes = read_nodes(args.nodes)
    cand_xyz, start_xyz = _placed(site, candidates), _placed(site, start_nodes)
    # the pool: the start layout, then every candidate not already at a start position
    pool_xyz, pool_rows = [*start_xyz], [(start_nodes, k) for k in range(len(start_nodes))]
    taken = {tuple(np.round(p, 6)) for p in start_xyz}
    for k, p in enumerate(cand_xyz):
        if tuple(np.round(p, 6)) not in taken:
            taken.add(tuple(np.round(p, 6)))
            pool_xyz.append(p)
            pool_rows.append((candidates, k))
    budget = args.budget if args.budget is not None else len(start_nodes)
    options = OptimiseOptions(budget=budget, max_swaps=args.max_swaps, max_target_samples=args.max_samples,
                              time_limit_s=args.time_limit)
    result = optimise_layout(site, np.asarray(pool_xyz), np.arange(len(start_nodes)), standard, options,
                             progress=say)
    used_ids, rows = set(), []
    for index in result.selected:
        table, k = pool_rows[index]
        node_id = table.ids[k]
        while node_id in used_ids:
            node_id += "-c"
        used_ids.add(node_id)
        x, y, z = table.xyz_m[k]
        depth = "" if table.depth_along_hole_m is None else table.depth_along_hole_m[k]
        rows.append([node_id, f"{x:.3f}", f"{y:.3f}", f"{z:.3f}", table.kinds[k] or "", table.boreholes[k] or "",
                     "" if depth == "" or not np.isfinite(depth) else f"{depth:.3f}"])
    say("coverage of the start and optimised layouts on the model grid")
    full_start = compute_coverage(site, start_xyz, standard)
    full_end = compute_coverage(site, np.asarray(pool_xyz)[result.selected], standard)
    summary = {
        "budget": budget, "start_nodes": len(start_nodes), "candidates": len(candidates),
        "pool_positions": len(pool_xyz), "optimised_nodes": int(result.selected.size),
        "score_start": result.start_score, "score_optimised": result.score, "gain": result.gain,
        "score_note": (f"coverage score on every {result.sample_step}. target cell along each axis "
                       f"({result.n_samples:,} cells); resolution condition left out of the search"),
        "model_grid": {
            "score_start": full_start.score, "score_optimised": full_end.score,
            "covered_fraction_start": full_start.covered_fraction,
            "covered_fraction_optimised": full_end.covered_fraction,
        },
        "swaps": sum(1 for h in result.history if h["action"] == "swap"),
        "adds": sum(1 for h in result.history if h["action"] == "add"),
        "stop_reason": result.stop_reason, "seconds": result.seconds,
        "candidate_pairs": result.n_candidate_pairs, "standard": standard.as_dict(),
    }
    written = [
        write_csv_atomic(out / "nodes_optimised.csv", ["node_id", "x_m", "y_m", "z_m", "kind", "borehole",
                                                        "depth_along_hole_m"], rows),
        write_json_atomic(out / "optimise_summary.json", summary),
    ]
    _write_manifest(out, "voidcube plan optimise", {"site": args.site, "candidates": args.candidates, "nodes": args.nodes},
                    args, written, started)
    print(f"score: start layout {result.start_score:.4f}, optimised {result.score:.4f} "
          f"(gain {result.gain:+.4f}; {summary['swaps']} swaps, {summary['adds']} adds; {result.stop_reason})")
    print(f"on the model grid: covered {100 * full_start.covered_fraction:.1f} % -> "
          f"{100 * full_end.covered_fraction:.1f} % of the target volume")
    _warn_blast_holes(site, [r[0] for r in rows], np.asarray(pool_xyz)[result.selected])
    print(f"output: {out}")
    return 0


def _cmd_report(args) -> int:
    from reconstruct.io.outputs import (
        utc_now_iso,
        write_cell_arrays_vti,
        write_json_atomic,
        write_text_atomic,
    )
    from reconstruct.io.site import load_site
    from reconstruct.io.tables import read_nodes

    from plan.assess.coverage import compute_coverage, coverage_cell_arrays
    from plan.report import plan_report_html

    started = utc_now_iso()
    folder = Path(args.dir)
    if not folder.is_dir():
        raise InputError(f"{args.dir}: no such plan folder; give the folder the plan commands wrote into")
    nodes_path = args.nodes or folder / "nodes.csv"
    if not Path(nodes_path).is_file():
        raise InputError(f"{nodes_path}: no node table; give --nodes NODES.csv or put nodes.csv in {args.dir}")
    say = progress_printer(args.quiet)
    standard = _standard_from(args)
    site = load_site(args.site)
    nodes = read_nodes(nodes_path)
    xyz = _placed(site, nodes)
    pairs = _heard_pairs(folder / "pairs.csv", nodes, say) if (folder / "pairs.csv").is_file() else None
    coverage = compute_coverage(site, xyz, standard, pairs=pairs, progress=say)
    say("writing coverage.vti and the report")
    page, used = plan_report_html(site, coverage, nodes.ids, xyz, nodes.kinds, folder)
    written = [write_cell_arrays_vti(folder / "coverage.vti", coverage.grid, coverage_cell_arrays(coverage)),
               write_json_atomic(folder / "coverage_summary.json", coverage.summary()),
               write_text_atomic(folder / "plan_report.html", page)]
    inputs = {"site": args.site, "nodes": str(nodes_path)}
    inputs.update({name: str(folder / name) for name in used})
    _write_manifest(folder, "voidcube plan report", inputs, args, written, started)
    _print_coverage(coverage, folder)
    _warn_blast_holes(site, nodes.ids, xyz)
    print(f"report: {folder / 'plan_report.html'}" + (f" (also shows {', '.join(used)})" if used else ""))
    return 0


def _add_simulate_parser(sub):
    p = sub.add_parser(
        "simulate",
        help="synthetic picks from a truth model (first arrivals through bent or straight rays, clock offsets, noise)",
        description="Simulate first-arrival picks for every transmitter-receiver pair of a node table "
                    "through a truth model (background rock with air-, water- or clay-filled bodies), "
                    "on a grid finer than the model grid, adding node clock offsets and Gaussian "
                    "pick noise. Writes into OUT the pick table picks.csv (CSV: tx,rx,time_ns,sigma_ns), "
                    "the true time-zero offset per node (true_time_zero.csv: node_id,time_zero_ns), the picks "
                    "given gross errors (gross_errors.csv: tx,rx,error_ns) and manifest.json.",
        epilog=_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", required=True, help="node table (CSV)")
    p.add_argument("--truth", required=True, help="truth model (YAML, see plan/synthetic/truth.py)")
    p.add_argument("--out", required=True, metavar="FOLDER", help="output folder (created if missing)")
    p.add_argument("--one-way", action="store_true", help="one pick per pair instead of both directions")
    p.add_argument("--max-distance", type=float, default=None, metavar="M",
                   help="leave out pairs further apart than M metres")
    p.add_argument("--rays", choices=("bent", "straight"), default="bent",
                   help="'bent' (default): true first arrivals from eikonal travel-time fields, air "
                        "included (air waves, rays drawn into fast voids); 'straight': slowness "
                        "integrated along straight lines, for straight-ray tests only")
    add_executor_arguments(p)
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    p.add_argument("--link-budget", action="store_true",
                   help="leave out the pairs whose link-budget margin is below 0 dB (missed picks)")
    p.add_argument("--fade-sigma", type=float, default=0.0, metavar="DB",
                   help="with --link-budget: random fade added to every margin, standard deviation in dB "
                        "(seeded by the truth model's seed; default 0)")
    p.set_defaults(func=_cmd_simulate)


def _add_assess_parsers(sub):
    p = sub.add_parser(
        "coverage", help="ray coverage, angular coverage and resolution floor of a layout",
        description="Ray count and length, angular coverage (direction tensor) and resolution floor (first "
                    "Fresnel zone) per cell for every pair of a node table, with straight rays, and the share "
                    "of the target volume (under the planned works) covered to a stated standard. Writes "
                    "coverage.vti, coverage_summary.json and manifest.json into OUT.",
        epilog=_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", required=True, help="node table (CSV) of the layout")
    p.add_argument("--pairs", default=None,
                   help="pairs.csv of 'voidcube plan pairs': only the pairs heard by the link budget count "
                        "(default: every pair within --max-distance)")
    p.add_argument("--out", required=True, help="plan folder (created if missing)")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    _add_standard_arguments(p)
    p.set_defaults(func=_cmd_coverage)

    p = sub.add_parser(
        "recover", help="checkerboard and void recovery tests of a layout with the real inversion",
        description="Invert synthetic data of a checkerboard and of voids (air, water or clay) of chosen "
                    "sizes at chosen depths under each planned work, on a coarser copy of the model grid, "
                    "with the pairs the link budget hears and pick noise that grows as their signal weakens; "
                    "report the smallest void resolved at each work and depth and the voids no first arrival "
                    "can show. Writes recovery_summary.json, recovery.csv and manifest.json into OUT.",
        epilog=_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", required=True, help="node table (CSV) of the layout")
    p.add_argument("--out", required=True, help="plan folder (created if missing)")
    p.add_argument("--void-sizes", type=_float_list, default=None, metavar="D1,D2,...",
                   help="void diameters, metres (default 1.5, 3 and 5 recovery cells)")
    p.add_argument("--depths", type=_float_list, default=None, metavar="Z1,Z2,...",
                   help="depths of the void centres below the ground, metres (default 1/4, 1/2, 3/4 of the "
                        "depth of interest)")
    p.add_argument("--fills", default="air,clay", metavar="F1,F2",
                   help="void fills from air, water, clay (default air,clay: one fast, one slow)")
    p.add_argument("--noise", type=float, default=0.5, metavar="NS", help="pick noise, ns (default 0.5)")
    p.add_argument("--max-cells", type=int, default=12000, metavar="N",
                   help="largest number of ground cells of the recovery grid (default 12000)")
    p.add_argument("--checker-size", type=float, default=None, metavar="M",
                   help="checkerboard cube edge, metres (default 4 recovery cells)")
    p.add_argument("--seed", type=int, default=0, help="seed of the noise (default 0)")
    p.add_argument("--noise-reference-margin", type=float, default=20.0, metavar="DB",
                   help="link margin, dB, from which picks have the --noise figure; weaker pairs get noise "
                        "growing as 10^((DB - margin) / 20), at most a quarter period (default 20)")
    p.add_argument("--every-pair", action="store_true",
                   help="test with every pair within --max-distance and --noise on every pick (default: only "
                        "the pairs the link budget hears, noisier as their margin falls)")
    p.add_argument("--system-performance", type=float, default=None, metavar="DB",
                   help="system performance, dB, for the link budget (default radar.system_performance_db)")
    add_executor_arguments(p)
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    _add_standard_arguments(p)
    p.set_defaults(func=_cmd_recover)

    p = sub.add_parser(
        "optimise", help="raise the coverage score by greedy adds and swaps among candidate positions",
        description="Start from a layout (normally the regular grid), add candidates up to the budget and "
                    "swap nodes for candidates while the coverage score of the target volume rises. Never "
                    "returns a lower score than the start. Writes nodes_optimised.csv, "
                    "optimise_summary.json and manifest.json into OUT.",
        epilog=_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--candidates", required=True, help="candidate positions (CSV, node table format)")
    p.add_argument("--nodes", required=True, help="start layout (CSV, node table format)")
    p.add_argument("--out", required=True, help="plan folder (created if missing)")
    p.add_argument("--budget", type=int, default=None, metavar="N",
                   help="largest number of nodes (default: as many as the start layout)")
    p.add_argument("--max-swaps", type=int, default=400, metavar="N", help="swap limit (default 400)")
    p.add_argument("--time-limit", type=float, default=None, metavar="S",
                   help="stop swapping after S seconds (default: no limit)")
    p.add_argument("--max-samples", type=int, default=20000, metavar="N",
                   help="largest number of target cells the score is evaluated on (default 20000)")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    _add_standard_arguments(p)
    p.set_defaults(func=_cmd_optimise)

    p = sub.add_parser(
        "report", help="coverage.vti and an HTML plan report for a plan folder",
        description="Compute the coverage of the layout in DIR (DIR/nodes.csv or --nodes) and write "
                    "coverage.vti, coverage_summary.json and plan_report.html into DIR, with plan-view maps, "
                    "coverage slices, and the other planning results found in DIR.",
        epilog=_UNITS)
    p.add_argument("dir", metavar="FOLDER", help="plan folder (written into)")
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.add_argument("--nodes", default=None, help="node table (CSV); default DIR/nodes.csv")
    p.add_argument("--quiet", action="store_true", help="no progress messages on stderr")
    _add_standard_arguments(p)
    p.set_defaults(func=_cmd_report)


def build_parser(prog: str = "voidcube plan") -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog=prog, description="Design a radar tomography survey before fieldwork.",
                                     epilog=_UNITS)
    parser.add_argument("--version", action="version", version=f"voidcube {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")

    p = sub.add_parser("describe", help="summarise a site's model grid, ground and rock",
                       description="Load a site description and print its grid, ground and rock figures.",
                       epilog=_UNITS)
    p.add_argument("--site", required=True, metavar="FILE", help="site description (YAML)")
    p.set_defaults(func=_cmd_describe)

    _add_simulate_parser(sub)
    _add_design_parsers(sub)
    _add_assess_parsers(sub)
    return parser


def main(argv=None) -> int:
    return run_command(build_parser(), argv,
                       memory_hint="use a smaller refine in the truth model or larger cells")
