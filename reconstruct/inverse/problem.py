"""The regularised travel-time inverse problem, assembled once.

Everything the solver needs except the forward operator: the pick times and
their weights ``1 / sigma``, the time-zero columns, the regularisation
operators (first differences on the model grid and, for choosing lambda, on a
coarse grid), the reference model and the velocity bounds. The straight-ray
inversion, the bent-ray iterations and the planner's recovery tests build it
with :func:`build_inverse_problem` and hand it, with the operator of their
forward model, to :func:`reconstruct.inverse.solver.solve_inverse_problem`.
A bent-ray iteration or a recovery test changes only the times
(:meth:`InverseProblem.with_times`).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from reconstruct.inverse.multilevel import CoarseLevel, choose_coarsening_factor, coarse_level
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.inverse.options import InversionOptions
from reconstruct.inverse.time_zero import time_zero_matrix
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.model.grid import Grid

__all__ = ["InverseProblem", "build_inverse_problem", "reference_slowness"]


def reference_slowness(ground: np.ndarray, rock_velocity_m_per_ns: float) -> np.ndarray:
    """Reference model, flat in C order: the rock's slowness in ground cells, ``1 / c`` in air (ns/m)."""
    ground_flat = np.asarray(ground, dtype=bool).ravel()
    return np.where(ground_flat, 1.0 / rock_velocity_m_per_ns, 1.0 / AIR_VELOCITY_M_PER_NS)


