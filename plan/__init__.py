"""voidcube.plan: survey design on top of ``reconstruct``.

Node layouts, the link budget of node pairs, the pair graph, the radio mesh,
the shot schedule, coverage and layout optimisation, and simulating a survey
from a truth model (``plan.recovery`` holds the recovery tests; it loads the
eikonal solver, so it is not imported here).
"""

from .coverage import Coverage, CoverageStandard, compute_coverage
from .layouts import Layout, LayoutOptions, candidate_positions, design_layout
from .link_budget import LinkBudget, link_budget_for_site, link_range_m, pair_links
from .optimise import OptimiseOptions, optimise_layout
from .pair_graph import PairGraph, build_pair_graph, pair_graph_summary
from .radio_mesh import RadioMesh, build_radio_mesh, mesh_summary
from .schedule import Schedule, ScheduleOptions, plan_schedule, schedule_summary
from .simulate import SimulatedSurvey, all_pairs, drop_missed_picks, refined_grid, simulate_picks
from .truth import Body, TruthModel, load_truth, parse_truth, truth_velocity

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
