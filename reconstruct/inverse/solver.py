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

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import LinearOperator, lsqr

from reconstruct.inverse.robust import ROBUST_LOSSES, robust_scale, robust_weights
from reconstruct.inverse.time_zero import TIME_ZERO_MODELS, estimate_time_zero, robust_time_zero, time_zero_matrix
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS

__all__ = [
    "InversionOptions",
    "InversionResult",
    "invert_travel_times",
]

#: Damping of the time-zero unknowns relative to their data weight: small, so
#: that the offsets are set by the data, but enough to fix the gauge of "clock".
_TIME_ZERO_DAMPING = 1e-3


@dataclass(frozen=True)
class InversionOptions:
    """Settings of one regularised inversion.

    Parameters
    ----------
    velocity_min_m_per_ns, velocity_max_m_per_ns : float
        Physical band; slowness is clipped into it after each solve.
        Defaults 0.03 and 0.30 m/ns span water to air (Davis and Annan, 1989).
    horizontal_weight, vertical_weight : float
        Relative roughness weights along x/y and z.
    smoothing : float or None
        Smoothing weight ``lambda_s`` in the column-scaled system. None chooses it
        (discrepancy principle when pick sigmas are given, else the L-curve corner).
    damping_ratio : float
        ``lambda_d / lambda_s``: damping towards the reference model.
    time_zero : {"clock", "delay", "none"}
        Time-zero model per node (see module notes).
    lambda_min, lambda_max, n_lambda : float, float, int
        Search range and number of trial values of ``lambda_s``.
    max_iterations : int
        LSQR iteration limit per solve.
    tolerance : float
        LSQR ``atol`` and ``btol`` of the final solve on the model grid. On the
        demo quarry 1e-4 left velocities within 0.7 % of a solve to 1e-7.
    search_tolerance : float
        LSQR ``atol`` and ``btol`` of the trial solves on the coarse grid.
    default_sigma_ns : float
        Pick uncertainty assumed when the pick table has no ``sigma_ns``; it then
        sets the weights only, and chi-square is not used to choose lambda.
    robust : {"none", "huber", "tukey"}
        Iteratively reweighted least squares against gross pick errors
        (:mod:`reconstruct.inverse.robust`); "none" is plain least squares.
        The processing (:mod:`reconstruct.pipeline`, the commands, the demo)
        sets it by one rule, :func:`reconstruct.pipeline.robust_rule`: Huber
        with straight rays, none with bent rays.
    robust_iterations : int
        Largest number of reweightings per IRLS pass.
    robust_tolerance : float
        IRLS stops when fewer than 1 % of the robust weights change by more than this.
    rejection_weight : float
        Picks whose final robust weight is below this are reported as rejected
        and left out of the chi-square that chooses lambda.
    """

    velocity_min_m_per_ns: float = 0.03
    velocity_max_m_per_ns: float = 0.30
    horizontal_weight: float = 1.0
    vertical_weight: float = 1.0
    smoothing: float | None = None
    damping_ratio: float = 0.1
    time_zero: str = "clock"
    lambda_min: float = 1e-5
    lambda_max: float = 1e1
    n_lambda: int = 13
    max_iterations: int = 400
    tolerance: float = 1e-4
    search_tolerance: float = 1e-3
    default_sigma_ns: float = 1.0
    robust: str = "none"
    robust_iterations: int = 8
    robust_tolerance: float = 0.02
    rejection_weight: float = 0.1

    def __post_init__(self):
        problems = []
        if not 0 < self.velocity_min_m_per_ns < self.velocity_max_m_per_ns:
            problems.append(
                "velocity band must satisfy 0 < min < max "
                f"(got {self.velocity_min_m_per_ns} to {self.velocity_max_m_per_ns} m/ns)"
            )
        if self.velocity_max_m_per_ns > 0.30:
            problems.append(
                f"velocity_max_m_per_ns {self.velocity_max_m_per_ns} is faster than light "
                f"({AIR_VELOCITY_M_PER_NS:.4f} m/ns); use at most 0.30"
            )
        if self.horizontal_weight < 0 or self.vertical_weight < 0:
            problems.append("smoothing weights must be >= 0")
        if self.smoothing is not None and not self.smoothing > 0:
            problems.append(f"smoothing must be > 0 (got {self.smoothing})")
        if not self.damping_ratio >= 0:
            problems.append(f"damping_ratio must be >= 0 (got {self.damping_ratio})")
        if self.time_zero not in TIME_ZERO_MODELS:
            problems.append(
                f"time_zero must be one of {', '.join(TIME_ZERO_MODELS)} (got {self.time_zero!r})"
            )
        if not 0 < self.lambda_min < self.lambda_max or self.n_lambda < 3:
            problems.append("need 0 < lambda_min < lambda_max and n_lambda >= 3")
        if self.max_iterations < 1 or not self.tolerance > 0 or not self.search_tolerance > 0:
            problems.append("max_iterations must be >= 1 and tolerance > 0")
        if not self.default_sigma_ns > 0:
            problems.append("default_sigma_ns must be > 0")
        if self.robust not in ROBUST_LOSSES:
            problems.append(f"robust must be one of {', '.join(ROBUST_LOSSES)} (got {self.robust!r})")
        if not 0 < self.robust_tolerance < 1:
            problems.append(f"robust_tolerance must be between 0 and 1 (got {self.robust_tolerance})")
        if self.robust_iterations < 1:
            problems.append(f"robust_iterations must be >= 1 (got {self.robust_iterations})")
        if not 0 < self.rejection_weight < 1:
            problems.append(f"rejection_weight must be between 0 and 1 (got {self.rejection_weight})")
        if problems:
            from reconstruct.errors import InputError

            raise InputError(problems, source="inversion options")


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


