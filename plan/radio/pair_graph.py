"""The pair graph: which nodes hear which, by the link budget (networkx).

The graph's vertices are the nodes (node ids, with position, kind and
hole); edges are the heard pairs (margin >= 0 dB, :mod:`plan.radio.link_budget`)
with their margin, length, azimuth and inclination and a flag for pairs whose
first arrival may be the air wave (the straight line runs through air, or the
wave refracted along the surface arrives first). Degree statistics and the
deaf nodes (hearing nobody) come from networkx.
"""

from __future__ import annotations

from dataclasses import dataclass

import networkx as nx
import numpy as np

from reconstruct.errors import InputError
from reconstruct.model.grid import ground_mask
from reconstruct.io.outputs import atomic_path, write_csv_atomic
from reconstruct.model.placement import place_nodes
from reconstruct.io.site import Site
from reconstruct.io.tables import Nodes

from plan.radio.link_budget import (
    LinkBudget,
    PairLinks,
    conductivity_rule_range_m,
    link_range_m,
    range_check,
    rule_of_thumb_range_m,
    site_pair_links,
)

__all__ = ["MAX_NODES", "PairGraph", "check_nodes_in_site", "build_pair_graph", "pair_graph_summary", "write_pairs_csv",
           "write_graphml", "PAIRS_CSV_HEADER"]

#: Largest node table the pair graph takes (about 4.5 million pairs, a few GB of link tables).
MAX_NODES = 3000

#: Columns of ``pairs.csv``.
PAIRS_CSV_HEADER = ("node_a", "node_b", "distance_m", "margin_db", "heard", "spreading_db", "attenuation_db",
                    "pattern_db", "near_surface_db", "crossing_db", "air_length_m", "crossings", "air_wave_first", "air_flag",
                    "azimuth_deg", "inclination_deg")


@dataclass(frozen=True)
class PairGraph:
    """The pair graph with the link table it was built from.

    Attributes
    ----------
    graph : networkx.Graph
        Nodes keyed by node id; edges are heard pairs.
    links : PairLinks
        Every pair ``a < b`` of the node table, heard or not.
    ids : tuple of str
    budget : LinkBudget
    """

    graph: nx.Graph
    links: PairLinks
    ids: tuple[str, ...]
    budget: LinkBudget


def check_nodes_in_site(site: Site, nodes: Nodes) -> None:
    """Refuse nodes outside the model box or far in the air (InputError naming the line).

    Uses :func:`reconstruct.model.placement.place_nodes` for the checks; the
    planner itself keeps the table's positions.
    """
    grid = site.grid()
    place_nodes(nodes, grid, ground_mask(grid, site.ground.elevation_m))


def build_pair_graph(site: Site, nodes: Nodes, budget: LinkBudget, *, progress=None) -> PairGraph:
    """Link budget of every pair of ``nodes`` and the graph of the heard ones.

    Raises
    ------
    InputError
        Nodes outside the model box, borehole ids unknown to the site.
    """
    if len(nodes) > MAX_NODES:
        raise InputError(f"{nodes.source}: {len(nodes)} nodes give {len(nodes) * (len(nodes) - 1) // 2:,} pairs, "
                         f"more than the pair table holds ({MAX_NODES} nodes at most); plan the survey in "
                         "parts of fewer nodes")
    if len(nodes) < 2:
        raise InputError(f"{nodes.source}: {len(nodes)} node; pairs need at least two nodes")
    check_nodes_in_site(site, nodes)
    a, b = np.triu_indices(len(nodes), 1)
    if progress:
        progress(f"link budget of {a.size:,} pairs of {len(nodes)} nodes")
    links = site_pair_links(site, budget, nodes, a, b,
                            progress=(lambda done, total: progress(f"air check: {done:,}/{total:,} pairs"))
                            if progress else None)
    graph = nx.Graph()
    for k, node_id in enumerate(nodes.ids):
        x, y, z = (float(v) for v in nodes.xyz_m[k])
        graph.add_node(node_id, x_m=x, y_m=y, z_m=z, kind=nodes.kinds[k] or "", borehole=nodes.boreholes[k] or "")
    heard = np.flatnonzero(links.heard)
    air = links.air_flag
    graph.add_edges_from(
        (nodes.ids[links.a[i]], nodes.ids[links.b[i]],
         {"margin_db": float(links.margin_db[i]), "length_m": float(links.length_m[i]),
          "azimuth_deg": float(links.azimuth_deg[i]), "inclination_deg": float(links.inclination_deg[i]),
          "air_flag": bool(air[i])})
        for i in heard)
    return PairGraph(graph, links, tuple(nodes.ids), budget)


