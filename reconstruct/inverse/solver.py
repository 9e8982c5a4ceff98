"""Regularised least-squares travel-time inversion with node time-zero terms.

The unknowns are the slowness of every ground cell about a reference model and,
optionally, one time-zero term per node. Air cells are fixed at the slowness of
light. The operator (straight or bent rays) is passed in, so the inversion does
not care which forward model made it.

Model of an observed pick from node ``a`` (transmitter) to node ``b`` (receiver)::

    t_ab = sum_j G_abj s_j + tau_b - tau_a          (time_zero="clock")
    t_ab = sum_j G_abj s_j + tau_a + tau_b          (time_zero="delay")

"clock" is the default: cheap nodes keep their own clocks, so a node whose
clock runs ahead by ``tau`` reads late when it receives and fires early when it
transmits. A common shift of all ``tau`` changes no time under "clock", so the
terms are reported relative to their mean over the nodes. "delay" models fixed
instrument delays instead (antenna, cable, trigger), added on both ends.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, aslinearoperator, lsqr

from reconstruct.inverse.occam import occam_weight
from reconstruct.inverse.options import InversionOptions
from reconstruct.inverse.problem import InverseProblem
from reconstruct.inverse.regularization import (
    difference_row_cells,
    minimum_gradient_support_weights,
    minimum_support_weights,
)
from reconstruct.inverse.robust import robust_scale, robust_weights
from reconstruct.inverse.time_zero import estimate_time_zero, robust_time_zero

__all__ = [
    "InversionOptions",
    "InversionResult",
    "invert_travel_times",
    "solve_inverse_problem",
    "solve_occam_step",
    "bounded_lsqr",
]

#: Damping of the time-zero unknowns relative to their data weight: small, so
#: that the offsets are set by the data, but enough to fix the gauge of "clock".
_TIME_ZERO_DAMPING = 1e-3

#: The compact regularisation's reweighting stops when fewer than 1 % of its
#: weights change by more than this (the rule of the robust reweighting).
_FOCUSING_TOLERANCE = 0.02


@dataclass(frozen=True)
class InversionResult:
    """Outcome of :func:`invert_travel_times`.

    Arrays over cells use the C-order flat index of the grid.
    """

    slowness_ns_per_m: np.ndarray
    time_zero_ns: np.ndarray
    predicted_ns: np.ndarray
    residual_ns: np.ndarray
    rms_ns: float
    chi2: float | None
    n_picks: int
    lambda_smooth: float
    lambda_damp: float
    lambda_method: str
    lambda_note: str
    lambda_search: tuple = field(default=())
    iterations: int = 0
    stop_code: int = 0
    stop_reason: str = ""
    n_clipped_slow: int = 0
    n_clipped_fast: int = 0
    robust_loss: str = "none"
    robust_weight: np.ndarray | None = None  # final IRLS weight per pick, 0..1
    rejected: np.ndarray | None = None  # bool per pick: robust weight below options.rejection_weight
    robust_scale: float = 1.0  # residual scale (in sigmas) the robust weights were computed with
    robust_reweightings: int = 0
    chi2_before_clipping: float | None = None  # chi^2 of the solved model before clipping into the band
    rms_before_clipping_ns: float | None = None
    chi2_after_clipping: float | None = None  # chi^2 of this solve's model after clipping (= chi2 as solved)
    rms_after_clipping_ns: float | None = None
    regularisation: str = "smooth"
    focusing_reweightings: int = 0  # reweightings of the compact regularisation in this solve
    focusing_beta_ns_per_m: float | None = None
    bounds_in_solve: bool = False

    @property
    def n_clipped(self) -> int:
        return self.n_clipped_slow + self.n_clipped_fast

    @property
    def velocity_m_per_ns(self) -> np.ndarray:
        return 1.0 / self.slowness_ns_per_m


_LSQR_REASONS = {
    0: "x = 0 is the exact solution",
    1: "residual small enough (consistent system)",
    2: "least-squares solution within tolerance",
    3: "condition number limit reached",
    4: "residual at machine precision",
    5: "least-squares solution at machine precision",
    6: "condition number at machine precision",
    7: "iteration limit reached",
}






@dataclass
class _Solve:
    y: np.ndarray
    stop_code: int
    iterations: int
    misfit: float  # |W (t - t_pred)|, the square root of chi^2
    roughness: float
    size: float
    bound_passes: int = 0  # passes of the bounded solve (0: unbounded)


def bounded_lsqr(operator, rhs, lower, upper, *, x0=None, max_iterations: int = 400, tolerance: float = 1e-4,
                 max_passes: int = 12):
    """Least squares with bounds on the unknowns: ``min |A x - b|`` with ``lower <= x <= upper``.

    Block principal pivoting over LSQR solves: every unknown is free or held
    at one of its bounds; LSQR solves for the free ones (warm-started), then
    every free unknown beyond a bound is held at it and every held unknown
    whose gradient points into the band is freed, all at once, until nothing
    changes (the Karush-Kuhn-Tucker conditions hold to the solver's accuracy).
    After half of ``max_passes`` unknowns are only held, never freed, so the
    passes end; if they end unsettled, the feasible point of least misfit
    seen is returned. Only ``A x`` and ``A^T u`` are used: the operator may be a
    :class:`scipy.sparse.linalg.LinearOperator`.

    Parameters
    ----------
    operator : matrix or LinearOperator, shape (m, n)
    rhs : ndarray, shape (m,)
    lower, upper : float or ndarray, shape (n,)
        Bounds; ``-inf`` / ``inf`` for an unbounded unknown.
    x0 : ndarray, shape (n,), optional
        Start (projected into the bounds); its unknowns at a bound start held.
    max_iterations, tolerance : int, float
        LSQR ``iter_lim`` and ``atol`` = ``btol`` of each pass.
    max_passes : int

    Returns
    -------
    x : ndarray, shape (n,)
        Inside the bounds.
    stop_code, iterations : int
        LSQR stop code of the last pass and the LSQR iterations of all passes.
    passes : int
        LSQR solves made.
    converged : bool
        True when the last pass changed no unknown's state.

    References
    ----------
    .. [1] Portugal, L. F., Judice, J. J. and Vicente, L. N. (1994), A
       comparison of block pivoting and interior-point algorithms for linear
       least squares problems with nonnegative variables, Mathematics of
       Computation 63(208), 625-643 (cited from memory).
    .. [2] Paige, C. C. and Saunders, M. A. (1982), LSQR, ACM Trans. Math.
       Softw. 8(1), 43-71.
    """
    A = aslinearoperator(operator)
    m, n = A.shape
    b = np.asarray(rhs, dtype=float)
    lower = np.broadcast_to(np.asarray(lower, dtype=float), (n,))
    upper = np.broadcast_to(np.asarray(upper, dtype=float), (n,))
    if np.any(lower > upper):
        raise ValueError("every lower bound must be at or below its upper bound")
    x = np.clip(np.zeros(n) if x0 is None else np.asarray(x0, dtype=float), lower, upper)
    at_lower = np.isfinite(lower) & (x <= lower)
    at_upper = np.isfinite(upper) & (x >= upper) & ~at_lower
    iterations, stop_code, converged = 0, 0, False
    passes = 0
    best, best_cost = None, np.inf
    while passes < max_passes:
        passes += 1
        free = ~(at_lower | at_upper)
        held = np.where(at_lower, lower, np.where(at_upper, upper, 0.0))
        masked = LinearOperator((m, n), matvec=lambda v, f=free: A.matvec(np.ravel(v) * f),
                                rmatvec=lambda u, f=free: A.rmatvec(np.ravel(u)) * f, dtype=float)
        out = lsqr(masked, b - A.matvec(held), atol=tolerance, btol=tolerance, iter_lim=max_iterations,
                   x0=x * free)
        iterations += int(out[2])
        stop_code = int(out[1])
        x = out[0] * free + held
        below = free & (x < lower)
        above = free & (x > upper)
        gradient = A.rmatvec(A.matvec(x) - b)  # of |A x - b|^2 / 2
        # the free unknowns' gradient is what LSQR left: below it a sign means nothing
        noise = float(np.max(np.abs(gradient[free]))) if free.any() else 0.0
        release = np.zeros(n, dtype=bool)
        if passes <= max_passes // 2:
            release = (at_lower & (gradient < -noise)) | (at_upper & (gradient > noise))
        if not (below.any() or above.any() or release.any()):
            converged = True
            break
        at_lower = (at_lower & ~release) | below
        at_upper = (at_upper & ~release) | above
        x = np.clip(x, lower, upper)
        cost = float(np.linalg.norm(A.matvec(x) - b))
        if cost < best_cost:
            best, best_cost = x, cost
    if not converged and best is not None and best_cost < float(np.linalg.norm(A.matvec(x) - b)):
        x = best  # the passes did not settle: the feasible point of least misfit seen
    return x, stop_code, iterations, passes, converged


class _ScaledProblem:
    """The column-scaled, regularised system solved by LSQR.

    ::

        [ A S^-1                     ]       [ W r ]
        [ lambda_s k_s Q D S_g^-1    ] y  ~  [  0  ]
        [ lambda_d E R               ]       [  0  ]

    ``A = W [G_g C]``; ``S`` holds the column norms of ``A`` (floored at a tenth of
    their median, per block) and ``x = S^-1 y`` the physical unknowns (slowness
    change in ns/m, then time-zeros in ns). ``D`` is the first-difference
    operator weighted so that ``|D ds|^2`` approximates the integral of
    ``|grad ds|^2`` over the ground; ``E`` is diagonal: ``k_d sqrt(V_cell) / S_j``
    on slowness columns, so that ``|E y|^2`` approximates ``k_d^2`` times the
    integral of ``ds^2``, and 1 on time-zero columns (damping relative to
    their data weight). ``Q`` and ``R`` are diagonal weights, 1 for the smooth
    regularisation and the minimum gradient support and minimum support
    weights of the compact one (:meth:`focusing_weights`).

    The normalisations ``k_d^2 = sum_i (w_i L_i)^2 / V_ground`` (the data's
    sensitivity to a uniform slowness change per unit volume; ``L_i`` the
    ground path length of ray ``i``) and ``k_s = k_d * ell`` (``ell`` the median
    ray length) depend on the rays and the ground volume but not on the cell
    size, so ``lambda`` means the same on a coarse and a fine grid.

    ``bounds`` (physical lower and upper slowness changes of the slowness
    columns), when given, are kept inside every solve (:func:`bounded_lsqr`).
    """

    def __init__(self, A, b, D, n_slowness, cell_m, kappa_damp, kappa_smooth, bounds=None):
        self.n_slowness = n_slowness
        self.n = A.shape[1]
        norms = np.sqrt(np.asarray(A.multiply(A).sum(axis=0)).ravel())
        scale = np.empty_like(norms)
        for part in (slice(0, n_slowness), slice(n_slowness, None)):
            block = norms[part]
            positive = block[block > 0]
            typical = float(np.median(positive)) if positive.size else 1.0
            scale[part] = np.maximum(block, 0.1 * typical)
        self.scale = scale
        self.A = (A @ sp.diags(1.0 / scale)).tocsr()
        self.AT = self.A.T.tocsr()
        cell = np.asarray(cell_m, dtype=float)
        volume = float(np.prod(cell))
        h_ref = float(np.mean(cell))
        # first_difference_operator weights rows by h_ref / h; make them sqrt(V) / h
        d_phys = sp.csr_matrix(D) * (np.sqrt(volume) / h_ref)
        self.D = (d_phys @ sp.diags(kappa_smooth / scale[:n_slowness])).tocsr()
        self.difference_operator = sp.csr_matrix(D)  # physical: slowness differences, ns/m
        self.row_cells = difference_row_cells(D) if D.shape[0] else np.zeros(0, dtype=np.int64)
        # time-zeros are damped only enough to make the problem well posed
        # (weights relative to their unit-norm columns, independent of lambda)
        self.damp_diag = np.concatenate(
            [kappa_damp * np.sqrt(volume) / scale[:n_slowness], np.zeros(self.n - n_slowness)]
        )
        self.fixed_damp = np.concatenate([np.zeros(n_slowness), np.full(self.n - n_slowness, _TIME_ZERO_DAMPING)])
        self.b0 = np.asarray(b, dtype=float)
        self.bounds = None
        if bounds is not None:
            free = np.full(self.n - n_slowness, np.inf)
            self.bounds = (np.concatenate([np.asarray(bounds[0], float) * scale[:n_slowness], -free]),
                           np.concatenate([np.asarray(bounds[1], float) * scale[:n_slowness], free]))
        self.set_row_weights(None)
        self.set_focusing_weights(None, None)

    def set_focusing_weights(self, difference_weights, damping_weights):
        """Weights ``Q`` of the difference rows and ``R`` of the damping rows (None: 1)."""
        self.focus_rows = (np.ones(self.D.shape[0]) if difference_weights is None
                           else np.asarray(difference_weights, dtype=float))
        self.focus_damp = np.ones(self.n)
        if damping_weights is not None:
            self.focus_damp[:self.n_slowness] = damping_weights
        self.Dw = (sp.diags(self.focus_rows) @ self.D).tocsr()
        self.DwT = self.Dw.T.tocsr()

    def focusing_weights(self, y, beta):
        """Compact-regularisation weights of the model ``y`` (scaled unknowns):
        minimum gradient support on the difference rows, minimum support on
        the damping rows, both with the focusing parameter ``beta`` (ns/m)."""
        anomaly = np.asarray(y[:self.n_slowness]) / self.scale[:self.n_slowness]
        rows = (minimum_gradient_support_weights(self.difference_operator, anomaly, beta, self.row_cells)
                if self.D.shape[0] else np.zeros(0))
        return rows, minimum_support_weights(anomaly, beta)

    def set_row_weights(self, omega, counted=None):
        """Robust weights ``omega`` (None: all 1) of the data rows, and the rows
        ``counted`` in the misfit that chooses lambda (None: all).

        The rows are scaled by ``sqrt(omega)`` inside the operator, so the column
        scaling, and with it the meaning of lambda, stays that of the plain problem.
        """
        m = self.A.shape[0]
        self.row_sqrt_w = None if omega is None else np.sqrt(np.asarray(omega, dtype=float))
        self.b = self.b0 if omega is None else self.row_sqrt_w * self.b0
        self.counted = np.ones(m, dtype=bool) if counted is None else np.asarray(counted, dtype=bool)

    def data_residual(self, y) -> np.ndarray:
        """Unweighted-by-IRLS data residual ``A y - b`` in sigmas (observed minus
        predicted, with the sign flipped)."""
        return self.A @ y - self.b0

    def _damping(self, lambda_damp):
        return lambda_damp * self.damp_diag * self.focus_damp + self.fixed_damp

    def operator(self, lambda_smooth: float, lambda_damp: float) -> LinearOperator:
        m, n, ns = self.A.shape[0], self.n, self.n_slowness
        nd = self.D.shape[0]
        damp = self._damping(lambda_damp)
        Dw, DwT = self.Dw, self.DwT

        sw = self.row_sqrt_w

        def matvec(y):
            y = np.ravel(y)
            data = self.A @ y
            if sw is not None:
                data *= sw
            return np.concatenate([data, lambda_smooth * (Dw @ y[:ns]), damp * y])

        def rmatvec(u):
            u = np.ravel(u)
            out = self.AT @ (u[:m] if sw is None else sw * u[:m])
            out[:ns] += lambda_smooth * (DwT @ u[m:m + nd])
            out += damp * u[m + nd:]
            return out

        return LinearOperator((m + nd + n, n), matvec=matvec, rmatvec=rmatvec, dtype=float)

    def stacked(self, lambda_smooth: float, lambda_damp: float):
        """Explicit stacked matrix and right-hand side (for checks on small problems)."""
        ns = self.n_slowness
        D_full = sp.hstack([self.Dw, sp.csr_matrix((self.D.shape[0], self.n - ns))])
        A = self.A if self.row_sqrt_w is None else sp.diags(self.row_sqrt_w) @ self.A
        M = sp.vstack([A, lambda_smooth * D_full, sp.diags(self._damping(lambda_damp))]).tocsr()
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0] + self.n)])
        return M, rhs

    def solve(self, lambda_smooth, lambda_damp, y0, max_iterations, tolerance) -> _Solve:
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0] + self.n)])
        passes = 0
        if self.bounds is None:
            out = lsqr(self.operator(lambda_smooth, lambda_damp), rhs, atol=tolerance, btol=tolerance,
                       iter_lim=max_iterations, x0=y0)
            y, stop_code, iterations = out[0], int(out[1]), int(out[2])
        else:
            y, stop_code, iterations, passes, _ = bounded_lsqr(
                self.operator(lambda_smooth, lambda_damp), rhs, self.bounds[0], self.bounds[1], x0=y0,
                max_iterations=max_iterations, tolerance=tolerance)
        return _Solve(
            y=y,
            stop_code=stop_code,
            iterations=iterations,
            misfit=float(np.linalg.norm(self.data_residual(y)[self.counted])),
            roughness=float(np.linalg.norm(self.Dw @ y[: self.n_slowness])),
            size=float(np.linalg.norm(self.damp_diag * self.focus_damp * y)),
            bound_passes=passes,
        )


#: The grid levels of the weight search, in words.
_GRID_WORDS = {"coarse": "coarse grid", "fine": "model grid"}


def _l_curve_corner(log_rho: np.ndarray, log_eta: np.ndarray) -> int:
    """Index of the corner of a sampled L-curve, traversed from large to small lambda.

    The curve (log residual norm, log regularisation norm) runs left along its
    flat leg, then turns up its steep leg; the corner is the point of largest
    curvature (Hansen, 1992). On a few samples whose spacing shrinks along the
    steep leg, finite-difference curvature is dominated by the spacing, so the
    discrete version used here is the interior point with the largest
    clockwise turning angle between its two segments (in the spirit of the
    triangle method of Castellanos, Gomez and Guerra, 2002, Applied Numerical
    Mathematics 43, 359-373; cited from memory).
    """
    points = np.c_[np.asarray(log_rho, float), np.asarray(log_eta, float)]
    if points.shape[0] < 3:
        return 0
    seg = np.diff(points, axis=0)
    angle = np.arctan2(seg[:, 1], seg[:, 0])
    turn = np.angle(np.exp(1j * (angle[1:] - angle[:-1])))  # wrapped to (-pi, pi]
    tiny = np.linalg.norm(seg, axis=1) < 1e-12
    turn[tiny[1:] | tiny[:-1]] = np.inf  # a repeated point has no direction
    return int(np.argmin(turn)) + 1


class _SolveLog:
    """Every solve of one inversion (``search``, returned as
    ``InversionResult.lambda_search``) and the progress messages."""

    def __init__(self, n_picks: int, progress=None):
        self.search: list = []
        self.n_picks = n_picks
        self.progress = progress

    def record(self, level, lam, sol):
        self.search.append(dict(level=level, lambda_smooth=float(lam), chi2=sol.misfit**2,
                                rms_weighted=sol.misfit / np.sqrt(self.n_picks),
                                roughness=sol.roughness, iterations=sol.iterations))

    def say(self, message):
        if self.progress:
            self.progress(message)


def _sweep(problem, options, log, stop_below, level, tolerance, x_start, lambdas=None):
    """Solve for lambda from large to small, each warm-started from the last.

    Stops early once chi^2 <= ``stop_below`` (None: never), or once chi^2 falls
    by less than 2 % from one trial to the next (the L-curve's vertical leg).
    Returns a list of ``(lambda, _Solve)``.
    """
    ratio = options.damping_ratio
    if lambdas is None:
        lambdas = np.geomspace(options.lambda_max, options.lambda_min, options.n_lambda)
    trials = []
    y0 = x_start * problem.scale
    for k, lam in enumerate(lambdas):
        sol = problem.solve(lam, ratio * lam, y0, options.max_iterations, tolerance)
        y0 = sol.y
        trials.append((float(lam), sol))
        log.record(level, lam, sol)
        log.say(f"smoothing weight, trial {k + 1} of up to {lambdas.size} on the {_GRID_WORDS[level]}: "
                f"{lam:.3g} gives chi-square {sol.misfit**2:.4g} ({sol.iterations} LSQR iterations)")
        if stop_below is not None and sol.misfit**2 <= stop_below:
            break
        if len(trials) >= 4 and sol.misfit**2 > 0.98 * trials[-2][1].misfit ** 2:
            break  # the misfit has levelled off: smaller lambdas only roughen the model
    return trials


def _l_curve_choice(trials, ratio):
    log_rho = np.log([t[1].misfit for t in trials])
    log_eta = np.log([np.hypot(t[1].roughness, ratio * t[1].size) + 1e-300 for t in trials])
    return _l_curve_corner(log_rho, log_eta)


def _log_slope(trials, k):
    """d log(chi^2) / d log(lambda) around trial k (positive: chi^2 grows with lambda)."""
    lo, hi = max(k - 1, 0), min(k + 1, len(trials) - 1)
    if hi == lo:
        return 1.0
    c_lo, c_hi = trials[lo][1].misfit ** 2, trials[hi][1].misfit ** 2
    return float((np.log(c_hi) - np.log(c_lo)) / (np.log(trials[hi][0]) - np.log(trials[lo][0])))


def _discrepancy_root(problem, options, start, target, log, level, *,
                      slope=1.0, tolerance=0.03, max_solves=6):
    """Find lambda with chi^2 = target, starting from ``start = (lambda, _Solve)``.

    Steps along the local log-log slope until the sign of g = log(chi^2 / target)
    changes, then regula falsi with the Illinois modification. Every solve is
    warm-started from the nearest previous one. Returns (lambda, _Solve, reached).
    """
    ratio = options.damping_ratio

    def g_of(sol):
        return float(np.log(max(sol.misfit**2, 1e-300) / target))

    lam, sol = start
    g = g_of(sol)
    if abs(g) < tolerance:
        return lam, sol, True
    points = [(np.log(lam), g, sol)]
    hi = lo = None
    side = 0
    for _ in range(max_solves):
        if hi is None or lo is None:
            last = points[-1]
            if len(points) >= 2:
                prev = points[-2]
                measured = (last[1] - prev[1]) / (last[0] - prev[0]) if last[0] != prev[0] else 0.0
                slope = measured if measured > 0.02 else slope
            step = float(np.clip(-last[1] / max(slope, 0.05), -2.3, 2.3))  # at most 10x per step
            log_lam = last[0] + step
        else:
            log_lam = lo[0] - lo[1] * (hi[0] - lo[0]) / (hi[1] - lo[1])
        lam = float(np.exp(log_lam))
        nearest = min(points, key=lambda p: abs(p[0] - log_lam))[2]
        sol = problem.solve(lam, ratio * lam, nearest.y, options.max_iterations, options.search_tolerance)
        log.record(level, lam, sol)
        g = g_of(sol)
        log.say(f"smoothing weight {lam:.4g} on the {_GRID_WORDS[level]}: chi-square {sol.misfit**2:.5g}, "
                f"aiming at {target:.5g}, the number of picks ({sol.iterations} LSQR iterations)")
        if abs(g) < tolerance:
            return lam, sol, True
        point = [log_lam, g, sol]
        points.append(point)
        if hi is None or lo is None:
            above = [p for p in points if p[1] > 0]
            below = [p for p in points if p[1] <= 0]
            if above and below:
                hi = list(min(above, key=lambda p: p[1]))
                lo = list(max(below, key=lambda p: p[1]))
            elif g > 0 and (log_lam <= np.log(options.lambda_min) - 1e-9
                            or any(p[0] > log_lam and p[1] < g for p in points[:-1])):
                # cannot fit to chi^2 = N inside the search range, or a smaller weight
                # fits worse (with the band inside the solve the misfit can rise again
                # as the weight falls): the least misfit seen
                best = min(points, key=lambda p: p[1])
                return float(np.exp(best[0])), best[2], False
            elif g <= 0 and log_lam >= np.log(options.lambda_max) + 1e-9:
                return lam, sol, False
            continue
        if g > 0:
            hi = point
            if side == +1:
                lo[1] *= 0.5
            side = +1
        else:
            lo = point
            if side == -1:
                hi[1] *= 0.5
            side = -1
    best = min(points, key=lambda p: abs(p[1]))
    return float(np.exp(best[0])), best[2], abs(best[1]) < 0.1


def _irls(problem, options, lam, sol, loss, trust_sigma, log, exempt=None, max_reweightings=None):
    """Iteratively reweighted least squares at a fixed lambda.

    Residuals are standardised by the pick sigmas (``trust_sigma``: picks carry
    sigmas, from the table or from reciprocity) or, without them, by their
    robust scale (normalised median absolute residual). Stops when fewer than
    1 % of the weights change by more than ``options.robust_tolerance``, or after
    ``max_reweightings`` (default ``options.robust_iterations``) reweightings.
    The solves stop at ``options.search_tolerance``; the caller polishes the
    last one. Returns
    ``(solve, weights, scale, reweightings)``; the weights are those the
    returned solve was computed with. Picks marked ``exempt`` keep weight 1.
    """
    ratio = options.damping_ratio
    omega = None
    scale = 1.0
    count = 0
    for _ in range(options.robust_iterations if max_reweightings is None else max_reweightings):
        u = -problem.data_residual(sol.y)  # observed minus predicted, in sigmas
        scale = 1.0 if trust_sigma else robust_scale(u)
        new = robust_weights(u / scale, loss)
        if exempt is not None:
            new[exempt] = 1.0
        if omega is None and np.all(new == 1.0):
            omega = new  # nothing to reweight: the plain solution stands
            break
        # converged when fewer than 1 % of the weights still move by more than the tolerance
        if omega is not None and np.percentile(np.abs(new - omega), 99) < options.robust_tolerance:
            break
        omega = new
        problem.set_row_weights(omega, omega >= options.rejection_weight)
        sol = problem.solve(lam, ratio * lam, sol.y, options.max_iterations,
                            min(options.search_tolerance, 10 * options.tolerance))
        count += 1
        log.record("fine", lam, sol)
        log.say(f"robust weighting ({loss}), pass {count}: {int(np.sum(omega < options.rejection_weight))} "
                f"picks below weight {options.rejection_weight:g}, {sol.iterations} iterations")
    return sol, omega, scale, count


def invert_travel_times(
    operator,
    time_ns,
    tx,
    rx,
    n_nodes: int,
    ground_flat,
    reference_slowness_ns_per_m,
    smoothing_operator,
    *,
    cell_m=(1.0, 1.0, 1.0),
    sigma_ns=None,
    options: InversionOptions = InversionOptions(),
    coarse=None,
    progress=None,
    robust_exempt=None,
) -> InversionResult:
    """Invert travel times for ground slowness and node time-zeros.

    Many parameters because this is the array-level entry kept for existing
    callers: it builds an :class:`reconstruct.inverse.problem.InverseProblem`
    from them and calls :func:`solve_inverse_problem`.

    Parameters
    ----------
    operator : scipy.sparse matrix, shape (n_picks, n_cells)
        Path lengths in metres of each pick's ray in every cell (air included).
    time_ns : ndarray, shape (n_picks,)
        Observed first-arrival times in ns.
    tx, rx : ndarray of int, shape (n_picks,)
        Transmitter and receiver node numbers, ``0 <= i < n_nodes``.
    n_nodes : int
    ground_flat : ndarray of bool, shape (n_cells,)
        True for ground cells (unknowns); air cells keep their reference slowness.
    reference_slowness_ns_per_m : ndarray, shape (n_cells,)
        Starting model, air cells at ``1 / c``.
    smoothing_operator : scipy.sparse matrix, shape (n_pairs, n_ground)
        :func:`reconstruct.inverse.regularization.first_difference_operator` of the grid.
    cell_m : tuple of 3 float
        Cell size of the grid, metres.
    sigma_ns : ndarray, shape (n_picks,), optional
        Pick standard deviations; when given lambda is chosen by the discrepancy
        principle, else by the L-curve corner.
    options : InversionOptions
    coarse : reconstruct.inverse.multilevel.CoarseLevel, optional
        When given (and lambda is automatic), lambda is searched on this coarse
        grid, and its model starts the fine solve.
    progress : callable, optional
        ``progress(message)`` after each solve.
    robust_exempt : ndarray of bool, shape (n_picks,), optional
        Picks that keep full weight in the robust reweighting (for example
        picks confirmed by an agreeing reciprocal pick: a picking error would
        not repeat in the other direction, a true travel-time anomaly does).

    Returns
    -------
    InversionResult

    Notes
    -----
    See :func:`solve_inverse_problem` for the equations and references.
    """
    problem = InverseProblem(
        time_ns=time_ns, tx=tx, rx=rx, n_nodes=n_nodes, ground_flat=ground_flat,
        reference_slowness_ns_per_m=reference_slowness_ns_per_m, smoothing_operator=smoothing_operator,
        cell_m=cell_m, sigma_ns=sigma_ns, options=options, coarse=coarse, robust_exempt=robust_exempt,
    )
    return solve_inverse_problem(problem, operator, progress=progress)


@dataclass(frozen=True)
class _Levels:
    """The column-scaled problem on the model grid and how to make it on the coarse grid."""

    problem: InverseProblem
    fine: _ScaledProblem
    operator_ground: sp.csr_matrix  # G restricted to the ground columns
    residual_ref: np.ndarray  # t - G s_ref
    kappa_damp: float
    kappa_smooth: float
    tau_start: np.ndarray
    bounds: tuple | None = None  # physical bounds of the slowness change per ground cell

    def start(self, n_cells_level: int) -> np.ndarray:
        """Physical start vector: no slowness change, the time-zeros fitted alone."""
        return np.concatenate([np.zeros(n_cells_level), self.tau_start])

    def coarse_problem(self) -> _ScaledProblem:
        coarse = self.problem.coarse
        P = coarse.prolongation
        return _ScaledProblem(
            _weighted_blocks(self.problem, (self.operator_ground @ P).tocsr()),
            self.problem.weight * self.residual_ref, coarse.smoothing_operator, P.shape[1],
            coarse.grid.cell_m, self.kappa_damp, self.kappa_smooth,
            bounds=None if self.bounds is None else _block_bounds(self.bounds, P),
        )


@dataclass(frozen=True)
class _Choice:
    """The regularisation weight chosen and the solve at it."""

    lam: float
    sol: _Solve
    method: str
    note: str
    slope: float = 1.0  # d log chi^2 / d log lambda near the choice


def _block_bounds(bounds, P):
    """Bounds of the coarse cells: the mean of their fine cells' bounds."""
    count = np.asarray(P.sum(axis=0)).ravel()
    return tuple(np.asarray(P.T @ b).ravel() / np.maximum(count, 1) for b in bounds)


def _slowness_change_bounds(problem: InverseProblem):
    """Lower and upper slowness change of each ground cell about the reference
    that keep it inside the band; None when the band is applied by clipping."""
    if not problem.options.bounds_in_solve:
        return None
    s_min, s_max = problem.slowness_bounds_ns_per_m
    reference = problem.reference_slowness_ns_per_m[problem.ground_columns]
    return s_min - reference, s_max - reference


def _weighted_blocks(problem: InverseProblem, operator_ground) -> sp.csr_matrix:
    """``W [G_g C]`` (``W [G_g]`` without time-zero terms)."""
    blocks = [operator_ground] if problem.options.time_zero == "none" else [operator_ground,
                                                                            problem.time_zero_columns]
    return (sp.diags(problem.weight) @ sp.hstack(blocks)).tocsr()


def _scaled_levels(problem: InverseProblem, G: sp.csr_matrix) -> _Levels:
    """Column scaling, the normalisations shared by both grid levels (see
    :class:`_ScaledProblem`) and the time-zeros that start every solve."""
    ground_cols = problem.ground_columns
    n_slowness = ground_cols.size
    residual_ref = problem.time_ns - G @ problem.reference_slowness_ns_per_m
    Gg = G[:, ground_cols].tocsr()
    weight = problem.weight
    ground_length = np.asarray(Gg.sum(axis=1)).ravel()
    cell = np.asarray(problem.cell_m, dtype=float)
    ground_volume = n_slowness * float(np.prod(cell))
    kappa_damp = float(np.sqrt(np.sum((weight * ground_length) ** 2) / ground_volume))
    positive_length = ground_length[ground_length > 0]
    ell = float(np.median(positive_length)) if positive_length.size else float(np.mean(cell))
    kappa_smooth = kappa_damp * ell
    if kappa_damp == 0:
        raise ValueError("no ray passes through a ground cell")
    # Time-zeros first, with the reference model held fixed: a small problem
    # (one unknown per node) whose answer starts every solve. Without it LSQR
    # creeps towards large offsets, since a slowness change around a node
    # mimics part of a time-zero term.
    C = problem.time_zero_columns
    if problem.options.time_zero == "none":
        tau_start = np.zeros(0)
    elif problem.options.robust == "none":
        tau_start = estimate_time_zero(C, weight, residual_ref)
    else:
        tau_start = robust_time_zero(C, weight, residual_ref, loss="huber")[0]
    bounds = _slowness_change_bounds(problem)
    fine = _ScaledProblem(_weighted_blocks(problem, Gg), weight * residual_ref, problem.smoothing_operator,
                          n_slowness, cell, kappa_damp, kappa_smooth, bounds=bounds)
    if problem.options.regularisation == "compact" and problem.focusing_slowness_ns_per_m is not None:
        # the first weights come from the model given (a bent-ray step's current model)
        change = (problem.focusing_slowness_ns_per_m - problem.reference_slowness_ns_per_m)[ground_cols]
        fine.set_focusing_weights(*fine.focusing_weights(change * fine.scale[:n_slowness],
                                                         problem.focusing_beta_ns_per_m))
    return _Levels(problem=problem, fine=fine, operator_ground=Gg, residual_ref=residual_ref,
                   kappa_damp=kappa_damp, kappa_smooth=kappa_smooth, tau_start=tau_start, bounds=bounds)


def solve_inverse_problem(problem: InverseProblem, operator, *, progress=None) -> InversionResult:
    """Invert the travel times of ``problem`` through ``operator`` for ground
    slowness and node time-zeros.

    Parameters
    ----------
    problem : reconstruct.inverse.problem.InverseProblem
    operator : scipy.sparse matrix, shape (n_picks, n_cells)
        Path lengths in metres of each pick's ray in every cell (air included),
        from any forward model.
    progress : callable, optional
        ``progress(message)`` after each solve.

    Returns
    -------
    InversionResult

    Notes
    -----
    The model is ``t = G s + C tau`` (see the module notes for ``C``). With
    ``W = diag(1 / sigma)``, ``r = t - G s_ref`` and ``S`` the column norms of
    ``A = W [G_g C]``, LSQR solves in ``y = S x``::

        min |A S^-1 y - W r|^2 + lambda_s^2 |k_s D S_g^-1 y_g|^2 + lambda_d^2 |E y|^2

    (details in the class ``_ScaledProblem``), ``lambda_d = damping_ratio *
    lambda_s``. Choosing lambda: a sweep from large to small ``lambda_s``, each
    solve warm-started from the previous one. With sigmas, the discrepancy
    principle: ``chi^2 = N``, found by regula falsi in log-log between the
    bracketing trials. Without, the corner of the L-curve (log residual norm
    against log regularisation norm) at the largest curvature (Hansen, 1992).
    With ``options.bounds_in_solve`` (the default) every solve keeps the
    ground slowness inside the velocity band (:func:`bounded_lsqr`, block
    principal pivoting; Portugal, Judice and Vicente, 1994), so the misfit
    that chooses lambda is that of a model inside the band; otherwise the
    slowness is clipped into the band after the solve.

    With ``options.regularisation == "compact"`` the difference rows and the
    damping rows are then reweighted, each reweighting warm-started from the
    last model, by ``beta / sqrt(v^2 + beta^2)`` (``v`` the cell's gradient or
    anomaly in the last model, ``beta`` = ``problem.focusing_beta_ns_per_m``):
    iteratively reweighted least squares for the minimum gradient support and
    minimum support stabilisers (Portniaguine and Zhdanov, 1999; Last and
    Kubik, 1983). With the discrepancy principle lambda is found again after
    each reweighting.

    With ``options.robust`` set, iteratively reweighted least squares follows
    at the chosen lambda: the data rows are scaled by ``sqrt(w_i)``, with
    ``w_i`` Huber's or Tukey's weight of the residual in sigmas (Tukey after a
    Huber pass), each solve warm-started, until fewer than 1 % of the weights
    change by more than ``options.robust_tolerance``; with the discrepancy principle lambda is found again with chi^2
    counted over the picks whose weight is at least
    ``options.rejection_weight``, and the weights are updated once more.
    The column scaling and the regularisation normalisation stay those of the
    unweighted problem, so lambda keeps its meaning.

    References
    ----------
    .. [1] Paige, C. C. and Saunders, M. A. (1982), LSQR: an algorithm for sparse
       linear equations and sparse least squares, ACM Trans. Math. Softw. 8(1),
       43-71, doi:10.1145/355984.355989.
    .. [2] Hansen, P. C. (1992), Analysis of discrete ill-posed problems by means
       of the L-curve, SIAM Review 34(4), 561-580, doi:10.1137/1034115.
    .. [3] Davis, J. L. and Annan, A. P. (1989), Ground-penetrating radar for
       high-resolution mapping of soil and rock stratigraphy, Geophysical
       Prospecting 37(5), 531-551.
    .. [4] Huber, P. J. (1964), Robust estimation of a location parameter, Annals
       of Mathematical Statistics 35(1), 73-101.
    .. [5] Holland, P. W. and Welsch, R. E. (1977), Robust regression using
       iteratively reweighted least-squares, Communications in Statistics -
       Theory and Methods 6(9), 813-827.
    .. [6] Portniaguine, O. and Zhdanov, M. S. (1999), Focusing geophysical
       inversion images, Geophysics 64(3), 874-887, doi:10.1190/1.1444596.
    .. [7] Last, B. J. and Kubik, K. (1983), Compact gravity inversion,
       Geophysics 48(6), 713-721, doi:10.1190/1.1441501.
    .. [8] Portugal, L. F., Judice, J. J. and Vicente, L. N. (1994), A
       comparison of block pivoting and interior-point algorithms for linear
       least squares problems with nonnegative variables, Mathematics of
       Computation 63(208), 625-643 (cited from memory).
    """
    G = sp.csr_matrix(operator)
    n_picks, n_cells = G.shape
    if problem.n_picks != n_picks:
        raise ValueError("time_ns, tx and rx must have one entry per operator row")
    if problem.ground_flat.shape != (n_cells,):
        raise ValueError("ground_flat and reference slowness must have one entry per cell")
    levels = _scaled_levels(problem, G)
    log = _SolveLog(problem.n_picks, progress)
    if problem.options.smoothing is not None:
        choice = _user_lambda(levels, log)
    else:
        choice = _automatic_lambda(levels, log)
    choice, reweightings = _focusing_pass(levels, choice, log)
    choice, robust = _robust_pass(levels, choice, log)
    result = _assembled_result(problem, G, levels.fine, choice, robust, log.search)
    return dataclasses.replace(result, focusing_reweightings=reweightings)


def _user_lambda(levels: _Levels, log: _SolveLog) -> _Choice:
    options = levels.problem.options
    fine = levels.fine
    lam = float(options.smoothing)
    sol = fine.solve(lam, options.damping_ratio * lam, levels.start(fine.n_slowness) * fine.scale,
                     options.max_iterations, options.tolerance)
    log.record("fine", lam, sol)
    return _Choice(lam, sol, "user", "set by the user")


def _automatic_lambda(levels: _Levels, log: _SolveLog) -> _Choice:
    """Lambda by the discrepancy principle (sigmas given) or the L-curve corner,
    searched on the coarse level when there is one, then on the model grid."""
    problem, fine = levels.problem, levels.fine
    options, coarse, n_picks = problem.options, problem.coarse, problem.n_picks
    target = float(n_picks)
    if coarse is None:
        level_problem, level = fine, "fine"
    else:
        level_problem, level = levels.coarse_problem(), "coarse"
    trials = _sweep(level_problem, options, log,
                    (2.0 if coarse is not None else 1.0) * target if problem.sigma_given else None,
                    level, options.search_tolerance if coarse is not None else options.tolerance,
                    levels.start(level_problem.n_slowness))
    method = "discrepancy" if problem.sigma_given else "l-curve"
    k = _first_trial_choice(trials, method, target, coarse is not None, options.damping_ratio)
    lam, sol = trials[k]
    # near chi^2 = N the log-log slope measured on model grids has been 0.8 to 2;
    # the coarse curve is flatter where it nears its floor
    slope = max(_log_slope(trials, k), 1.0)
    if coarse is not None:
        lam, sol, trials, k = _refine_on_model_grid(levels, level_problem, method, (lam, sol), (trials, k), log)
    if method == "discrepancy":
        choice = _discrepancy_choice(levels, (lam, sol), trials, slope, log)
    else:
        choice = _Choice(lam, sol, method, f"L-curve corner at lambda {lam:.4g} (trial {k + 1} of {len(trials)})",
                         slope)
    if coarse is not None:
        choice = dataclasses.replace(
            choice, note=choice.note + f"; lambda searched on a coarse grid of {coarse.factor}^3-cell blocks, "
                                       "then on the model grid")
    return choice


def _first_trial_choice(trials, method, target, on_coarse, ratio) -> int:
    """Index of the sweep trial the search continues from."""
    if method == "l-curve":
        return _l_curve_choice(trials, ratio)
    chi2s = np.array([t[1].misfit ** 2 for t in trials])
    if not on_coarse:
        below = np.flatnonzero(chi2s <= target)
        # none reaches it: the least misfit (the last trial, unless bounds made it rise again)
        return int(below[0]) if below.size else int(np.argmin(chi2s))
    # chi^2 on the model grid is at or below the coarse grid's (finer cells
    # fit more), so start the model-grid search where the coarse curve
    # reaches 2N, or, if it never does, where it levels off near its floor
    below = np.flatnonzero(chi2s <= 2.0 * target)
    return int(below[0]) if below.size else int(np.flatnonzero(chi2s <= 1.1 * chi2s.min())[0])


def _refine_on_model_grid(levels, level_problem, method, start, sweep, log):
    """Carry the coarse choice to the model grid: one solve there (discrepancy),
    or a new L-curve sweep from there downwards. Returns (lambda, solve, trials, k)."""
    fine, options, coarse = levels.fine, levels.problem.options, levels.problem.coarse
    (lam, start_sol), (trials, k) = start, sweep
    ratio = options.damping_ratio
    x_coarse = start_sol.y / level_problem.scale
    n_c = coarse.prolongation.shape[1]
    x0 = np.concatenate([coarse.prolongation @ x_coarse[:n_c], x_coarse[n_c:]])
    if method == "discrepancy":
        sol = fine.solve(lam, ratio * lam, x0 * fine.scale, options.max_iterations, options.search_tolerance)
        log.record("fine", lam, sol)
        log.say(f"smoothing weight {lam:.4g} on the model grid: chi-square {sol.misfit**2:.5g} "
                f"({sol.iterations} LSQR iterations)")
        return lam, sol, trials, k
    # The coarse curve levels off early (its cells cannot fit small
    # bodies), which moves its corner to larger lambda: trace the
    # L-curve again on the model grid from there downwards.
    fine_lambdas = lam * np.geomspace(10**0.5, 10**-2.5, 7)
    fine_trials = _sweep(fine, options, log, None, "fine", options.tolerance, x0, lambdas=fine_lambdas)
    k = _l_curve_choice(fine_trials, ratio) if len(fine_trials) >= 3 else len(fine_trials) - 1
    lam, sol = fine_trials[k]
    return lam, sol, fine_trials, k


def _discrepancy_choice(levels, start, trials, slope, log) -> _Choice:
    """chi^2 = N by regula falsi from ``(lam, sol)``, the L-curve corner when the
    data cannot be fit to their sigmas, and a polishing solve."""
    fine, options, n_picks = levels.fine, levels.problem.options, levels.problem.n_picks
    ratio = options.damping_ratio
    target = float(n_picks)
    lam, sol, reached = _discrepancy_root(fine, options, start, target, log, "fine", slope=slope)
    fallback = ""
    if not reached and sol.misfit**2 > target:
        # the data cannot be fit to their sigmas (forward-model error, outliers or
        # sigmas too small): rougher models only chase the misfit floor, so
        # take the L-curve corner of the sweep instead of the smallest lambda
        corner = trials[_l_curve_choice(trials, ratio)][0] if len(trials) >= 3 else lam
        if corner > lam:
            lam = corner
            fallback = f"; fell back to the L-curve corner, lambda {lam:.4g}"
    # the search solves stop at the looser search tolerance: polish the last one
    sol = fine.solve(lam, ratio * lam, sol.y, options.max_iterations, options.tolerance)
    log.record("fine", lam, sol)
    log.say(f"final solve at smoothing weight {lam:.4g}: chi-square {sol.misfit**2:.5g} "
            f"({sol.iterations} LSQR iterations)")
    if reached:
        note = f"chi^2 = {sol.misfit**2:.5g} for N = {n_picks} picks"
    else:
        note = (f"chi^2 = N not reached (chi^2 {sol.misfit**2:.5g}, N = {n_picks}) within lambda "
                f"{options.lambda_min:g} to {options.lambda_max:g}; the sigmas may be too small, or "
                "outliers or forward-model error remain" + fallback)
    return _Choice(lam, sol, "discrepancy", note, slope)


def _focusing_pass(levels: _Levels, choice: _Choice, log: _SolveLog) -> tuple[_Choice, int]:
    """The compact regularisation's reweightings at the chosen weight.

    Each reweighting sets the minimum gradient support and minimum support
    weights (:mod:`reconstruct.inverse.regularization`) from the last model and
    solves again, warm-started; with the discrepancy principle the weight is
    found again for chi^2 = N (the reweighted penalty is weaker, so the same
    weight would overfit). Stops when fewer than 1 % of the weights change by
    more than ``_FOCUSING_TOLERANCE`` or after ``options.focusing_iterations``.
    Returns the new choice (its solve polished) and the number of reweightings.
    """
    problem, fine = levels.problem, levels.fine
    options = problem.options
    if options.regularisation != "compact":
        return choice, 0
    beta, ratio, target = problem.focusing_beta_ns_per_m, options.damping_ratio, float(problem.n_picks)
    lam, sol, reached = choice.lam, choice.sol, None
    previous = np.concatenate([fine.focus_rows, fine.focus_damp[:fine.n_slowness]])
    count = 0
    for _ in range(options.focusing_iterations):
        rows, damping = fine.focusing_weights(sol.y, beta)
        new = np.concatenate([rows, damping])
        if count and np.percentile(np.abs(new - previous), 99) < _FOCUSING_TOLERANCE:
            break
        previous = new
        fine.set_focusing_weights(rows, damping)
        sol = fine.solve(lam, ratio * lam, sol.y, options.max_iterations, options.search_tolerance)
        log.record("fine", lam, sol)
        count += 1
        if choice.method == "discrepancy":
            lam, sol, reached = _discrepancy_root(fine, options, (lam, sol), target, log, "fine", slope=choice.slope)
        log.say(f"compact regularisation, reweighting {count}: chi-square {sol.misfit**2:.5g} at smoothing "
                f"weight {lam:.4g} ({sol.iterations} LSQR iterations)")
    sol = fine.solve(lam, ratio * lam, sol.y, options.max_iterations, options.tolerance)
    log.record("fine", lam, sol)
    note = choice.note
    if reached is not None:
        note = (f"chi^2 = {sol.misfit**2:.5g} for N = {problem.n_picks} picks" if reached else
                f"chi^2 = N not reached (chi^2 {sol.misfit**2:.5g}, N = {problem.n_picks}) within lambda "
                f"{options.lambda_min:g} to {options.lambda_max:g} with the compact regularisation")
    note += f"; compact regularisation: {count} reweightings, beta {beta:.3g} ns/m"
    return dataclasses.replace(choice, lam=lam, sol=sol, note=note), count


@dataclass(frozen=True)
class _RobustOutcome:
    weight: np.ndarray | None = None  # final IRLS weight per pick
    scale: float = 1.0
    reweightings: int = 0


def _robust_pass(levels: _Levels, choice: _Choice, log: _SolveLog):
    """IRLS at the chosen lambda (Huber first: Tukey's loss is not convex and
    needs a good start), then, with the discrepancy principle, lambda is
    chosen again with chi^2 counted over the picks that keep their weight.
    Returns the (possibly new) choice and the robust weights."""
    problem, fine = levels.problem, levels.fine
    options, n_picks, exempt = problem.options, problem.n_picks, problem.robust_exempt
    if options.robust == "none":
        return choice, _RobustOutcome()
    lam, sol, note = choice.lam, choice.sol, choice.note
    have_sigma = problem.sigma_given
    sol, omega, scale_used, n_reweightings = _irls(fine, options, lam, sol, "huber", have_sigma, log, exempt)
    if n_reweightings == 0:
        pass  # every weight is 1: the plain solution is the robust one
    elif choice.method == "discrepancy":
        counted = omega >= options.rejection_weight
        lam, sol, reached = _discrepancy_root(fine, options, (lam, sol), float(counted.sum()), log, "fine",
                                              slope=choice.slope)
        sol, omega, scale_used, n = _irls(fine, options, lam, sol, options.robust, have_sigma, log, exempt,
                                         max_reweightings=max(3, options.robust_iterations // 2))
        n_reweightings += n
        counted = omega >= options.rejection_weight
        note = (f"chi^2 = {sol.misfit**2:.5g} over the N = {int(counted.sum())} picks not rejected by the "
                f"robust weights ({n_picks - int(counted.sum())} rejected)"
                + ("" if reached else "; chi^2 = N not reached within the search range"))
    elif options.robust == "tukey":
        sol, omega, scale_used, n = _irls(fine, options, lam, sol, "tukey", have_sigma, log, exempt)
        n_reweightings += n
    if n_reweightings:
        sol = fine.solve(lam, options.damping_ratio * lam, sol.y, options.max_iterations, options.tolerance)
        log.record("fine", lam, sol)
    return (dataclasses.replace(choice, lam=lam, sol=sol, note=note),
            _RobustOutcome(weight=omega, scale=scale_used, reweightings=n_reweightings))


def _assembled_result(problem: InverseProblem, G, fine: _ScaledProblem, choice: _Choice,
                      robust: _RobustOutcome, search: list) -> InversionResult:
    """Physical unknowns from the scaled solution, time-zeros in their gauge,
    slowness clipped into the velocity band, predicted times and the record."""
    options, ground_cols = problem.options, problem.ground_columns
    n_slowness, n_nodes = ground_cols.size, problem.n_nodes
    x = choice.sol.y / fine.scale
    slowness = problem.reference_slowness_ns_per_m.copy()
    slowness[ground_cols] += x[:n_slowness]
    if options.time_zero == "none":
        tau = np.zeros(problem.n_time_zero)
    else:
        tau = x[n_slowness:].copy()
        if options.time_zero in ("clock", "clock_drift"):
            used = np.zeros(n_nodes, dtype=bool)
            used[problem.tx] = True
            used[problem.rx] = True
            # the gauge: a common shift of every clock (and, with drift, a common drift) changes no time
            for block in range(problem.n_time_zero // n_nodes):
                part = tau[block * n_nodes:(block + 1) * n_nodes]
                part[used] -= part[used].mean()
    s_min, s_max = problem.slowness_bounds_ns_per_m
    residual_unclipped = problem.time_ns - (G @ slowness + problem.time_zero_columns @ tau)
    ground_s = slowness[ground_cols]
    # a bounded solve may leave a cell a rounding error past its bound: not clipping
    n_fast = int(np.sum(ground_s < s_min * (1 - 1e-9)))
    n_slow = int(np.sum(ground_s > s_max * (1 + 1e-9)))
    slowness[ground_cols] = np.clip(ground_s, s_min, s_max)

    predicted = G @ slowness + problem.time_zero_columns @ tau
    residual = problem.time_ns - predicted
    chi2 = float(np.sum((residual / problem.sigma_used_ns) ** 2)) if problem.sigma_given else None
    sol, omega = choice.sol, robust.weight
    return InversionResult(
        slowness_ns_per_m=slowness,
        time_zero_ns=tau,
        predicted_ns=predicted,
        residual_ns=residual,
        rms_ns=float(np.sqrt(np.mean(residual**2))),
        chi2=chi2,
        n_picks=problem.n_picks,
        lambda_smooth=float(choice.lam),
        lambda_damp=float(options.damping_ratio * choice.lam),
        lambda_method=choice.method,
        lambda_note=choice.note,
        lambda_search=tuple(search),
        iterations=int(sol.iterations),
        stop_code=int(sol.stop_code),
        stop_reason=_LSQR_REASONS.get(int(sol.stop_code), "unknown"),
        n_clipped_slow=n_slow,
        n_clipped_fast=n_fast,
        robust_loss=options.robust,
        robust_weight=omega,
        rejected=None if omega is None else omega < options.rejection_weight,
        robust_scale=float(robust.scale),
        robust_reweightings=robust.reweightings,
        chi2_before_clipping=(float(np.sum((residual_unclipped / problem.sigma_used_ns) ** 2))
                              if problem.sigma_given else None),
        rms_before_clipping_ns=float(np.sqrt(np.mean(residual_unclipped**2))),
        chi2_after_clipping=chi2,
        rms_after_clipping_ns=float(np.sqrt(np.mean(residual**2))),
        regularisation=options.regularisation,
        focusing_beta_ns_per_m=(problem.focusing_beta_ns_per_m if options.regularisation == "compact" else None),
        bounds_in_solve=bool(options.bounds_in_solve),
    )


def solve_occam_step(problem: InverseProblem, operator, *, lambda_start: float, lambda_floor: float,
                     true_misfit=None, progress=None) -> InversionResult:
    """One linearised step of a nonlinear inversion with the weight chosen by Occam's rule.

    Solves the problem of :func:`solve_inverse_problem` (same column scaling,
    regularisation and model grid) at weights chosen by
    :func:`reconstruct.inverse.occam.occam_weight` in ``[lambda_floor,
    options.lambda_max]``, starting at ``lambda_start``: the largest weight whose
    linearised chi-square reaches ``N`` (phase 2), or, when none does, the weight
    of least linearised chi-square (phase 1). The chi-square is that of the model
    as it will be used, inside the velocity band (kept inside the solve, or
    clipped into it without ``options.bounds_in_solve``): a rough model whose
    fit depends on velocities faster than light is not chosen for its unclipped
    fit. With the compact regularisation the weights of its rows come from
    ``problem.focusing_slowness_ns_per_m`` (the current model of a bent-ray
    step: one reweighting per step). The floor bounds how much rougher
    one step may make the model; the caller's line search on the misfit through
    the nonlinear forward model checks that the step lowers it.

    Needs pick sigmas (the target is ``chi^2 = N``). The trial solves stop at
    ``options.search_tolerance``, the chosen one is polished to ``options.tolerance``;
    the robust pass, if any, follows at the chosen weight.

    ``true_misfit(slowness_ns_per_m, time_zero_ns) -> chi^2``, when given, is the
    misfit through the nonlinear forward model: as in Occam's paper, the weight
    is then chosen on it (the linearised misfit of a rough model can be far below
    what the model delivers), by walks of a factor 10, and the chosen trial is
    returned unpolished (its model is the one whose misfit was measured).

    References
    ----------
    .. [1] Constable, S. C., Parker, R. L. and Constable, C. G. (1987), Occam's
       inversion: a practical algorithm for generating smooth models from
       electromagnetic sounding data, Geophysics 52(3), 289-300.
    """
    if not problem.sigma_given:
        raise ValueError("Occam's weight choice needs pick sigmas (its target is chi^2 = N)")
    G = sp.csr_matrix(operator)
    levels = _scaled_levels(problem, G)
    fine, options = levels.fine, problem.options
    log = _SolveLog(problem.n_picks, progress)
    ratio = options.damping_ratio
    y_start = levels.start(fine.n_slowness) * fine.scale
    target = float(problem.n_picks)

    ground_cols, n_slowness = problem.ground_columns, fine.n_slowness
    s_min, s_max = problem.slowness_bounds_ns_per_m

    def clipped_chi2(sol):
        # chi^2 of the model that will be used: its slowness clipped into the band
        x = sol.y / fine.scale
        slowness = problem.reference_slowness_ns_per_m.copy()
        slowness[ground_cols] = np.clip(slowness[ground_cols] + x[:n_slowness], s_min, s_max)
        tau = x[n_slowness:] if options.time_zero != "none" else np.zeros(problem.n_time_zero)
        residual = problem.time_ns - (G @ slowness + problem.time_zero_columns @ tau)
        return float(np.sum((problem.weight * residual) ** 2))

    def misfit_of(lam, nearest):
        sol = fine.solve(lam, ratio * lam, y_start if nearest is None else nearest.y, options.max_iterations,
                         options.search_tolerance)
        log.record("fine", lam, sol)
        chi2 = clipped_chi2(sol)
        if true_misfit is not None:
            trial = _assembled_result(problem, G, fine, _Choice(lam, sol, "occam", ""), _RobustOutcome(), [])
            linearised, chi2 = chi2, float(true_misfit(trial.slowness_ns_per_m, trial.time_zero_ns))
            log.say(f"smoothing weight {lam:.4g}: chi-square {chi2:.5g} through the forward model "
                    f"(linearised {linearised:.5g}), target {target:.5g}")
        else:
            log.say(f"smoothing weight {lam:.4g}: linearised chi-square {chi2:.5g} with the velocities clipped "
                    f"into the band ({sol.misfit**2:.5g} before), target {target:.5g} "
                    f"({sol.iterations} LSQR iterations)")
        return chi2, sol

    floor = float(np.clip(lambda_floor, options.lambda_min, options.lambda_max))
    # linearised: steps of half a decade (three trials between the previous weight
    # and its tenth); through the forward model, a decade (each trial costs a forward run)
    occam = occam_weight(misfit_of, floor, options.lambda_max, target, start=lambda_start,
                         factor=10.0 if true_misfit is not None else 10**0.5,
                         log10_tolerance=0.25 if true_misfit is not None else 0.05)
    lam = occam.lambda_smooth
    if true_misfit is None:
        sol = fine.solve(lam, ratio * lam, occam.payload.y, options.max_iterations, options.tolerance)
        log.record("fine", lam, sol)
    else:
        sol = occam.payload
    kind = "linearised" if true_misfit is None else "forward-model"
    if occam.reached:
        note = (f"Occam phase 2: the largest weight whose {kind} chi^2 reaches N = {problem.n_picks} "
                f"(chi^2 {occam.chi2:.5g})")
    else:
        note = (f"Occam phase 1: chi^2 = N not reached within lambda {floor:.3g} to {options.lambda_max:g}; "
                f"the weight of least {kind} chi^2 ({occam.chi2:.5g}, N = {problem.n_picks}) among "
                f"{len(occam.trials)} tried")
    focused = options.regularisation == "compact" and problem.focusing_slowness_ns_per_m is not None
    note += (f"; compact regularisation reweighted once from the current model, beta "
             f"{problem.focusing_beta_ns_per_m:.3g} ns/m") if focused else ""
    choice, robust = _robust_pass(levels, _Choice(lam, sol, "occam", note), log)
    result = _assembled_result(problem, G, fine, choice, robust, log.search)
    return dataclasses.replace(result, focusing_reweightings=int(focused))