@dataclass(frozen=True, eq=False)  # arrays inside: compare fields, not problems
class InverseProblem:
    """Data, weights, time-zero columns, regularisation and bounds of one inversion.

    Construct it with keywords (or with :func:`build_inverse_problem` from a
    grid); the arrays are checked against each other and the derived fields
    (``sigma_used_ns``, ``weight``, ``time_zero_columns``, ``ground_columns``,
    ``slowness_bounds_ns_per_m``) filled in.

    Parameters
    ----------
    time_ns : ndarray, shape (n_picks,)
        Observed first-arrival times in ns.
    tx, rx : ndarray of int, shape (n_picks,)
        Transmitter and receiver node numbers, ``0 <= i < n_nodes``.
    n_nodes : int
    ground_flat : ndarray of bool, shape (n_cells,)
        True for ground cells (unknowns); air cells keep their reference slowness.
    reference_slowness_ns_per_m : ndarray, shape (n_cells,)
        Reference (and starting) model, air cells at ``1 / c``.
    smoothing_operator : scipy.sparse matrix, shape (n_pairs, n_ground)
        :func:`reconstruct.inverse.regularization.first_difference_operator` of the grid.
    cell_m : tuple of 3 float
        Cell size of the grid, metres.
    sigma_ns : ndarray, shape (n_picks,), optional
        Pick standard deviations as given; None: ``options.default_sigma_ns``
        sets the weights and lambda is chosen by the L-curve.
    options : InversionOptions
    coarse : reconstruct.inverse.multilevel.CoarseLevel, optional
        Coarse grid on which lambda is searched (when it is automatic).
    robust_exempt : ndarray of bool, shape (n_picks,), optional
        Picks that keep full weight in the robust reweighting.
    focusing_slowness_ns_per_m : ndarray, shape (n_cells,), optional
        With ``options.regularisation == "compact"``: the model whose anomaly
        sets the first weights of the compact regularisation (a bent-ray step
        passes its current model). None: the first solve is smooth.
    shot_time_s : ndarray, shape (n_picks,), optional
        When each pick's shot was fired (seconds); needed by the
        ``clock_drift`` time-zero model.

    Attributes
    ----------
    sigma_used_ns, weight : ndarray, shape (n_picks,)
        The sigmas used (given or default) and the data weights ``1 / sigma``.
    time_zero_columns : scipy.sparse.csr_matrix, shape (n_picks, n_nodes) or (n_picks, 2 n_nodes)
        :func:`reconstruct.inverse.time_zero.time_zero_matrix` for ``options.time_zero``
        (offsets, then drifts with ``clock_drift``).
    ground_columns : ndarray of int
        Flat cell numbers of the unknowns.
    slowness_bounds_ns_per_m : tuple of 2 float
        Ground slowness is kept inside this band (in the solve, or clipped
        after it; ``options.bounds_in_solve``).
    focusing_beta_ns_per_m : float
        Focusing parameter of the compact regularisation: ``options.focusing_fraction``
        times the smallest full-contrast anomaly the band allows about the
        median reference slowness of the ground (see
        :class:`reconstruct.inverse.options.InversionOptions`).
    """

    time_ns: np.ndarray
    tx: np.ndarray
    rx: np.ndarray
    n_nodes: int
    ground_flat: np.ndarray
    reference_slowness_ns_per_m: np.ndarray
    smoothing_operator: sp.spmatrix
    cell_m: tuple = (1.0, 1.0, 1.0)
    sigma_ns: np.ndarray | None = None
    options: InversionOptions = InversionOptions()
    coarse: CoarseLevel | None = None
    robust_exempt: np.ndarray | None = None
    focusing_slowness_ns_per_m: np.ndarray | None = None
    shot_time_s: np.ndarray | None = None
    sigma_used_ns: np.ndarray = field(init=False, repr=False)
    weight: np.ndarray = field(init=False, repr=False)
    time_zero_columns: sp.csr_matrix = field(init=False, repr=False)
    ground_columns: np.ndarray = field(init=False, repr=False)
    slowness_bounds_ns_per_m: tuple = field(init=False)
    focusing_beta_ns_per_m: float = field(init=False)

    def __post_init__(self):
        arrays = _checked_arrays(self)
        for name, value in arrays.items():
            object.__setattr__(self, name, value)
        n_picks = self.time_ns.size
        if self.sigma_ns is None:
            sigma = np.full(n_picks, self.options.default_sigma_ns)
        else:
            sigma = self.sigma_ns
        object.__setattr__(self, "sigma_used_ns", sigma)
        object.__setattr__(self, "weight", 1.0 / sigma)
        object.__setattr__(self, "time_zero_columns",
                           time_zero_matrix(self.tx, self.rx, self.n_nodes, self.options.time_zero,
                                            self.shot_time_s))
        object.__setattr__(self, "ground_columns", np.flatnonzero(self.ground_flat))
        # 0.30 m/ns is the customary round figure; nothing travels faster than c
        bounds = (1.0 / min(self.options.velocity_max_m_per_ns, AIR_VELOCITY_M_PER_NS),
                  1.0 / self.options.velocity_min_m_per_ns)
        object.__setattr__(self, "slowness_bounds_ns_per_m", bounds)
        rock = float(np.median(self.reference_slowness_ns_per_m[self.ground_columns]))
        contrast = min(rock - bounds[0], bounds[1] - rock)
        if not contrast > 0:
            contrast = bounds[1] - bounds[0]  # reference outside the band: use the band's width
        object.__setattr__(self, "focusing_beta_ns_per_m", self.options.focusing_fraction * contrast)

    @property
    def n_picks(self) -> int:
        return int(self.time_ns.size)

    @property
    def n_time_zero(self) -> int:
        """Number of time-zero unknowns (columns of ``time_zero_columns``)."""
        return int(self.time_zero_columns.shape[1])

    @property
    def sigma_given(self) -> bool:
        """True when the picks carry sigmas (lambda by the discrepancy principle)."""
        return self.sigma_ns is not None

    def with_times(self, time_ns) -> "InverseProblem":
        """The same problem with other pick times (a linearised bent-ray step, a recovery test)."""
        return dataclasses.replace(self, time_ns=time_ns)


