"""Radio: the link budget of each transmitter-receiver pair, the pair graph of
who hears whom, the radio mesh that commands the nodes, and the shot schedule.
"""

from plan.radio.link_budget import LinkBudget, link_budget_for_site, link_range_m, pair_links
from plan.radio.pair_graph import PairGraph, build_pair_graph, pair_graph_summary
from plan.radio.mesh import RadioMesh, build_radio_mesh, mesh_summary
from plan.radio.schedule import Schedule, ScheduleOptions, plan_schedule, schedule_summary

__all__ = [
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
]
