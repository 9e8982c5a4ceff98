"""Bent-ray tomography: Gauss-Newton iterations over eikonal fields and traced rays.

The forward model (one eikonal field per source, rays traced back through
it) is :func:`reconstruct.forward.first_arrivals.bent_ray_forward`.

Iterations
----------
Starting from the straight-ray model, each iteration linearises the times
about the current model ``s_k``: ``t ~ T(s_k) + G_k (s - s_k) + C tau``, with
``G_k`` the path lengths of the traced rays, and solves the same regularised
problem as the straight-ray inversion (regularisation about the site's
reference model, lambda chosen the same way) for ``s`` and ``tau``. The new
model is accepted only if its data misfit, computed with new fields, is lower;
otherwise the step is halved (up to twice). The loop stops when the misfit
improves by less than ``plateau`` (relative), when no step lowers it, or at
the iteration limit.

References
----------
.. [1] Cerveny, V. (2001), Seismic Ray Theory, Cambridge University Press.
.. [2] Paige, C. C. and Saunders, M. A. (1982), LSQR, ACM Trans. Math. Softw.
   8(1), 43-71.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from reconstruct.forward.first_arrivals import bent_ray_forward, unique_pairs
from reconstruct.forward.kernels import COMPILING_MESSAGE, kernels_need_compiling
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.inverse.solver import InversionOptions, invert_travel_times
from reconstruct.inverse.time_zero import estimate_time_zero, time_zero_matrix
from reconstruct.inverse.multilevel import choose_coarsening_factor, coarse_level
from reconstruct.parallel import Executor
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.inverse.straight import TomographyRun, solver_progress, straight_ray_tomography
from reconstruct.forward.straight_rays import ray_coverage

__all__ = ["BentOptions", "bent_ray_tomography"]


@dataclass(frozen=True)
class BentOptions:
    """Settings of the bent-ray iterations.

    Parameters
    ----------
    max_iterations : int
        Bent-ray iterations after the straight-ray start.
    plateau : float
        Stop when the misfit falls by less than this fraction in an iteration.
    keep_rays : bool
        Keep the ray polylines of the final model (for ``rays.vtp``).
    eikonal : object
        :class:`reconstruct.forward.eikonal.EikonalOptions`; None for its defaults.
    """

    max_iterations: int = 4
    plateau: float = 0.02
    keep_rays: bool = False
    eikonal: object = None

    def __post_init__(self):
        from reconstruct.errors import InputError

        problems = []
        if not isinstance(self.max_iterations, int) or self.max_iterations < 1:
            problems.append(f"bent-ray iterations must be a whole number >= 1 (got {self.max_iterations})")
        if not 0 <= self.plateau < 1:
            problems.append(f"plateau must be between 0 and 1 (got {self.plateau})")
        if problems:
            raise InputError(problems, source="bent-ray options")




















def _starting_model(start, reference, forward, misfit, C, weight, t_obs, pick_pair, say):
    """The start of the bent-ray iterations: the straight-ray model, or the reference model
    (rock and air) when it explains the picks better through bent rays. Where air waves arrive
    first, straight rays force absurd velocities that bent rays need not undo.

    Returns (slowness, time-zero offsets, forward result, weighted misfit, RMS ns, name).
    """
    model = start.result.slowness_ns_per_m.copy()
    tau = start.result.time_zero_ns.copy()
    fwd = forward(model)
    current, rms = misfit(fwd.time_ns[pick_pair] + C @ tau)
    start_name = "straight-ray model"
    fwd_ref = forward(reference)
    tau_ref = estimate_time_zero(C, weight, t_obs - fwd_ref.time_ns[pick_pair])
    value_ref, rms_ref = misfit(fwd_ref.time_ns[pick_pair] + C @ tau_ref)
    rms_straight_model = rms
    if value_ref < current:
        model, tau, fwd, current, rms = reference.copy(), tau_ref, fwd_ref, value_ref, rms_ref
        start_name = "reference model"
    say(f"bent-ray iteration 0, the starting model: RMS misfit {rms:.3f} ns through bent rays (the "
        f"straight-ray model gives {rms_straight_model:.3f} ns, the site's rock velocity {rms_ref:.3f} ns; "
        "the lower one is the start)")
    return model, tau, fwd, current, rms, start_name


def bent_ray_tomography(site, nodes, picks, options: InversionOptions = InversionOptions(), *,
                        bent: BentOptions = BentOptions(), executor: Executor = Executor(kind="serial"),
                        snap_tolerance_m=None, memory_limit_bytes=None, progress=None) -> TomographyRun:
    """Bent-ray tomography of a site, starting from the straight-ray model.

    Returns a :class:`reconstruct.inverse.straight.TomographyRun` with ``rays="bent"``,
    the per-iteration misfits in ``history`` and, with ``bent.keep_rays``, the
    final rays in ``polylines``.
    """
    def say(message):
        if progress is not None:
            progress(message)

    start = straight_ray_tomography(site, nodes, picks, options, snap_tolerance_m=snap_tolerance_m,
                                    memory_limit_bytes=memory_limit_bytes, progress=progress)
    grid, ground = start.grid, start.ground
    used = start.used
    xyz = start.placement.xyz_m
    tx, rx = picks.tx[used], picks.rx[used]
    t_obs = picks.time_ns[used]
    sigma = None if picks.sigma_ns is None else picks.sigma_ns[used]
    weight = np.ones(used.size) if sigma is None else 1.0 / sigma
    pair_a, pair_b, pick_pair = unique_pairs(tx, rx)
    C = time_zero_matrix(tx, rx, len(nodes), options.time_zero)
    ground_flat = ground.ravel()
    reference = np.where(ground_flat, 1.0 / site.rock.velocity_m_per_ns, 1.0 / AIR_VELOCITY_M_PER_NS)
    D = first_difference_operator(grid, ground, horizontal_weight=options.horizontal_weight,
                                  vertical_weight=options.vertical_weight)
    factor = choose_coarsening_factor(int(ground.sum()))
    coarse = None
    if options.smoothing is None and factor > 1:
        coarse = coarse_level(grid, ground, factor, horizontal_weight=options.horizontal_weight,
                              vertical_weight=options.vertical_weight)

    def forward(model, keep=False):
        def fw_progress(done, total):
            if done == total or done % max(1, total // 10) == 0:
                say(f"travel-time fields: {done}/{total}")
        return bent_ray_forward(grid, model.reshape(grid.shape), xyz, pair_a, pair_b, executor=executor,
                                eikonal_options=bent.eikonal, keep_rays=keep, progress=fw_progress)

    def misfit(pred):
        r = t_obs - pred
        return float(np.sum((weight * r) ** 2)), float(np.sqrt(np.mean(r**2)))

    if kernels_need_compiling():
        say(COMPILING_MESSAGE)
    model, tau, fwd, current, rms, start_name = _starting_model(start, reference, forward, misfit, C, weight,
                                                                t_obs, pick_pair, say)
    history = [dict(iteration=0, rays=f"bent rays through the {start_name}", rms_ns=rms,
                    chi2=current if sigma is not None else None, lambda_smooth=None,
                    step=None, rays_not_reaching_source=int((~fwd.reached).sum()))]
    result = start.result
    lambda_floor = options.lambda_min
    for iteration in range(1, bent.max_iterations + 1):
        G = fwd.operator[pick_pair]
        t_eff = t_obs - fwd.time_ns[pick_pair] + G @ model
        step_options = dataclasses.replace(options, lambda_min=min(lambda_floor, options.lambda_max / 10))
        trial = invert_travel_times(G, t_eff, tx, rx, len(nodes), ground_flat, reference, D,
                                    cell_m=grid.cell_m, sigma_ns=sigma, options=step_options, coarse=coarse,
                                    progress=solver_progress(progress))
        step = 1.0
        while True:
            candidate = model + step * (trial.slowness_ns_per_m - model)
            tau_candidate = tau + step * (trial.time_zero_ns - tau)
            fwd_new = forward(candidate)
            pred_new = fwd_new.time_ns[pick_pair] + C @ tau_candidate
            value, rms_new = misfit(pred_new)
            if value < current or step <= 0.125:
                break
            step *= 0.5
            say(f"bent-ray iteration {iteration}: the misfit rose to RMS {rms_new:.3f} ns; trying a step of {step:g}")
        if value >= current:
            say(f"bent-ray iteration {iteration}: no step lowers the misfit; keeping the previous model")
            break
        rms_before = history[-1]["rms_ns"]
        improvement = (current - value) / current
        model, tau, fwd, current = candidate, tau_candidate, fwd_new, value
        result = trial
        # roughen gradually: the next lambda may fall at most tenfold
        lambda_floor = max(options.lambda_min, trial.lambda_smooth / 10)
        history.append(dict(iteration=iteration, rays="bent", rms_ns=rms_new,
                            chi2=value if sigma is not None else None, lambda_smooth=trial.lambda_smooth,
                            step=step, rays_not_reaching_source=int((~fwd.reached).sum())))
        say(f"bent-ray iteration {iteration} of {bent.max_iterations}: RMS misfit {rms_new:.3f} ns "
            f"(was {rms_before:.3f} ns), " + ("full step" if step == 1 else f"step {step:g}")
            + f", smoothing weight {trial.lambda_smooth:.3g}")
        if improvement < bent.plateau:
            say(f"the misfit improved by only {improvement:.1%} (less than {bent.plateau:.0%}); stopping here")
            break

    final = fwd
    if bent.keep_rays:
        final = forward(model, keep=True)
    pred = final.time_ns[pick_pair] + C @ tau
    residual = t_obs - pred
    G = final.operator[pick_pair]
    final_result = dataclasses.replace(
        result, slowness_ns_per_m=model, time_zero_ns=tau, predicted_ns=pred, residual_ns=residual,
        rms_ns=float(np.sqrt(np.mean(residual**2))),
        chi2=float(np.sum((residual / sigma) ** 2)) if sigma is not None else None,
    )
    ray_length, ray_count = ray_coverage(G, grid)
    return dataclasses.replace(
        start, result=final_result, ray_length_m=ray_length, ray_count=ray_count, rays="bent",
        history=tuple(history),
        polylines=None if final.polylines is None else [final.polylines[k] for k in pick_pair],
    )
