"""The processor's job from files to a velocity cube, in two steps.

:func:`straight_ray_tomography` decides (pure computation on loaded inputs);
:func:`write_tomography` writes the output folder. The command line calls both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from reconstruct.model.grid import Grid
from reconstruct.inverse.problem import InverseProblem, build_inverse_problem
from reconstruct.inverse.solver import InversionOptions, InversionResult, solve_inverse_problem
from reconstruct.model.placement import NodePlacement, place_nodes
from reconstruct.forward.anisotropy import anisotropic_geometry
from reconstruct.io.site import Site, model_grid
from reconstruct.forward.straight_rays import ray_coverage
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.io.tables import ExcludedPick, Nodes, Picks

__all__ = ["TomographyRun", "straight_ray_tomography", "run_summary", "fit_record", "clipping_record",
           "fit_warnings", "regularisation_record"]

#: Clipping into the velocity band that raises chi-square (or the RMS misfit)
#: by more than this fraction is reported with a warning.
CLIPPING_WARNING_FRACTION = 0.05  # common practice, no published source


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
    problem: InverseProblem | None = None  # the inverse problem solved (straight-ray times)
    stop_reason: str = ""  # why the bent-ray iterations stopped ("" for straight rays)
    start_result: InversionResult | None = None  # the straight-ray solve a bent-ray run started from






def _say(progress, message):
    if progress is not None:
        progress(message)


#: How the smoothing weight was chosen, in words.
_METHOD_WORDS = {"discrepancy": "chosen so that the misfit matches the pick uncertainties",
                 "l-curve": "chosen at the corner of the L-curve", "user": "as given",
                 "occam": "chosen by Occam's rule in the bent-ray iterations"}


def _weight_words(result) -> str:
    """How the smoothing weight was chosen, and whether the target misfit was reached, in words."""
    words = _METHOD_WORDS.get(result.lambda_method, result.lambda_method)
    if "not reached" in (result.lambda_note or ""):
        words = ("the misfit could not be brought down to the pick uncertainties: "
                 + result.lambda_note.replace("chi^2", "chi-square"))
    return words


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

    # elliptical anisotropy: straight rays in the stretched geometry (reconstruct.forward.anisotropy)
    geometry = anisotropic_geometry(grid, xyz, options.anisotropy_ratio, options.anisotropy_axis)
    G = geometry.operator(straight_ray_matrix(geometry.grid, geometry.xyz_m[picks.tx[used]],
                                              geometry.xyz_m[picks.rx[used]], progress=ray_progress))
    _say(progress, f"operator: {G.shape[0]:,} rays, {G.nnz:,} non-zeros")

    if options.time_zero == "clock_drift" and picks.shot_time_s is None:
        from reconstruct.errors import InputError

        raise InputError(f"{picks.source}: the clock-drift time-zero model needs the time of each shot; add a "
                         "column shot_time_s (seconds from the start of the survey) to the pick table, or "
                         "choose another --time-zero")
    problem = build_inverse_problem(
        grid, ground, site.rock.velocity_m_per_ns, picks.time_ns[used], picks.tx[used], picks.rx[used],
        len(nodes), sigma_ns=None if picks.sigma_ns is None else picks.sigma_ns[used], options=options,
        robust_exempt=None if robust_exempt is None else np.asarray(robust_exempt, dtype=bool)[used],
        shot_time_s=None if picks.shot_time_s is None else picks.shot_time_s[used],
    )
    if problem.coarse is not None:
        factor = problem.coarse.factor
        _say(progress, f"lambda search on a coarse grid of {factor} x {factor} x {factor} blocks "
                       f"({int(problem.coarse.ground.sum()):,} unknowns)")
    _say(progress, "solving for the straight-ray model" + (
        "; the smoothing weight is chosen by trial solves (tens of seconds each on a large grid)"
        if options.smoothing is None else ""))
    result = solve_inverse_problem(problem, G, progress=solver_progress(progress))
    _say(progress, f"straight-ray model: RMS misfit {result.rms_ns:.3f} ns over {used.size:,} picks; smoothing "
                   f"weight {result.lambda_smooth:.3g} ({_weight_words(result)})")
    clipping = clipping_record(result)
    if clipping["warning"]:
        _say(progress, clipping["words"])
    ray_length, ray_count = ray_coverage(G, grid)
    return TomographyRun(
        site=site, grid=grid, ground=ground, nodes=nodes, placement=placement, picks=picks,
        used=used, excluded=tuple(excluded), ray_length_m=ray_length, ray_count=ray_count,
        result=result, options=options, problem=problem,
    )


def fit_record(result: InversionResult) -> dict:
    """How well the final model explains the picks: the ``fit`` block of ``summary.json``.

    The target is the discrepancy principle's ``chi^2 = N`` (each pick fit to its
    sigma on average); it is judged only when the picks carry sigmas.
    """
    n = int(result.n_picks)
    if result.chi2 is None:
        return {"chi2": None, "n_picks": n, "chi2_per_pick": None, "rms_ns": result.rms_ns,
                "target": "chi^2 = N", "target_reached": None,
                "words": (f"The picks carry no uncertainties, so the misfit cannot be judged against them; "
                          f"the RMS misfit is {result.rms_ns:.3f} ns.")}
    per_pick = result.chi2 / n
    # reached within the discrepancy search's tolerance (3 % in log chi^2)
    reached = bool(per_pick <= 1.03)
    if reached:
        words = (f"The model explains the picks to their uncertainties: chi-square {result.chi2:.5g} for "
                 f"N = {n} picks (chi^2/N {per_pick:.3g}), RMS misfit {result.rms_ns:.3f} ns.")
    else:
        words = (f"Warning: the model does not explain the picks to their uncertainties: chi-square "
                 f"{result.chi2:.5g} for N = {n} picks (chi^2/N {per_pick:.3g}, target 1), RMS misfit "
                 f"{result.rms_ns:.3f} ns. The residuals are larger than the pick noise: forward-model "
                 "error, outliers, sigmas too small or a model too smooth for the data; features of the "
                 "size of the misfit's pattern may be missing or wrong.")
    return {"chi2": result.chi2, "n_picks": n, "chi2_per_pick": per_pick, "rms_ns": result.rms_ns,
            "target": "chi^2 = N", "target_reached": reached, "words": words}


def clipping_record(result: InversionResult, solve: str = "straight-ray solve") -> dict:
    """Cells clipped into the velocity band after the solve, and the misfit of
    that solve before and after (for bent rays, of the last linearised step)."""
    n = int(result.n_clipped_slow + result.n_clipped_fast)
    before_chi2, after_chi2 = result.chi2_before_clipping, result.chi2_after_clipping
    before_rms, after_rms = result.rms_before_clipping_ns, result.rms_after_clipping_ns
    if before_chi2 is not None and after_chi2 is not None and before_chi2 > 0:
        rise = after_chi2 / before_chi2 - 1.0
        measure = (f"chi^2/N rose from {before_chi2 / result.n_picks:.3g} to "
                   f"{after_chi2 / result.n_picks:.3g}")
    elif before_rms:
        rise = after_rms / before_rms - 1.0
        measure = f"the RMS misfit rose from {before_rms:.3f} ns to {after_rms:.3f} ns"
    else:
        rise = 0.0
        measure = ""
    warn = n > 0 and rise > CLIPPING_WARNING_FRACTION
    record = {"solve": solve, "bounds_in_solve": bool(result.bounds_in_solve), "cells_clipped": n, "cells_clipped_at_min": int(result.n_clipped_slow),
              "cells_clipped_at_max": int(result.n_clipped_fast),
              "chi2_before": before_chi2, "chi2_after": after_chi2,
              "rms_before_ns": before_rms, "rms_after_ns": after_rms,
              "misfit_rise_fraction": rise, "warning": warn}
    record["words"] = (
        f"Warning: {n} cells needed velocities outside the band (faster than the band's maximum, up to "
        f"the speed of light, or slower than its minimum) and were clipped into it; {measure}. The data "
        "ask for what the model cannot be: rays that travel partly in air, wrong node positions or "
        "time-zeros, or straight rays where the waves bend." if warn else
        (f"{n} cells were clipped into the velocity band; the misfit changed little." if n else
         "No cell was clipped: the velocity band was kept inside the solve." if result.bounds_in_solve else
         "No cell was clipped into the velocity band."))
    return record


def fit_warnings(summary: dict) -> list[str]:
    """The warnings of a ``summary.json`` about the fit, one line each (none when
    the target misfit was reached and clipping changed little): what a command
    prints and a report shows at its top."""
    lines = []
    fit = summary.get("fit") or {}
    if fit.get("target_reached") is False:
        lines.append(f"WARNING: target misfit not reached: chi^2/N {fit['chi2_per_pick']:.3g} (chi^2 "
                     f"{fit['chi2']:.5g}, N = {fit['n_picks']}), RMS {fit['rms_ns']:.3f} ns; the residuals exceed "
                     "the pick uncertainties (see fit in summary.json)")
    clipping = summary.get("clipping") or {}
    if clipping.get("warning"):
        lines.append("WARNING: " + clipping["words"].removeprefix("Warning: "))
    return lines


def regularisation_record(run: TomographyRun) -> dict:
    """The ``regularisation`` block of ``summary.json``: smooth or compact, and the
    compact regularisation's reweightings (for bent rays: those of the
    straight-ray start plus one per accepted bent-ray step)."""
    r = run.result
    reweightings = r.focusing_reweightings
    if run.rays == "bent" and run.start_result is not None:
        reweightings = run.start_result.focusing_reweightings + sum(
            int(h.get("reweightings", 0)) for h in run.history)
    record = {"kind": r.regularisation, "reweightings": int(reweightings),
              "bounds_in_solve": bool(r.bounds_in_solve)}
    if r.regularisation == "compact":
        record["focusing_beta_ns_per_m"] = r.focusing_beta_ns_per_m
        record["focusing_fraction"] = run.options.focusing_fraction
        record["beta_rule"] = ("beta = focusing_fraction x the smallest full-contrast anomaly of the velocity "
                               "band about the rock slowness (ns/m)")
    return record


def _bent_record(run: TomographyRun) -> dict:
    """The bent-ray part of ``summary.json``: iterations, why they stopped, the straight-ray start."""
    record = {"iterations": max(0, len(run.history) - 1), "stop_reason": run.stop_reason}
    start = run.start_result
    if start is not None:
        record["straight_ray_start"] = {
            "rms_ns": start.rms_ns, "chi2": start.chi2, "lambda_smooth": start.lambda_smooth,
            "lambda_note": start.lambda_note, "clipping": clipping_record(start),
            "note": "misfit through straight rays; the iterations start from the straight-ray model or the "
                    "reference model, whichever explains the data better through bent rays (iteration 0)"}
    return record


def _time_zero_figures(time_zero, n_nodes: int) -> dict:
    """The largest offset and, with the drift model, the largest drift."""
    tau = np.asarray(time_zero, dtype=float)
    out = {"largest_abs_ns": float(np.max(np.abs(tau[:n_nodes]))) if tau.size else 0.0}
    if tau.size > n_nodes:
        out["largest_abs_drift_ns_per_h"] = float(np.max(np.abs(tau[n_nodes:])))
    return out


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
                "clock_drift": "t_obs = t_ray + tau_rx(t) - tau_tx(t), tau_k(t) = offset_k + drift_k (t - t_mid); "
                               "offsets and drifts relative to their means over nodes; t_mid the middle of "
                               "the shot times",
                "none": "no time-zero terms",
            }[run.options.time_zero],
            **_time_zero_figures(r.time_zero_ns, len(run.nodes)),
        },
        "anisotropy": {
            "ratio": run.options.anisotropy_ratio, "axis": run.options.anisotropy_axis,
            "model": ("isotropic" if run.options.anisotropy_ratio == 1.0 else
                      "elliptical, velocity along the bedding over velocity across it = ratio; the cube holds "
                      "the velocity along the bedding"),
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
        "fit": fit_record(r),
        "regularisation": regularisation_record(run),
        "clipping": clipping_record(r, "straight-ray solve" if run.rays != "bent"
                                    else "last bent-ray step (misfit of its linearised times)"),
        **({"bent_rays": _bent_record(run)} if run.rays == "bent" else {}),
    }


