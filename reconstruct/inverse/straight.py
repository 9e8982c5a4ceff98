"""The processor's job from files to a velocity cube, in two steps.

:func:`straight_ray_tomography` decides (pure computation on loaded inputs);
:func:`write_tomography` writes the output folder. The command line calls both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from reconstruct.model.grid import Grid
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.inverse.solver import InversionOptions, InversionResult, invert_travel_times
from reconstruct.inverse.multilevel import choose_coarsening_factor, coarse_level
from reconstruct.model.placement import NodePlacement, place_nodes
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.io.site import Site, model_grid
from reconstruct.forward.straight_rays import ray_coverage
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import ExcludedPick, Nodes, Picks

__all__ = ["TomographyRun", "straight_ray_tomography", "run_summary", "solver_progress"]


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






def _say(progress, message):
    if progress is not None:
        progress(message)


#: How the smoothing weight was chosen, in words.
_METHOD_WORDS = {"discrepancy": "chosen so that the misfit matches the pick uncertainties",
                 "l-curve": "chosen at the corner of the L-curve", "user": "as given"}


def solver_progress(progress):
    """The solver's per-solve messages, marked as detail (``solver: ...``).

    A command shows them only when nothing else was said for a while, so that
    a long search for the smoothing weight is not silent and a short one is
    not a screenful of numbers.
    """
    if progress is None:
        return None
    return lambda message: progress(f"solver: {message}")


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
        See :func:`reconstruct.model.placement.place_nodes`.
    progress : callable, optional
        ``progress(message)`` for long steps.
    robust_exempt : ndarray of bool, shape (len(picks),), optional
        Picks that keep full weight in a robust inversion
        (see :func:`reconstruct.inverse.solver.invert_travel_times`).
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
        from reconstruct.errors import InputError

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
    _say(progress, "solving for the straight-ray model" + (
        "; the smoothing weight is chosen by trial solves (tens of seconds each on a large grid)"
        if options.smoothing is None else ""))
    result = invert_travel_times(
        G, picks.time_ns[used], picks.tx[used], picks.rx[used], len(nodes), ground_flat, reference, D,
        cell_m=grid.cell_m, sigma_ns=sigma, options=options, coarse=coarse, progress=solver_progress(progress),
        robust_exempt=None if robust_exempt is None else np.asarray(robust_exempt, dtype=bool)[used],
    )
    _say(progress, f"straight-ray model: RMS misfit {result.rms_ns:.3f} ns over {used.size:,} picks; "
                   f"smoothing weight {result.lambda_smooth:.3g} ({_METHOD_WORDS.get(result.lambda_method, result.lambda_method)})")
    ray_length, ray_count = ray_coverage(G, grid)
    return TomographyRun(
        site=site, grid=grid, ground=ground, nodes=nodes, placement=placement, picks=picks,
        used=used, excluded=tuple(excluded), ray_length_m=ray_length, ray_count=ray_count,
        result=result, options=options,
    )


def run_summary(run: TomographyRun) -> dict:
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


