"""The ``plan`` command: survey design before fieldwork.

Thin layer: parse, call the library, write files, print a summary.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from reconstruct import __version__
from reconstruct.cli import run_command
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

    site = load_site(args.site)
    nodes = read_nodes(args.nodes)
    truth = load_truth(args.truth)
    from reconstruct.parallel import executor_from_options

    executor = executor_from_options(args.executor, args.workers, None)
    survey = simulate_picks(site, nodes, truth, both_directions=not args.one_way,
                            max_distance_m=args.max_distance, rays=args.rays, executor=executor,
                            progress=say)
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
          + f"times {np.min(survey.time_ns):.1f} to {np.max(survey.time_ns):.1f} ns)")
    return 0


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
    p.set_defaults(func=_cmd_simulate)
    return parser


def main(argv=None) -> int:
    return run_command(build_parser(), argv,
                       memory_hint="use a smaller refine in the truth model or larger cells")
