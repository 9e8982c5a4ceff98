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
from scipy.constants import c as _C_M_PER_S
from scipy.sparse.linalg import LinearOperator, lsqr

__all__ = [
    "InversionOptions",
    "InversionResult",
    "invert_travel_times",
    "time_zero_matrix",
    "AIR_VELOCITY_M_PER_NS",
    "TIME_ZERO_MODELS",
]

#: Velocity of radar waves in air, taken as the speed of light in vacuum.
AIR_VELOCITY_M_PER_NS = _C_M_PER_S * 1e-9
TIME_ZERO_MODELS = ("clock", "delay", "none")


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
        LSQR ``atol`` and ``btol``.
    default_sigma_ns : float
        Pick uncertainty assumed when the pick table has no ``sigma_ns``; it then
        sets the weights only, and chi-square is not used to choose lambda.
    """

    velocity_min_m_per_ns: float = 0.03
    velocity_max_m_per_ns: float = 0.30
    horizontal_weight: float = 1.0
    vertical_weight: float = 1.0
    smoothing: float | None = None
    damping_ratio: float = 0.1
    time_zero: str = "clock"
    lambda_min: float = 1e-2
    lambda_max: float = 1e2
    n_lambda: int = 9
    max_iterations: int = 400
    tolerance: float = 1e-6
    default_sigma_ns: float = 1.0

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
        if self.max_iterations < 1 or not self.tolerance > 0:
            problems.append("max_iterations must be >= 1 and tolerance > 0")
        if not self.default_sigma_ns > 0:
            problems.append("default_sigma_ns must be > 0")
        if problems:
            from .errors import InputError

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


def time_zero_matrix(tx, rx, n_nodes: int, model: str = "clock") -> sp.csr_matrix:
    """Sparse ``(n_picks, n_nodes)`` matrix mapping node time-zeros to picks.

    ``+1`` at the receiver and ``-1`` (clock) or ``+1`` (delay) at the transmitter.
    """
    tx = np.asarray(tx, dtype=np.int64)
    rx = np.asarray(rx, dtype=np.int64)
    n = tx.size
    if model == "none":
        return sp.csr_matrix((n, n_nodes))
    sign_tx = -1.0 if model == "clock" else 1.0
    rows = np.concatenate([np.arange(n), np.arange(n)])
    cols = np.concatenate([rx, tx])
    vals = np.concatenate([np.ones(n), np.full(n, sign_tx)])
    return sp.csr_matrix((vals, (rows, cols)), shape=(n, n_nodes))


class _ScaledProblem:
    """The column-scaled system ``[A S^-1; lambda_s k D S_g^-1; lambda_d I] y = [W r; 0; 0]``.

    ``x = S^-1 y`` are the physical unknowns (slowness change in ns/m, then
    time-zeros in ns). Scaling every column to unit norm (with a floor for
    columns that few rays touch) before regularising makes ``lambda`` mean the
    same on every grid, and preconditions LSQR.
    """

    def __init__(self, A: sp.csr_matrix, b: np.ndarray, D: sp.csr_matrix, n_slowness: int):
        self.n_slowness = n_slowness
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
        typical_slowness_scale = float(np.median(scale[:n_slowness])) if n_slowness else 1.0
        self.D = (D @ sp.diags(typical_slowness_scale / scale[:n_slowness])).tocsr()
        self.DT = self.D.T.tocsr()
        self.b = b
        self.n = A.shape[1]

    def operator(self, lambda_smooth: float) -> LinearOperator:
        m, n, ns = self.A.shape[0], self.n, self.n_slowness
        nd = self.D.shape[0]

        def matvec(y):
            y = np.ravel(y)
            return np.concatenate([self.A @ y, lambda_smooth * (self.D @ y[:ns])])

        def rmatvec(u):
            u = np.ravel(u)
            out = self.AT @ u[:m]
            out[:ns] += lambda_smooth * (self.DT @ u[m:])
            return out

        return LinearOperator((m + nd, n), matvec=matvec, rmatvec=rmatvec, dtype=float)

    def stacked(self, lambda_smooth: float, lambda_damp: float):
        """Explicit stacked matrix and right-hand side (for checks on small problems)."""
        ns = self.n_slowness
        D_full = sp.hstack([self.D, sp.csr_matrix((self.D.shape[0], self.n - ns))])
        M = sp.vstack([self.A, lambda_smooth * D_full, lambda_damp * sp.eye(self.n)]).tocsr()
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0] + self.n)])
        return M, rhs

    def solve(self, lambda_smooth, lambda_damp, y0, max_iterations, tolerance):
        rhs = np.concatenate([self.b, np.zeros(self.D.shape[0])])
        out = lsqr(
            self.operator(lambda_smooth),
            rhs,
            damp=lambda_damp,
            atol=tolerance,
            btol=tolerance,
            iter_lim=max_iterations,
            x0=y0,
        )
        y, istop, itn = out[0], int(out[1]), int(out[2])
        misfit = float(np.linalg.norm(self.A @ y - self.b))
        rough = float(np.linalg.norm(self.D @ y[: self.n_slowness]))
        size = float(np.linalg.norm(y))
        return y, istop, itn, misfit, rough, size


def _l_curve_corner(log_rho: np.ndarray, log_eta: np.ndarray) -> int:
    """Index of largest curvature of the parametric curve (log rho, log eta)."""
    t = np.arange(log_rho.size, dtype=float)
    d_r, d_e = np.gradient(log_rho, t), np.gradient(log_eta, t)
    dd_r, dd_e = np.gradient(d_r, t), np.gradient(d_e, t)
    # the corner of an L-curve traversed from large to small lambda bends with
    # positive signed curvature in this orientation
    kappa = (d_r * dd_e - dd_r * d_e) / np.maximum((d_r**2 + d_e**2) ** 1.5, 1e-300)
    interior = kappa[1:-1]
    return int(np.argmax(np.abs(interior)) + 1) if interior.size else 0


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
    sigma_ns=None,
    options: InversionOptions = InversionOptions(),
    progress=None,
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
        Difference operator over ground cells
        (:func:`reconstruct.regularization.first_difference_operator`).
    sigma_ns : ndarray, shape (n_picks,), optional
        Pick standard deviations; when given lambda is chosen by the discrepancy
        principle, else by the L-curve corner.
    options : InversionOptions
    progress : callable, optional
        ``progress(message)`` after each solve.

    Returns
    -------
    InversionResult

    Notes
    -----
    Solves, with ``W = diag(1 / sigma)`` and ``S`` the column norms of
    ``W [G_g C]`` (floored at a tenth of their median),

    ``min_y |W [G_g C] S^-1 y - W r|^2 + lambda_s^2 |k D S_g^-1 y_g|^2 + lambda_d^2 |y|^2``

    with LSQR, where ``r = t - G s_ref``, ``k`` the median column scale of the
    slowness block and ``x = S^-1 y`` (slowness change, then time-zeros). The
    damping ``lambda_d = damping_ratio * lambda_s`` uses LSQR's own ``damp``.

    Choosing lambda: a sweep from large to small ``lambda_s`` with warm starts.
    With sigmas, the discrepancy principle picks ``chi^2 = N`` (interpolated in
    log-log between the bracketing trials, then solved). Without, the corner of
    the L-curve (log residual norm against log regularisation norm) is the
    point of largest curvature (Hansen, 1992).

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
    if smoothing_operator.shape[1] != n_slowness:
        raise ValueError(
            f"smoothing_operator has {smoothing_operator.shape[1]} columns, "
            f"expected one per ground cell ({n_slowness})"
        )
    residual_ref = t - G @ s_ref
    Gg = G[:, ground_cols]
    C = time_zero_matrix(tx, rx, n_nodes, options.time_zero)
    blocks = [Gg] if options.time_zero == "none" else [Gg, C]
    A = (sp.diags(weight) @ sp.hstack(blocks)).tocsr()
    problem = _ScaledProblem(A, weight * residual_ref, sp.csr_matrix(smoothing_operator), n_slowness)

    def run(lam, y0):
        return problem.solve(
            lam, options.damping_ratio * lam, y0, options.max_iterations, options.tolerance
        )

    search = []
    y0 = np.zeros(problem.n)
    if options.smoothing is not None:
        lam = float(options.smoothing)
        y, istop, itn, misfit, rough, size = run(lam, y0)
        method, note = "user", "set by the user"
        search.append(dict(lambda_smooth=lam, chi2=misfit**2, rms_weighted=misfit / np.sqrt(n_picks),
                           roughness=rough, iterations=itn))
    else:
        lambdas = np.geomspace(options.lambda_max, options.lambda_min, options.n_lambda)
        trials = []
        for k, lam in enumerate(lambdas):
            y, istop, itn, misfit, rough, size = run(lam, y0)
            y0 = y
            trials.append((lam, y, istop, itn, misfit, rough, size))
            search.append(dict(lambda_smooth=float(lam), chi2=misfit**2,
                               rms_weighted=misfit / np.sqrt(n_picks),
                               roughness=rough, iterations=itn))
            if progress:
                progress(f"lambda {k + 1}/{lambdas.size}: {lam:.3g}, "
                         f"weighted misfit^2 {misfit**2:.4g}, {itn} iterations")
        chi2s = np.array([tr[4] ** 2 for tr in trials])
        if have_sigma:
            method = "discrepancy"
            target = float(n_picks)
            if chi2s[-1] > target:
                pick = trials[-1]
                note = (f"chi^2 = N not reached: chi^2 {chi2s[-1]:.4g} > N = {n_picks} even at "
                        f"the smallest lambda; sigmas too small or model error")
                lam, y, istop, itn = pick[0], pick[1], pick[2], pick[3]
            elif chi2s[0] < target:
                pick = trials[0]
                note = (f"chi^2 {chi2s[0]:.4g} < N = {n_picks} at the largest lambda; "
                        "data fit within their sigmas by the smoothest model tried")
                lam, y, istop, itn = pick[0], pick[1], pick[2], pick[3]
            else:
                k = int(np.flatnonzero(chi2s <= target)[0])  # first (largest lambda) below
                # bracket in log lambda with g = log chi2 - log N: g > 0 at hi, g <= 0 at lo;
                # regula falsi with the Illinois step so that both ends move
                hi = [np.log(trials[k - 1][0]), np.log(chi2s[k - 1] / target), trials[k - 1][1]]
                lo = [np.log(trials[k][0]), np.log(chi2s[k] / target), trials[k][1]]
                side = 0
                for _ in range(6):
                    log_lam = lo[0] - lo[1] * (hi[0] - lo[0]) / (hi[1] - lo[1])
                    lam = float(np.exp(log_lam))
                    y, istop, itn, misfit, rough, size = run(lam, lo[2])
                    g = float(np.log(max(misfit**2, 1e-300) / target))
                    search.append(dict(lambda_smooth=lam, chi2=misfit**2,
                                       rms_weighted=misfit / np.sqrt(n_picks),
                                       roughness=rough, iterations=itn))
                    if progress:
                        progress(f"discrepancy step: lambda {lam:.3g}, chi^2 {misfit**2:.4g} (N = {n_picks})")
                    if abs(g) < 0.02:
                        break
                    if g > 0:
                        hi = [log_lam, g, y]
                        if side == +1:
                            lo[1] *= 0.5
                        side = +1
                    else:
                        lo = [log_lam, g, y]
                        if side == -1:
                            hi[1] *= 0.5
                        side = -1
                note = f"chi^2 = {misfit**2:.4g} for N = {n_picks} picks"
        else:
            method = "l-curve"
            log_rho = np.log([tr[4] for tr in trials])
            log_eta = np.log([np.hypot(tr[5], options.damping_ratio * tr[6]) + 1e-300 for tr in trials])
            k = _l_curve_corner(log_rho, log_eta)
            lam, y, istop, itn = trials[k][0], trials[k][1], trials[k][2], trials[k][3]
            note = f"L-curve corner at trial {k + 1} of {len(trials)}"

    x = y / problem.scale
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
        lambda_damp=float(options.damping_ratio * lam),
        lambda_method=method,
        lambda_note=note,
        lambda_search=tuple(search),
        iterations=int(itn),
        stop_code=int(istop),
        stop_reason=_LSQR_REASONS.get(int(istop), "unknown"),
        n_clipped_slow=n_slow,
        n_clipped_fast=n_fast,
    )
