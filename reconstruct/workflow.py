"""The processor's job from files to a velocity cube, in two steps.

:func:`straight_ray_tomography` decides (pure computation on loaded inputs);
:func:`write_tomography` writes the output folder. The command line calls both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .grid import Grid, check_grid_fits_memory, ground_mask
from .inversion import AIR_VELOCITY_M_PER_NS, InversionOptions, InversionResult, invert_travel_times
from .outputs import (
    build_manifest,
    make_output_folder,
    utc_now_iso,
    write_cell_arrays_vti,
    write_csv_atomic,
    write_json_atomic,
)
from .multilevel import choose_coarsening_factor, coarse_level
from .placement import NodePlacement, place_nodes
from .regularization import first_difference_operator
from .site import Site
from .straight_rays import straight_ray_matrix
from .tables import ExcludedPick, Nodes, Picks

__all__ = ["TomographyRun", "straight_ray_tomography", "write_tomography", "model_grid", "ray_coverage"]


@dataclass(frozen=True)
class TomographyRun:
    """Everything a finished inversion produced, before anything is written."""

    site: Site
    grid: Grid
    ground: np.ndarray
    nodes: Nodes
    placement: NodePlacement
    picks: Picks
    used: np.ndarray  # indices into picks of the rows inverted
    excluded: tuple  # ExcludedPick rows: read-time exclusions plus workflow ones
    ray_length_m: np.ndarray  # (nx, ny, nz)
    ray_count: np.ndarray  # (nx, ny, nz)
    result: InversionResult
    options: InversionOptions
    rays: str = "straight"
    notes: tuple = field(default=())
    history: tuple = field(default=())  # per-iteration misfits of bent-ray runs
    polylines: list | None = None  # rays per inverted pick, when kept


def ray_coverage(operator, grid: Grid):
    """Total ray length (m) and number of rays in every cell, both shaped like the grid."""
    G = operator.tocsr()
    length = np.asarray(G.sum(axis=0)).ravel().reshape(grid.shape)
    count = np.bincount(G.indices, minlength=grid.n_cells).reshape(grid.shape)
    return length, count


def model_grid(site: Site, *, memory_limit_bytes: int | None = None):
    """The site's grid and ground mask.

    Loading a site already refuses a grid too large for this machine's memory;
    give ``memory_limit_bytes`` to hold it to a tighter limit.
    """
    grid = site.grid()
    if memory_limit_bytes is not None:
        check_grid_fits_memory(grid, memory_limit_bytes=memory_limit_bytes,
                               source=str(site.source_path or "site"))
    return grid, ground_mask(grid, site.ground.elevation_m)


def _say(progress, message):
    if progress is not None:
        progress(message)


def straight_ray_tomography(
    site: Site,
    nodes: Nodes,
    picks: Picks,
    options: InversionOptions = InversionOptions(),
    *,
    snap_tolerance_m: float | None = None,
    memory_limit_bytes: int | None = None,
    progress=None,
    robust_exempt=None,
) -> TomographyRun:
    """Straight-ray travel-time tomography of a site.

    Parameters
    ----------
    site, nodes, picks : loaded inputs
    options : InversionOptions
    snap_tolerance_m : float, optional
        See :func:`reconstruct.placement.place_nodes`.
    progress : callable, optional
        ``progress(message)`` for long steps.
    robust_exempt : ndarray of bool, shape (len(picks),), optional
        Picks that keep full weight in a robust inversion
        (see :func:`reconstruct.inversion.invert_travel_times`).
    """
    grid, ground = model_grid(site, memory_limit_bytes=memory_limit_bytes)
    _say(progress, f"grid {grid.shape[0]} x {grid.shape[1]} x {grid.shape[2]} cells of "
                   f"{grid.cell_m[0]:g} x {grid.cell_m[1]:g} x {grid.cell_m[2]:g} m, "
                   f"{int(ground.sum()):,} ground cells")
    placement = place_nodes(nodes, grid, ground, snap_tolerance_m=snap_tolerance_m)
    xyz = placement.xyz_m
    distance = np.linalg.norm(xyz[picks.rx] - xyz[picks.tx], axis=1)
    same_place = distance < 1e-6
    excluded = list(picks.excluded)
    for k in np.flatnonzero(same_place):
        excluded.append(ExcludedPick(
            line=int(picks.lines[k]), tx=nodes.ids[picks.tx[k]], rx=nodes.ids[picks.rx[k]],
            time_text=repr(float(picks.time_ns[k])),
            reason="transmitter and receiver at the same position"))
    used = np.flatnonzero(~same_place)
    if used.size == 0:
        from .errors import InputError

        raise InputError(f"{picks.source}: no usable picks left to invert; see the excluded rows")

    def ray_progress(done, total):
        _say(progress, f"straight rays: {done:,}/{total:,}")

    G = straight_ray_matrix(grid, xyz[picks.tx[used]], xyz[picks.rx[used]], progress=ray_progress)
    _say(progress, f"operator: {G.shape[0]:,} rays, {G.nnz:,} non-zeros")

    ground_flat = ground.ravel()
    reference = np.where(ground_flat, 1.0 / site.rock.velocity_m_per_ns, 1.0 / AIR_VELOCITY_M_PER_NS)
    D = first_difference_operator(
        grid, ground, horizontal_weight=options.horizontal_weight, vertical_weight=options.vertical_weight
    )
    sigma = None if picks.sigma_ns is None else picks.sigma_ns[used]
    coarse = None
    factor = choose_coarsening_factor(int(ground.sum()))
    if options.smoothing is None and factor > 1:
        coarse = coarse_level(grid, ground, factor, horizontal_weight=options.horizontal_weight,
                              vertical_weight=options.vertical_weight)
        _say(progress, f"lambda search on a coarse grid of {factor} x {factor} x {factor} blocks "
                       f"({int(coarse.ground.sum()):,} unknowns)")
    result = invert_travel_times(
        G, picks.time_ns[used], picks.tx[used], picks.rx[used], len(nodes), ground_flat, reference, D,
        cell_m=grid.cell_m, sigma_ns=sigma, options=options, coarse=coarse, progress=progress,
        robust_exempt=None if robust_exempt is None else np.asarray(robust_exempt, dtype=bool)[used],
    )
    ray_length, ray_count = ray_coverage(G, grid)
    return TomographyRun(
        site=site, grid=grid, ground=ground, nodes=nodes, placement=placement, picks=picks,
        used=used, excluded=tuple(excluded), ray_length_m=ray_length, ray_count=ray_count,
        result=result, options=options,
    )


def _summary(run: TomographyRun) -> dict:
    r = run.result
    ground = run.ground
    vel = r.velocity_m_per_ns.reshape(run.grid.shape)[ground]
    covered = run.ray_count[ground] > 0
    reasons: dict[str, int] = {}
    for e in run.excluded:
        reasons[e.reason] = reasons.get(e.reason, 0) + 1
    shift = run.placement.shift_length_m
    return {
        "site": run.site.name,
        "rays": run.rays,
        "iterations": list(run.history) if run.history else [
            {"iteration": 0, "rays": "straight", "rms_ns": r.rms_ns, "chi2": r.chi2,
             "lambda_smooth": r.lambda_smooth}],
        "grid": {
            "origin_m": list(run.grid.origin_m), "cell_m": list(run.grid.cell_m),
            "shape": list(run.grid.shape), "n_cells": run.grid.n_cells,
            "n_ground_cells": int(ground.sum()), "n_air_cells": int((~ground).sum()),
            "axis_order": "[ix, iy, iz]; x east, y north, z up",
        },
        "picks": {
            "rows_read": run.picks.n_rows, "inverted": int(run.used.size),
            "excluded": len(run.excluded), "excluded_by_reason": reasons,
            "sigma_given": run.picks.sigma_ns is not None,
        },
        "nodes": {
            "count": len(run.nodes), "snapped": int(run.placement.snapped.sum()),
            "largest_snap_m": float(shift.max()) if shift.size else 0.0,
        },
        "misfit": {
            "rms_ns": r.rms_ns, "chi2": r.chi2,
            "chi2_per_pick": None if r.chi2 is None else r.chi2 / r.n_picks,
            "n_picks": r.n_picks,
        },
        "lambda": {
            "smoothing": r.lambda_smooth, "damping": r.lambda_damp, "method": r.lambda_method,
            "note": r.lambda_note, "search": list(r.lambda_search),
            "horizontal_weight": run.options.horizontal_weight,
            "vertical_weight": run.options.vertical_weight,
        },
        "solver": {
            "name": "scipy.sparse.linalg.lsqr", "iterations": r.iterations,
            "solves": len(r.lambda_search),
            "total_iterations": int(sum(s["iterations"] for s in r.lambda_search)),
            "stop_code": r.stop_code, "stop_reason": r.stop_reason,
        },
        "time_zero": {
            "model": run.options.time_zero,
            "convention": {
                "clock": "t_obs = t_ray + tau_rx - tau_tx; tau relative to the mean over nodes",
                "delay": "t_obs = t_ray + tau_tx + tau_rx",
                "none": "no time-zero terms",
            }[run.options.time_zero],
            "largest_abs_ns": float(np.max(np.abs(r.time_zero_ns))) if r.time_zero_ns.size else 0.0,
        },
        "velocity_m_per_ns": {
            "band": [run.options.velocity_min_m_per_ns, run.options.velocity_max_m_per_ns],
            "reference": run.site.rock.velocity_m_per_ns,
            "ground_min": float(vel.min()), "ground_median": float(np.median(vel)),
            "ground_max": float(vel.max()),
            "cells_clipped_at_min": r.n_clipped_slow, "cells_clipped_at_max": r.n_clipped_fast,
        },
        "coverage": {
            "ground_cells_with_rays": int(covered.sum()),
            "fraction_of_ground_with_rays": float(covered.mean()) if covered.size else 0.0,
        },
    }


def write_tomography(run: TomographyRun, out_dir, *, inputs: dict, parameters: dict, started: str, command: str,
                     extra_summary: dict | None = None) -> dict:
    """Write the output folder of a run; returns the summary dictionary.

    Files: ``velocity.vti``, ``residuals.csv``, ``time_zero.csv``,
    ``nodes_used.csv``, ``excluded_picks.csv``, ``rejected_picks.csv`` (robust
    runs), ``rays.vtp`` (when the run kept its rays), ``summary.json`` (with
    ``extra_summary`` merged in) and, last, ``manifest.json``. Each is written
    atomically.
    """
    out = make_output_folder(out_dir)
    r = run.result
    grid = run.grid
    slowness = r.slowness_ns_per_m.reshape(grid.shape)
    written = []
    written.append(write_cell_arrays_vti(out / "velocity.vti", grid, {
        "velocity_m_per_ns": 1.0 / slowness,
        "slowness_ns_per_m": slowness,
        "ray_length_m": run.ray_length_m,
        "ray_count": run.ray_count.astype(np.int32),
        "ground": run.ground,
    }))
    ids = run.nodes.ids
    picks = run.picks
    u = run.used
    xyz = run.placement.xyz_m
    dist = np.linalg.norm(xyz[picks.rx[u]] - xyz[picks.tx[u]], axis=1)
    sigma = picks.sigma_ns[u] if picks.sigma_ns is not None else np.full(u.size, np.nan)
    robust = r.robust_weight is not None
    written.append(write_csv_atomic(
        out / "residuals.csv",
        ["line", "tx", "rx", "distance_m", "observed_ns", "predicted_ns", "residual_ns", "sigma_ns"]
        + (["robust_weight"] if robust else []),
        (
            [int(picks.lines[k]), ids[picks.tx[k]], ids[picks.rx[k]], f"{dist[i]:.3f}",
             f"{picks.time_ns[k]:.4f}", f"{r.predicted_ns[i]:.4f}", f"{r.residual_ns[i]:.4f}",
             "" if not np.isfinite(sigma[i]) else f"{sigma[i]:.4f}"]
            + ([f"{r.robust_weight[i]:.4f}"] if robust else [])
            for i, k in enumerate(u)
        ),
    ))
    if robust:
        written.append(write_csv_atomic(
            out / "rejected_picks.csv",
            ["line", "tx", "rx", "observed_ns", "residual_ns", "sigma_ns", "robust_weight", "reason"],
            ([int(picks.lines[k]), ids[picks.tx[k]], ids[picks.rx[k]], f"{picks.time_ns[k]:.4f}",
              f"{r.residual_ns[i]:.4f}", "" if not np.isfinite(sigma[i]) else f"{sigma[i]:.4f}",
              f"{r.robust_weight[i]:.4f}",
              f"robust {r.robust_loss} weight {r.robust_weight[i]:.3g} below {run.options.rejection_weight:g}: "
              f"residual {r.residual_ns[i]:.2f} ns" + (f" = {abs(r.residual_ns[i]) / sigma[i]:.1f} sigma"
                                                      if np.isfinite(sigma[i]) else "")]
             for i, k in enumerate(u) if r.rejected[i]),
        ))
    n_tx = np.bincount(picks.tx[u], minlength=len(ids))
    n_rx = np.bincount(picks.rx[u], minlength=len(ids))
    written.append(write_csv_atomic(
        out / "time_zero.csv", ["node_id", "time_zero_ns", "picks_as_tx", "picks_as_rx"],
        ([ids[k], f"{r.time_zero_ns[k]:.4f}", int(n_tx[k]), int(n_rx[k])] for k in range(len(ids))),
    ))
    shift = run.placement.shift_m
    written.append(write_csv_atomic(
        out / "nodes_used.csv",
        ["node_id", "x_m", "y_m", "z_m", "shift_x_m", "shift_y_m", "shift_z_m", "kind", "line"],
        ([ids[k], *(f"{v:.4f}" for v in xyz[k]), *(f"{v:.4f}" for v in shift[k]),
          run.nodes.kinds[k] or "", int(run.nodes.lines[k])] for k in range(len(ids))),
    ))
    written.append(write_csv_atomic(
        out / "excluded_picks.csv", ["line", "tx", "rx", "time_ns", "reason"],
        ([e.line, e.tx, e.rx, e.time_text, e.reason] for e in run.excluded),
    ))
    if run.polylines is not None:
        from .outputs import write_rays_vtp

        written.append(write_rays_vtp(
            out / "rays.vtp", run.polylines, tx_ids=[ids[picks.tx[k]] for k in u],
            rx_ids=[ids[picks.rx[k]] for k in u], observed_ns=picks.time_ns[u], predicted_ns=r.predicted_ns,
            lines=picks.lines[u]))
    summary = _summary(run)
    if robust:
        summary["robust"] = {
            "loss": r.robust_loss, "rejected": int(r.rejected.sum()),
            "rejection_weight": run.options.rejection_weight, "scale_sigmas": r.robust_scale,
            "reweightings": r.robust_reweightings,
            "put_back": "rerun with --robust none to give every pick its full weight",
        }
    summary.update(extra_summary or {})
    written.append(write_json_atomic(out / "summary.json", summary))
    manifest = build_manifest(
        command=command, inputs=inputs, parameters=parameters,
        outputs=[p.name for p in written] + ["manifest.json"], started=started, finished=utc_now_iso(),
    )
    write_json_atomic(out / "manifest.json", manifest)
    return summary
