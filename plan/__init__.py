"""voidcube.plan: survey design on top of ``reconstruct``.

So far: describing a site's model, simulating a survey from a truth model, coverage and
layout optimisation (``plan.recovery`` holds the recovery tests; it loads the eikonal solver).
"""

from .coverage import Coverage, CoverageStandard, compute_coverage
from .optimise import OptimiseOptions, optimise_layout
from .simulate import SimulatedSurvey, all_pairs, refined_grid, simulate_picks
from .truth import Body, TruthModel, load_truth, parse_truth, truth_velocity

__all__ = [
    "SimulatedSurvey",
    "all_pairs",
    "refined_grid",
    "simulate_picks",
    "Body",
    "TruthModel",
    "load_truth",
    "parse_truth",
    "truth_velocity",
    "Coverage",
    "CoverageStandard",
    "compute_coverage",
    "OptimiseOptions",
    "optimise_layout",
]
