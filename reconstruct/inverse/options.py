"""Settings of one regularised travel-time inversion (:class:`InversionOptions`)."""

from __future__ import annotations

from dataclasses import dataclass

from reconstruct.inverse.robust import ROBUST_LOSSES
from reconstruct.inverse.time_zero import TIME_ZERO_MODELS
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS

__all__ = ["InversionOptions"]


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