class _ScaledProblem:
    """The column-scaled, regularised system solved by LSQR.

    ::

        [ A S^-1                 ]       [ W r ]
        [ lambda_s k_s D S_g^-1  ] y  ~  [  0  ]
        [ lambda_d E             ]       [  0  ]

    ``A = W [G_g C]``; ``S`` holds the column norms of ``A`` (floored at a tenth of
    their median, per block) and ``x = S^-1 y`` the physical unknowns (slowness
    change in ns/m, then time-zeros in ns). ``D`` is the first-difference
    operator weighted so that ``|D ds|^2`` approximates the integral of
    ``|grad ds|^2`` over the ground; ``E`` is diagonal: ``k_d sqrt(V_cell) / S_j``
    on slowness columns, so that ``|E y|^2`` approximates ``k_d^2`` times the
    integral of ``ds^2``, and 1 on time-zero columns (damping relative to
    their data weight).

    The normalisations ``k_d^2 = sum_i (w_i L_i)^2 / V_ground`` (the data's
    sensitivity to a uniform slowness change per unit volume; ``L_i`` the
    ground path length of ray ``i``) and ``k_s = k_d * ell`` (``ell`` the median
    ray length) depend on the rays and the ground volume but not on the cell
    size, so ``lambda`` means the same on a coarse and a fine grid.
    """

    def __init__(self, A, b, D, n_slowness, cell_m, kappa_damp, kappa_smooth):
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
        self.DT = self.D.T.tocsr()
        # time-zeros are damped only enough to make the problem well posed
        # (weights relative to their unit-norm columns, independent of lambda)
        self.damp_diag = np.concatenate(
            [kappa_damp * np.sqrt(volume) / scale[:n_slowness], np.zeros(self.n - n_slowness)]
        )
        self.fixed_damp = np.concatenate([np.zeros(n_slowness), np.full(self.n - n_slowness, _TIME_ZERO_DAMPING)])
        self.b0 = np.asarray(b, dtype=float)
        self.set_row_weights(None)

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

    def operator(self, lambda_smooth: float, lambda_damp: float) -> LinearOperator:
        m, n, ns = self.A.shape[0], self.n, self.n_slowness
        nd = self.D.shape[0]
        damp = lambda_damp * self.damp_diag + self.fixed_damp

        sw = self.row_sqrt_w

        def matvec(y):
            y = np.ravel(y)
            data = self.A @ y
            if sw is not None:
                data *= sw
            return np.concatenate([data, lambda_smooth * (self.D @ y[:ns]), damp * y])

        def rmatvec(u):
            u = np.ravel(u)
            out = self.AT @ (u[:m] if sw is None else sw * u[:m])
            out[:ns] += lambda_smooth * (self.DT @ u[m:m + nd])
            out += damp * u[m + nd:]
            return out

        return LinearOperator((m + nd + n, n), matvec=matvec, rmatvec=rmatvec, dtype=float)

    def stacked(self, lambda_smooth: float, lambda_damp: float):
        """Explicit stacked matrix and right-hand side (for checks on small problems)."""
        ns = self.n_slowness
        D_full = sp.hstack([self.D, sp.csr_matrix((self.D.shape[0], self.n - ns))])
        A = self.A if self.row_sqrt_w is None else sp.diags(self.row_sqrt_w) @ self.A
        M = sp.vstack(
            [A, lambda_smooth * D_full, sp.diags(lambda_damp * self.damp_diag + self.fixed_damp)]
        ).tocsr()
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0] + self.n)])
        return M, rhs

    def solve(self, lambda_smooth, lambda_damp, y0, max_iterations, tolerance) -> _Solve:
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0] + self.n)])
        out = lsqr(
            self.operator(lambda_smooth, lambda_damp),
            rhs,
            atol=tolerance,
            btol=tolerance,
            iter_lim=max_iterations,
            x0=y0,
        )
        y = out[0]
        return _Solve(
            y=y,
            stop_code=int(out[1]),
            iterations=int(out[2]),
            misfit=float(np.linalg.norm(self.data_residual(y)[self.counted])),
            roughness=float(np.linalg.norm(self.D @ y[: self.n_slowness])),
            size=float(np.linalg.norm(self.damp_diag * y)),
        )


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