def _checked_arrays(problem: InverseProblem) -> dict:
    """The arrays of ``problem`` as numpy arrays of the right type, checked
    against each other; raises ValueError naming the argument."""
    t = np.asarray(problem.time_ns, dtype=float)
    tx = np.asarray(problem.tx, dtype=np.int64)
    rx = np.asarray(problem.rx, dtype=np.int64)
    ground_flat = np.asarray(problem.ground_flat, dtype=bool)
    s_ref = np.asarray(problem.reference_slowness_ns_per_m, dtype=float)
    n_picks = t.size
    if t.ndim != 1 or tx.shape != (n_picks,) or rx.shape != (n_picks,):
        raise ValueError("time_ns, tx and rx must have one entry per operator row")
    if ground_flat.ndim != 1 or s_ref.shape != ground_flat.shape:
        raise ValueError("ground_flat and reference slowness must have one entry per cell")
    if not np.all(np.isfinite(t)):
        raise ValueError("time_ns holds NaN or infinite values")
    if n_picks == 0:
        raise ValueError("no picks to invert")
    n_nodes = problem.n_nodes
    if np.any((tx < 0) | (tx >= n_nodes) | (rx < 0) | (rx >= n_nodes)):
        raise ValueError(f"tx and rx must be node numbers from 0 to {n_nodes - 1}")
    out = dict(time_ns=t, tx=tx, rx=rx, ground_flat=ground_flat, reference_slowness_ns_per_m=s_ref)
    if problem.robust_exempt is not None:
        exempt = np.asarray(problem.robust_exempt, dtype=bool)
        if exempt.shape != (n_picks,):
            raise ValueError("robust_exempt must have one entry per pick")
        out["robust_exempt"] = exempt
    if problem.shot_time_s is not None:
        shot = np.asarray(problem.shot_time_s, dtype=float)
        if shot.shape != (n_picks,) or not np.all(np.isfinite(shot)):
            raise ValueError("shot_time_s must hold one finite time per pick")
        out["shot_time_s"] = shot
    if problem.focusing_slowness_ns_per_m is not None:
        focus = np.asarray(problem.focusing_slowness_ns_per_m, dtype=float)
        if focus.shape != s_ref.shape:
            raise ValueError("focusing_slowness_ns_per_m must have one entry per cell")
        out["focusing_slowness_ns_per_m"] = focus
    if problem.sigma_ns is not None:
        sigma = np.asarray(problem.sigma_ns, dtype=float)
        if sigma.shape != (n_picks,) or not np.all(sigma > 0):
            raise ValueError("sigma_ns must be positive, one per pick")
        out["sigma_ns"] = sigma
    n_slowness = int(ground_flat.sum())
    if n_slowness == 0:
        raise ValueError("no ground cells: nothing to invert")
    if problem.smoothing_operator.shape[1] != n_slowness:
        raise ValueError(
            f"smoothing_operator has {problem.smoothing_operator.shape[1]} columns, "
            f"expected one per ground cell ({n_slowness})"
        )
    return out


def build_inverse_problem(
    grid: Grid,
    ground: np.ndarray,
    rock_velocity_m_per_ns: float,
    time_ns,
    tx,
    rx,
    n_nodes: int,
    *,
    sigma_ns=None,
    options: InversionOptions = InversionOptions(),
    robust_exempt=None,
    shot_time_s=None,
) -> InverseProblem:
    """The inverse problem on a grid: reference model from the rock velocity,
    first differences weighted by ``options``, and, when lambda is automatic and
    the grid has more unknowns than the coarse search allows
    (:func:`reconstruct.inverse.multilevel.choose_coarsening_factor`), the
    coarse level it is searched on.

    Many parameters because each is one array or setting of the picks that
    :class:`InverseProblem` holds (times, nodes, sigmas, shot times, exemptions).

    Parameters
    ----------
    grid : Grid
    ground : ndarray of bool, shape grid.shape
    rock_velocity_m_per_ns : float
        Reference velocity of every ground cell.
    time_ns, tx, rx, n_nodes, sigma_ns, options, robust_exempt, shot_time_s
        See :class:`InverseProblem`.
    """
    ground = np.asarray(ground, dtype=bool)
    smoothing = first_difference_operator(grid, ground, horizontal_weight=options.horizontal_weight,
                                          vertical_weight=options.vertical_weight)
    coarse = None
    factor = choose_coarsening_factor(int(ground.sum()))
    if options.smoothing is None and factor > 1:
        coarse = coarse_level(grid, ground, factor, horizontal_weight=options.horizontal_weight,
                              vertical_weight=options.vertical_weight)
    return InverseProblem(
        time_ns=time_ns, tx=tx, rx=rx, n_nodes=n_nodes, ground_flat=ground.ravel(),
        reference_slowness_ns_per_m=reference_slowness(ground, rock_velocity_m_per_ns),
        smoothing_operator=smoothing, cell_m=grid.cell_m, sigma_ns=sigma_ns, options=options,
        coarse=coarse, robust_exempt=robust_exempt, shot_time_s=shot_time_s,
    )
