"""Synthetic surveys: truth models (rock with embedded bodies), simulated
first-arrival picks, and the comparison of found voids with the truth.
"""

from plan.synthetic.truth import (
    Body,
    TruthModel,
    load_truth,
    parse_truth,
    truth_velocity,
)
from plan.synthetic.simulate import (
    SimulatedSurvey,
    all_pairs,
    refined_grid,
    simulate_picks,
    drop_missed_picks,
)
from plan.synthetic.truth_match import TruthMatch, match_truth_bodies

__all__ = [
    "Body",
    "TruthModel",
    "load_truth",
    "parse_truth",
    "truth_velocity",
    "SimulatedSurvey",
    "all_pairs",
    "refined_grid",
    "simulate_picks",
    "drop_missed_picks",
    "TruthMatch",
    "match_truth_bodies",
]