#: The grid levels of the weight search, in words.
_GRID_WORDS = {"coarse": "coarse grid", "fine": "model grid"}


def _record(search, level, lam, sol, n_picks):
    search.append(dict(level=level, lambda_smooth=float(lam), chi2=sol.misfit**2,
                       rms_weighted=sol.misfit / np.sqrt(n_picks),
                       roughness=sol.roughness, iterations=sol.iterations))


def _sweep(problem, options, n_picks, stop_below, progress, level, search, tolerance, x_start, lambdas=None):
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
        _record(search, level, lam, sol, n_picks)
        if progress:
            progress(f"smoothing weight, trial {k + 1} of up to {lambdas.size} on the {_GRID_WORDS[level]}: "
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


def _discrepancy_root(problem, options, start, target, progress, level, search, n_picks, *,
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
        _record(search, level, lam, sol, n_picks)
        g = g_of(sol)
        if progress:
            progress(f"smoothing weight {lam:.4g} on the {_GRID_WORDS[level]}: chi-square {sol.misfit**2:.5g}, "
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
            elif g > 0 and log_lam <= np.log(options.lambda_min) - 1e-9:
                return lam, sol, False  # cannot fit to chi^2 = N inside the search range
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


def _irls(problem, options, lam, sol, loss, trust_sigma, progress, search, n_picks, exempt=None,
          max_reweightings=None):
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
        _record(search, "fine", lam, sol, n_picks)
        if progress:
            progress(f"robust weighting ({loss}), pass {count}: {int(np.sum(omega < options.rejection_weight))} "
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
    The slowness is then clipped into the velocity band.

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
    """
    G = sp.csr_matrix(operator)
    t = np.asarray(time_ns, dtype=float)
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    ground_flat = np.asarray(ground_flat, dtype=bool)
    s_ref = np.asarray(reference_slowness_ns_per_m, dtype=float)
    n_picks, n_cells = G.shape
    if t.shape != (n_picks,) or tx.shape != (n_picks,) or rx.shape != (n_picks,):
        raise ValueError("time_ns, tx and rx must have one entry per operator row")
    if ground_flat.shape != (n_cells,) or s_ref.shape != (n_cells,):
        raise ValueError("ground_flat and reference slowness must have one entry per cell")
    if not np.all(np.isfinite(t)):
        raise ValueError("time_ns holds NaN or infinite values")
    if n_picks == 0:
        raise ValueError("no picks to invert")
    if np.any((tx < 0) | (tx >= n_nodes) | (rx < 0) | (rx >= n_nodes)):
        raise ValueError(f"tx and rx must be node numbers from 0 to {n_nodes - 1}")
    exempt = None
    if robust_exempt is not None:
        exempt = np.asarray(robust_exempt, dtype=bool)
        if exempt.shape != (n_picks,):
            raise ValueError("robust_exempt must have one entry per pick")
    if sigma_ns is None:
        sigma = np.full(n_picks, options.default_sigma_ns)
        have_sigma = False
    else:
        sigma = np.asarray(sigma_ns, dtype=float)
        if sigma.shape != (n_picks,) or not np.all(sigma > 0):
            raise ValueError("sigma_ns must be positive, one per pick")
        have_sigma = True
    weight = 1.0 / sigma

    ground_cols = np.flatnonzero(ground_flat)
    n_slowness = ground_cols.size
    if n_slowness == 0:
        raise ValueError("no ground cells: nothing to invert")
    if smoothing_operator.shape[1] != n_slowness:
        raise ValueError(
            f"smoothing_operator has {smoothing_operator.shape[1]} columns, "
            f"expected one per ground cell ({n_slowness})"
        )
    residual_ref = t - G @ s_ref
    Gg = G[:, ground_cols].tocsr()
    C = time_zero_matrix(tx, rx, n_nodes, options.time_zero)
    weighted = sp.diags(weight)

    def assemble(G_ground):
        blocks = [G_ground] if options.time_zero == "none" else [G_ground, C]
        return (weighted @ sp.hstack(blocks)).tocsr()

    # normalisations shared by every grid level (see _ScaledProblem)
    ground_length = np.asarray(Gg.sum(axis=1)).ravel()
    cell = np.asarray(cell_m, dtype=float)
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
    if options.time_zero == "none":
        tau_start = np.zeros(0)
    elif options.robust == "none":
        tau_start = estimate_time_zero(C, weight, residual_ref)
    else:
        tau_start = robust_time_zero(C, weight, residual_ref, loss="huber")[0]

    def start(n_cells_level):
        return np.concatenate([np.zeros(n_cells_level), tau_start])

    fine = _ScaledProblem(assemble(Gg), weight * residual_ref, smoothing_operator, n_slowness,
                          cell, kappa_damp, kappa_smooth)
    ratio = options.damping_ratio
    target = float(n_picks)
    search: list = []
    slope = 1.0
    if options.smoothing is not None:
        lam = float(options.smoothing)
        sol = fine.solve(lam, ratio * lam, start(n_slowness) * fine.scale, options.max_iterations,
                         options.tolerance)
        _record(search, "fine", lam, sol, n_picks)
        method, note = "user", "set by the user"
    else:
        if coarse is None:
            level_problem, level = fine, "fine"
        else:
            level = "coarse"
            P = coarse.prolongation
            level_problem = _ScaledProblem(
                assemble((Gg @ P).tocsr()), weight * residual_ref, coarse.smoothing_operator,
                P.shape[1], coarse.grid.cell_m, kappa_damp, kappa_smooth,
            )
        trials = _sweep(level_problem, options, n_picks,
                        (2.0 if coarse is not None else 1.0) * target if have_sigma else None, progress,
                        level, search, options.search_tolerance if coarse is not None else options.tolerance,
                        start(level_problem.n_slowness))
        chi2s = np.array([t[1].misfit ** 2 for t in trials])
        if have_sigma:
            method = "discrepancy"
            # chi^2 on the model grid is at or below the coarse grid's (finer cells
            # fit more), so start the model-grid search where the coarse curve
            # reaches 2N, or, if it never does, where it levels off near its floor
            below = np.flatnonzero(chi2s <= 2.0 * target)
            k = int(below[0]) if below.size else int(np.flatnonzero(chi2s <= 1.1 * chi2s.min())[0])
            if coarse is None:
                below = np.flatnonzero(chi2s <= target)
                k = int(below[0]) if below.size else len(trials) - 1
        else:
            method = "l-curve"
            k = _l_curve_choice(trials, ratio)
        lam, start_sol = trials[k]
        # near chi^2 = N the log-log slope measured on model grids has been 0.8 to 2;
        # the coarse curve is flatter where it nears its floor
        slope = max(_log_slope(trials, k), 1.0)
        if coarse is not None:
            x_coarse = start_sol.y / level_problem.scale
            n_c = coarse.prolongation.shape[1]
            x0 = np.concatenate([coarse.prolongation @ x_coarse[:n_c], x_coarse[n_c:]])
            if method == "discrepancy":
                sol = fine.solve(lam, ratio * lam, x0 * fine.scale, options.max_iterations,
                                 options.search_tolerance)
                _record(search, "fine", lam, sol, n_picks)
                if progress:
                    progress(f"smoothing weight {lam:.4g} on the model grid: chi-square {sol.misfit**2:.5g} "
                             f"({sol.iterations} LSQR iterations)")
            else:
                # The coarse curve levels off early (its cells cannot fit small
                # bodies), which moves its corner to larger lambda: trace the
                # L-curve again on the model grid from there downwards.
                fine_lambdas = lam * np.geomspace(10**0.5, 10**-2.5, 7)
                fine_trials = _sweep(fine, options, n_picks, None, progress, "fine", search,
                                     options.tolerance, x0, lambdas=fine_lambdas)
                k = _l_curve_choice(fine_trials, ratio) if len(fine_trials) >= 3 else len(fine_trials) - 1
                lam, sol = fine_trials[k]
                trials = fine_trials
        else:
            sol = start_sol
        if method == "discrepancy":
            lam, sol, reached = _discrepancy_root(fine, options, (lam, sol), target, progress, "fine",
                                                  search, n_picks, slope=slope)
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
            _record(search, "fine", lam, sol, n_picks)
            if progress:
                progress(f"final solve at smoothing weight {lam:.4g}: chi-square {sol.misfit**2:.5g} "
                         f"({sol.iterations} LSQR iterations)")
            if reached:
                note = f"chi^2 = {sol.misfit**2:.5g} for N = {n_picks} picks"
            else:
                note = (f"chi^2 = N not reached (chi^2 {sol.misfit**2:.5g}, N = {n_picks}) within lambda "
                        f"{options.lambda_min:g} to {options.lambda_max:g}; the sigmas may be too small, or "
                        "outliers or forward-model error remain" + fallback)
        else:
            note = f"L-curve corner at lambda {lam:.4g} (trial {k + 1} of {len(trials)})"
        if coarse is not None:
            note += f"; lambda searched on a coarse grid of {coarse.factor}^3-cell blocks, then on the model grid"

    omega = None
    scale_used = 1.0
    n_reweightings = 0
    if options.robust != "none":
        # IRLS at the chosen lambda (Huber first: Tukey's loss is not convex and
        # needs a good start), then, with the discrepancy principle, lambda is
        # chosen again with chi^2 counted over the picks that keep their weight.
        sol, omega, scale_used, n = _irls(fine, options, lam, sol, "huber", have_sigma, progress, search,
                                         n_picks, exempt)
        n_reweightings += n
        if n == 0:
            pass  # every weight is 1: the plain solution is the robust one
        elif method == "discrepancy":
            counted = omega >= options.rejection_weight
            lam, sol, reached = _discrepancy_root(fine, options, (lam, sol), float(counted.sum()), progress,
                                                  "fine", search, n_picks, slope=slope)
            sol, omega, scale_used, n = _irls(fine, options, lam, sol, options.robust, have_sigma, progress,
                                             search, n_picks, exempt,
                                             max_reweightings=max(3, options.robust_iterations // 2))
            n_reweightings += n
            counted = omega >= options.rejection_weight
            note = (f"chi^2 = {sol.misfit**2:.5g} over the N = {int(counted.sum())} picks not rejected by the "
                    f"robust weights ({n_picks - int(counted.sum())} rejected)"
                    + ("" if reached else "; chi^2 = N not reached within the search range"))
        elif options.robust == "tukey":
            sol, omega, scale_used, n = _irls(fine, options, lam, sol, "tukey", have_sigma, progress, search,
                                             n_picks, exempt)
            n_reweightings += n
        if n_reweightings:
            sol = fine.solve(lam, ratio * lam, sol.y, options.max_iterations, options.tolerance)
            _record(search, "fine", lam, sol, n_picks)

    x = sol.y / fine.scale
    slowness = s_ref.copy()
    slowness[ground_cols] += x[:n_slowness]
    if options.time_zero == "none":
        tau = np.zeros(n_nodes)
    else:
        tau = x[n_slowness:].copy()
        if options.time_zero == "clock":
            used = np.zeros(n_nodes, dtype=bool)
            used[tx] = True
            used[rx] = True
            tau[used] -= tau[used].mean()  # the gauge: a common shift changes no time
    # 0.30 m/ns is the customary round figure; nothing travels faster than c
    s_min = 1.0 / min(options.velocity_max_m_per_ns, AIR_VELOCITY_M_PER_NS)
    s_max = 1.0 / options.velocity_min_m_per_ns
    ground_s = slowness[ground_cols]
    n_fast = int(np.sum(ground_s < s_min))
    n_slow = int(np.sum(ground_s > s_max))
    slowness[ground_cols] = np.clip(ground_s, s_min, s_max)

    predicted = G @ slowness + C @ tau
    residual = t - predicted
    chi2 = float(np.sum((residual / sigma) ** 2)) if have_sigma else None
    return InversionResult(
        slowness_ns_per_m=slowness,
        time_zero_ns=tau,
        predicted_ns=predicted,
        residual_ns=residual,
        rms_ns=float(np.sqrt(np.mean(residual**2))),
        chi2=chi2,
        n_picks=n_picks,
        lambda_smooth=float(lam),
        lambda_damp=float(ratio * lam),
        lambda_method=method,
        lambda_note=note,
        lambda_search=tuple(search),
        iterations=int(sol.iterations),
        stop_code=int(sol.stop_code),
        stop_reason=_LSQR_REASONS.get(int(sol.stop_code), "unknown"),
        n_clipped_slow=n_slow,
        n_clipped_fast=n_fast,
        robust_loss=options.robust,
        robust_weight=omega,
        rejected=None if omega is None else omega < options.rejection_weight,
        robust_scale=float(scale_used),
        robust_reweightings=n_reweightings,
    )
