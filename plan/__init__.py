"""voidcube.plan: survey design before fieldwork, built on ``reconstruct``.

Subpackages: ``layout`` (candidate positions, layouts, optimiser), ``radio``
(link budget, pair graph, radio mesh, shot schedule), ``assess`` (coverage,
recovery tests), ``synthetic`` (truth models, simulated picks, comparison
with the truth; for tests and the demo). ``report`` writes the plan report,
``demo`` runs the whole job on a demo site, ``cli`` is the command line.
``plan`` imports ``reconstruct``; ``reconstruct`` never imports ``plan``.
"""

from plan.assess.coverage import Coverage, CoverageStandard, compute_coverage
from plan.layout.layouts import Layout, LayoutOptions, candidate_positions, design_layout
from plan.radio.link_budget import LinkBudget, link_budget_for_site, link_range_m, pair_links
from plan.layout.optimise import OptimiseOptions, optimise_layout
from plan.radio.pair_graph import PairGraph, build_pair_graph, pair_graph_summary
from plan.radio.mesh import RadioMesh, build_radio_mesh, mesh_summary
from plan.radio.schedule import Schedule, ScheduleOptions, plan_schedule, schedule_summary
from plan.synthetic.simulate import (
    SimulatedSurvey,
    all_pairs,
    drop_missed_picks,
    refined_grid,
    simulate_picks,
)
from plan.synthetic.truth import Body, TruthModel, load_truth, parse_truth, truth_velocity

__all__ = [
    "Layout",
    "LayoutOptions",
    "candidate_positions",
    "design_layout",
    "LinkBudget",
    "link_budget_for_site",
    "link_range_m",
    "pair_links",
    "PairGraph",
    "build_pair_graph",
    "pair_graph_summary",
    "RadioMesh",
    "build_radio_mesh",
    "mesh_summary",
    "Schedule",
    "ScheduleOptions",
    "plan_schedule",
    "schedule_summary",
    "drop_missed_picks",
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
