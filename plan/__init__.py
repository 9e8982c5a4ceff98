"""voidcube.plan: survey design on top of ``reconstruct``.

So far: describing a site's model and simulating a survey from a truth model.
"""

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
]
