"""The inverse problem (:mod:`reconstruct.inverse.problem`, built once): regularised least squares (LSQR with Tikhonov
smoothing), node time-zero terms, robust weights, the coarse level used to
choose the regularisation weight, and the straight-ray and bent-ray
iterations that produce a velocity cube.
"""

from reconstruct.inverse.problem import InverseProblem, build_inverse_problem
from reconstruct.inverse.solver import InversionOptions, InversionResult, invert_travel_times, solve_inverse_problem
from reconstruct.inverse.time_zero import TIME_ZERO_MODELS, time_zero_matrix, estimate_time_zero, robust_time_zero
from reconstruct.inverse.robust import ROBUST_LOSSES, robust_weights, robust_scale
from reconstruct.inverse.regularization import first_difference_operator
from reconstruct.inverse.straight import TomographyRun, straight_ray_tomography, run_summary
from reconstruct.inverse.bent import BentOptions, bent_ray_tomography

__all__ = [
    "InversionOptions",
    "InversionResult",
    "invert_travel_times",
    "InverseProblem",
    "build_inverse_problem",
    "solve_inverse_problem",
    "TIME_ZERO_MODELS",
    "time_zero_matrix",
    "estimate_time_zero",
    "robust_time_zero",
    "ROBUST_LOSSES",
    "robust_weights",
    "robust_scale",
    "first_difference_operator",
    "TomographyRun",
    "straight_ray_tomography",
    "run_summary",
    "BentOptions",
    "bent_ray_tomography",
]
