"""Settings of one regularised travel-time inversion (:class:`InversionOptions`)."""

from __future__ import annotations

from dataclasses import dataclass

from reconstruct.inverse.robust import ROBUST_LOSSES
from reconstruct.forward.anisotropy import axis_from_text
from reconstruct.inverse.time_zero import TIME_ZERO_MODELS
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS

__all__ = ["InversionOptions", "REGULARISATIONS"]

#: The regularisations: Tikhonov first differences, or the focusing (compact)
#: stabilisers reached by iteratively reweighted least squares.
REGULARISATIONS = ("smooth", "compact")


@dataclass(frozen=True)
class InversionOptions:
    """Settings of one regularised inversion.

    Parameters
    ----------
    velocity_min_m_per_ns, velocity_max_m_per_ns : float
        Physical band. With ``bounds_in_solve`` every solve keeps the slowness
        inside it (bounded least squares); otherwise it is clipped into the band
        after each solve. Defaults 0.03 and 0.30 m/ns span water to air (Davis
        and Annan, 1989); the fast end is never above the speed of light.
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
    regularisation : {"smooth", "compact"}
        "smooth": first differences and damping towards the reference
        (Tikhonov). "compact": the same rows reweighted by iteratively
        reweighted least squares towards the minimum gradient support and
        minimum support stabilisers (Portniaguine and Zhdanov, 1999; Last and
        Kubik, 1983), which favour sharp, compact bodies
        (:mod:`reconstruct.inverse.regularization`).
    focusing_fraction : float
        The focusing parameter ``beta`` of the compact regularisation as a
        fraction of the smallest full-contrast anomaly the band allows: the
        smaller of (rock slowness - slowness of the band's fast end) and
        (slowness of the band's slow end - rock slowness), in ns/m. With rock
        at 0.115 m/ns and the default band that is the air-filled void,
        5.4 ns/m, and the default 0.1 gives ``beta`` = 0.54 ns/m.
    focusing_iterations : int
        Largest number of reweightings of the compact regularisation per solve.
    bounds_in_solve : bool
        Keep the slowness inside the band within each solve (bounded least
        squares, :func:`reconstruct.inverse.solver.bounded_lsqr`) instead of
        clipping the solved model afterwards.
    anisotropy_ratio : float
        Elliptical anisotropy of the rock: velocity along the bedding over
        velocity across it (1, the default: isotropic). The cube then holds
        the velocity along the bedding (:mod:`reconstruct.forward.anisotropy`).
    anisotropy_axis : str
        The symmetry axis (normal to the bedding): ``z`` for horizontal beds,
        ``x`` or ``y``, or the beds' ``DIP/DIPDIRECTION`` in degrees (``30/120``).
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
    regularisation: str = "smooth"
    focusing_fraction: float = 0.1
    focusing_iterations: int = 6
    bounds_in_solve: bool = True
    anisotropy_ratio: float = 1.0
    anisotropy_axis: str = "z"

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
        if self.regularisation not in REGULARISATIONS:
            problems.append(f"regularisation must be one of {', '.join(REGULARISATIONS)} "
                            f"(got {self.regularisation!r})")
        if not 0 < self.focusing_fraction <= 1:
            problems.append(f"focusing_fraction must be > 0 and <= 1 (got {self.focusing_fraction})")
        if self.focusing_iterations < 1:
            problems.append(f"focusing_iterations must be >= 1 (got {self.focusing_iterations})")
        if not 0.5 <= self.anisotropy_ratio <= 2.0:
            problems.append(f"anisotropy_ratio must be between 0.5 and 2 (velocity along the bedding over "
                            f"velocity across it; got {self.anisotropy_ratio})")
        try:
            axis_from_text(self.anisotropy_axis)
        except ValueError as error:
            problems.append(f"anisotropy_{error}")
        if problems:
            from reconstruct.errors import InputError

            raise InputError(problems, source="inversion options")