def pair_graph_summary(pairs: PairGraph) -> dict:
    """Figures of the pair graph for ``pairs_summary.json``.

    Keys: ``nodes``, ``pairs`` (total, heard, heard fraction, heard and
    air-flagged, margin percentiles, median and 95th percentile of the heard
    lengths), ``degree`` (min, mean, median, max, by kind), ``deaf_nodes``,
    ``components``, ``link_budget`` (settings, computed range, rule-of-thumb
    ranges), ``range_check`` (the heard pairs against the rule of thumb
    35 / conductivity, :func:`plan.radio.link_budget.range_check`, with its
    warning).
    """
    g, links, budget = pairs.graph, pairs.links, pairs.budget
    degree = np.array([d for _, d in g.degree()], dtype=float)
    kinds = nx.get_node_attributes(g, "kind")
    by_kind = {}
    for kind in sorted(set(kinds.values())):
        d = np.array([g.degree(n) for n, k in kinds.items() if k == kind], dtype=float)
        by_kind[kind or "unspecified"] = {"nodes": int(d.size), "mean_degree": float(d.mean())}
    heard = links.heard
    margins = links.margin_db[heard]
    lo, hi = rule_of_thumb_range_m(budget.wavelength_m)
    check = range_check(links.length_m, heard, budget.conductivity_ms_per_m)
    rule = conductivity_rule_range_m(budget.conductivity_ms_per_m)
    return {
        "nodes": g.number_of_nodes(),
        "pairs": {
            "total": int(links.a.size),
            "heard": int(heard.sum()),
            "heard_fraction": float(heard.mean()) if heard.size else 0.0,
            "heard_air_flagged": int((heard & links.air_flag).sum()),
            "heard_through_air": int((heard & (links.air_length_m > 0)).sum()),
            "heard_air_wave_first": int((heard & links.air_wave_first).sum()),
            "margin_db_percentiles": ({str(p): float(np.percentile(margins, p)) for p in (5, 50, 95)}
                                      if margins.size else None),
            "longest_heard_m": float(links.length_m[heard].max()) if heard.any() else None,
            "heard_length_m_percentiles": check["heard_length_m_percentiles"],
        },
        "degree": {
            "min": float(degree.min()) if degree.size else 0.0,
            "mean": float(degree.mean()) if degree.size else 0.0,
            "median": float(np.median(degree)) if degree.size else 0.0,
            "max": float(degree.max()) if degree.size else 0.0,
            "by_kind": by_kind,
        },
        "deaf_nodes": sorted(n for n, d in g.degree() if d == 0),
        "components": nx.number_connected_components(g) if g.number_of_nodes() else 0,
        "link_budget": {
            "system_performance_db": budget.system_performance_db,
            "attenuation_db_per_m": budget.attenuation_db_per_m,
            "attenuation_low_loss_db_per_m": budget.attenuation_low_loss_db_per_m,
            "wavelength_m": budget.wavelength_m,
            "interface_loss_db": budget.interface_loss_db,
            "near_surface_loss_db": budget.near_surface_loss_db,
            "refractive_index": budget.refractive_index,
            "velocity_m_per_ns": budget.velocity_m_per_ns,
            "computed_range_m": link_range_m(budget),
            "rule_of_thumb_range_m": [lo, hi],
            "rule_of_thumb_note": "ten to fifteen wavelengths in resistive, low-loss rock "
                                  "(common practice, no published source)",
            "conductivity_rule_range_m": None if rule == float("inf") else rule,
            "antennas": "borehole nodes: short dipoles along the hole (sin^2 pattern); surface and face nodes: "
                        "dipoles on the ground, half-space pattern averaged over azimuth; others isotropic",
        },
        "range_check": {k: v for k, v in check.items() if k != "heard_length_m_percentiles"},
    }


def write_pairs_csv(path, pairs: PairGraph):
    """Write every pair with its link budget as CSV (columns :data:`PAIRS_CSV_HEADER`), atomically."""
    links, ids = pairs.links, pairs.ids
    air = links.air_flag
    heard = links.heard
    return write_csv_atomic(path, PAIRS_CSV_HEADER, (
        [ids[links.a[i]], ids[links.b[i]], f"{links.length_m[i]:.3f}", f"{links.margin_db[i]:.2f}",
         int(heard[i]), f"{links.spreading_db[i]:.2f}", f"{links.attenuation_db[i]:.2f}",
         f"{links.pattern_db[i]:.2f}", f"{links.near_surface_db[i]:.2f}", f"{links.crossing_db[i]:.2f}", f"{links.air_length_m[i]:.3f}",
         int(links.crossings[i]), int(links.air_wave_first[i]), int(air[i]), f"{links.azimuth_deg[i]:.2f}",
         f"{links.inclination_deg[i]:.2f}"]
        for i in range(links.a.size)))


def read_heard_pairs(path, ids):
    """The heard pairs of a ``pairs.csv`` (written by :func:`write_pairs_csv`) as node indices.

    Parameters
    ----------
    path : path of the CSV file
    ids : sequence of str
        Node ids in the order of the node table the indices refer to.

    Returns
    -------
    (ndarray, ndarray)
        The two nodes of every pair with ``heard`` = 1.

    Raises
    ------
    InputError
        Naming the file and line: a missing column, an unknown node id, a
        ``heard`` value other than 0 or 1.
    """
    import csv

    index = {node_id: k for k, node_id in enumerate(ids)}
    a, b = [], []
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            reader = csv.DictReader(handle)
            missing = [c for c in ("node_a", "node_b", "heard") if c not in (reader.fieldnames or [])]
            if missing:
                raise InputError(f"{path}: missing column(s) {', '.join(missing)}; "
                                 "give the pairs.csv written by 'voidcube plan pairs'")
            for line, row in enumerate(reader, start=2):
                if row["heard"] not in ("0", "1"):
                    raise InputError(f"{path}, line {line}: heard must be 0 or 1 (got {row['heard']!r})")
                unknown = [row[c] for c in ("node_a", "node_b") if row[c] not in index]
                if unknown:
                    raise InputError(f"{path}, line {line}: node {unknown[0]!r} is not in the node table; "
                                     "use the node table the pairs were made for")
                if row["heard"] == "1":
                    a.append(index[row["node_a"]])
                    b.append(index[row["node_b"]])
    except OSError as error:
        raise InputError(f"{path}: cannot read the pair table ({error.strerror})") from None
    return np.asarray(a, dtype=np.int64), np.asarray(b, dtype=np.int64)


def write_graphml(path, graph: nx.Graph):
    """Write a networkx graph as GraphML, atomically."""
    with atomic_path(path) as tmp:
        nx.write_graphml(graph, tmp)
    return path
