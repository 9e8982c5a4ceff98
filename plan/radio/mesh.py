"""The radio mesh that commands the nodes (networkx).

Radios are the gateway (``site.radio.gateway_m``), every node
that is not in a hole, and one collar unit per hole holding nodes (at the
hole's collar). Hole nodes are cabled to their collar unit. Two
radios are linked when they are within ``site.radio.range_m`` of each other
(straight-line distance; terrain shadowing is not modelled, so a link across a
pit edge may be optimistic).

From the graph (networkx):

- whether every node reaches the gateway, and the radio hops to it
  (shortest path, a cable counting 0 hops);
- articulation points: single radios whose loss cuts others off from the
  gateway, with the number of survey nodes each would cut off;
- suggested relays for the parts that cannot reach the gateway: repeatedly
  the part closest to the connected mesh is joined by relays spaced evenly
  on the straight line between its nearest radio and the nearest connected
  radio (``ceil(d / range) - 1`` relays, on the ground surface), avoiding
  exclusion zones where one of the few closest pairs allows it.

References
----------
Hopcroft, J. and Tarjan, R. (1973). Algorithm 447: efficient algorithms for
    graph manipulation. Communications of the ACM, 16(6), 372-378 (the
    articulation points, as computed by :func:`networkx.articulation_points`).
Dijkstra, E. W. (1959). A note on two problems in connexion with graphs.
    Numerische Mathematik, 1, 269-271 (hops to the gateway).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import networkx as nx
import numpy as np
from scipy.spatial import cKDTree

from reconstruct.errors import InputError
from reconstruct.io.site import Site
from reconstruct.io.tables import Nodes

__all__ = ["RadioMesh", "build_radio_mesh", "mesh_summary", "mesh_with_relays"]

_GATEWAY = "gateway"
_COLLAR = "collar:"
_RELAY = "relay:"
_PAIRS_TRIED = 20


@dataclass(frozen=True)
class RadioMesh:
    """The mesh and its analysis.

    Attributes
    ----------
    graph : networkx.Graph
        Stations keyed by id (node ids, ``gateway``, ``collar:<hole>``) with
        ``x_m, y_m, z_m, role`` (``node``, ``gateway``, ``collar``) and
        ``kind``; edges with ``link`` (``radio`` or ``cable``) and ``length_m``.
    gateway : str
        Id of the gateway radio.
    hops : dict
        Radio hops to the gateway per connected radio.
    disconnected : tuple of str
        Survey nodes that cannot reach the gateway.
    articulation : dict
        Station id -> number of survey nodes its loss would cut off.
    relays : tuple of dict
        Suggested relays: ``id``, ``xyz_m``, ``joins`` (the two radios
        bridged), ``exclusion_zone`` (name, when no pair tried avoided one).
    range_m : float
    """

    graph: nx.Graph
    gateway: str
    hops: dict
    disconnected: tuple[str, ...]
    articulation: dict
    relays: tuple[dict, ...]
    range_m: float


def _radio_ids(nodes: Nodes) -> tuple[str, str]:
    taken = set(nodes.ids)
    gateway = _GATEWAY
    while gateway in taken:
        gateway = "_" + gateway
    return gateway, _COLLAR if not any(i.startswith(_COLLAR) for i in taken) else "_" + _COLLAR


def build_radio_mesh(site: Site, nodes: Nodes, *, range_m: float | None = None, gateway_m=None) -> RadioMesh:
    """Build and analyse the radio mesh of ``nodes`` on ``site``.

    Parameters
    ----------
    range_m : float, optional
        Overrides ``site.radio.range_m``.
    gateway_m : sequence of 3 float, optional
        Overrides ``site.radio.gateway_m``.

    Raises
    ------
    InputError
        No gateway position, or a node naming a hole the site does not have.
    """
    range_m = float(site.radio.range_m if range_m is None else range_m)
    if not (math.isfinite(range_m) and range_m > 0):
        raise InputError(f"--radio-range must be a number > 0 in metres (got {range_m!r}); leave it out to "
                         "use radio.range_m of the site")
    gateway_xyz = site.radio.gateway_m if gateway_m is None else tuple(gateway_m)
    if gateway_xyz is None:
        raise InputError(f"{site.source_path or 'site'}: radio.gateway_m is missing; add the gateway position "
                         "[x, y, z] in metres under radio: in the site description")
    gateway, collar_prefix = _radio_ids(nodes)
    holes = {h.id: h for h in site.boreholes}
    g = nx.Graph()
    g.add_node(gateway, x_m=float(gateway_xyz[0]), y_m=float(gateway_xyz[1]), z_m=float(gateway_xyz[2]),
               role="gateway", kind="")
    problems = []
    for k, node_id in enumerate(nodes.ids):
        x, y, z = (float(v) for v in nodes.xyz_m[k])
        g.add_node(node_id, x_m=x, y_m=y, z_m=z, role="node", kind=nodes.kinds[k] or "",
                   borehole=nodes.boreholes[k] or "")
        hole_id = nodes.boreholes[k]
        if hole_id is None:
            continue
        if hole_id not in holes:
            problems.append(f"{nodes.source} line {int(nodes.lines[k])}: node '{node_id}' names borehole "
                            f"'{hole_id}', which is not in the site description; fix the borehole column "
                            "or add the hole to the site")
            continue
        collar = collar_prefix + hole_id
        if collar not in g:
            cx, cy, cz = (float(v) for v in holes[hole_id].collar_m)
            g.add_node(collar, x_m=cx, y_m=cy, z_m=cz, role="collar", kind="", borehole=hole_id)
        g.add_edge(node_id, collar, link="cable", length_m=float(np.linalg.norm(nodes.xyz_m[k] - holes[hole_id].collar_m)),
                   hops=0)
    if problems:
        raise InputError(problems)
    radios = [n for n, d in g.nodes(data=True) if d["role"] != "node" or not d.get("borehole")]
    _link_radios(g, radios, range_m)
    return _analyse(site, g, gateway, range_m)


def _xyz(g: nx.Graph, radios) -> np.ndarray:
    return np.array([[g.nodes[n]["x_m"], g.nodes[n]["y_m"], g.nodes[n]["z_m"]] for n in radios], dtype=float)


def _link_radios(g: nx.Graph, radios, range_m: float) -> None:
    xyz = _xyz(g, radios)
    for i, j in cKDTree(xyz).query_pairs(range_m):
        g.add_edge(radios[i], radios[j], link="radio", length_m=float(np.linalg.norm(xyz[i] - xyz[j])), hops=1)


def _survey_nodes(g: nx.Graph):
    return [n for n, d in g.nodes(data=True) if d["role"] == "node"]


def _analyse(site: Site, g: nx.Graph, gateway: str, range_m: float) -> RadioMesh:
    hops = {n: int(h) for n, h in nx.single_source_dijkstra_path_length(g, gateway, weight="hops").items()}
    reached = set(hops)
    disconnected = tuple(sorted(n for n in _survey_nodes(g) if n not in reached))
    articulation = {}
    connected_part = g.subgraph(reached)
    for radio in nx.articulation_points(connected_part):
        if radio == gateway:
            continue
        rest = connected_part.subgraph(n for n in reached if n != radio)
        still = nx.node_connected_component(rest, gateway)
        articulation[radio] = sum(1 for n in reached if n not in still and n != radio
                                    and g.nodes[n]["role"] == "node")
    relays = _suggest_relays(site, g, gateway, range_m)
    return RadioMesh(g, gateway, hops, disconnected, articulation, tuple(relays), range_m)


def _radios_in(g: nx.Graph, part) -> list:
    return [n for n in part if g.nodes[n]["role"] != "node" or not g.nodes[n].get("borehole")]


def _suggest_relays(site: Site, g: nx.Graph, gateway: str, range_m: float) -> list[dict]:
    """Relays that join every part of the mesh to the gateway's part (see the module notes)."""
    connected = set(nx.node_connected_component(g, gateway))
    parts = [set(c) for c in nx.connected_components(g) if gateway not in c]
    relays = []
    while parts:
        inside = _radios_in(g, connected) + [r["id"] for r in relays]
        inside_xyz = np.concatenate([_xyz(g, _radios_in(g, connected)),
                                     np.array([r["xyz_m"] for r in relays]).reshape(-1, 3)])
        tree = cKDTree(inside_xyz)
        best = None
        for p, part in enumerate(parts):
            radios = _radios_in(g, part)
            if not radios:  # a part without a radio cannot be joined by relays
                continue
            xyz = _xyz(g, radios)
            k = min(_PAIRS_TRIED, len(inside))
            dist, idx = tree.query(xyz, k=k)
            dist, idx = dist.reshape(len(radios), k), idx.reshape(len(radios), k)
            order = np.argsort(dist, axis=None)[:_PAIRS_TRIED]
            candidates = [(float(dist.flat[o]), radios[o // k], int(idx.flat[o]), xyz[o // k]) for o in order]
            if best is None or candidates[0][0] < best[0][0][0]:
                best = (candidates, p)
        if best is None:
            break
        candidates, p = best
        chosen = None
        for distance, radio, target, station_xyz in candidates:
            points = _relay_points(site, station_xyz, inside_xyz[target], distance, range_m)
            zone = _zone_hit(site, points)
            if chosen is None or (chosen[4] is not None and zone is None):
                chosen = (radio, inside[target], points, distance, zone)
            if zone is None:
                break
        radio, target, points, _, zone = chosen
        for point in points:
            relays.append({"id": f"{_RELAY}{len(relays) + 1}", "xyz_m": [float(v) for v in point],
                           "joins": [radio, target], "exclusion_zone": zone})
        connected |= parts.pop(p)
    return relays


def _relay_points(site: Site, a_xyz, b_xyz, distance: float, range_m: float) -> np.ndarray:
    n_relays = max(int(math.ceil(distance / range_m - 1e-9)) - 1, 0)
    t = np.arange(1, n_relays + 1) / (n_relays + 1)
    points = np.asarray(a_xyz)[None, :] + t[:, None] * (np.asarray(b_xyz) - np.asarray(a_xyz))[None, :]
    z = site.ground.elevation_m(points[:, 0], points[:, 1])
    points[:, 2] = np.where(np.isfinite(z), z, points[:, 2])
    return points


def _zone_hit(site: Site, points: np.ndarray) -> str | None:
    for zone in site.exclusion_zones:
        if len(points) and zone.contains(points[:, 0], points[:, 1]).any():
            return zone.name
    return None


def mesh_with_relays(mesh: RadioMesh) -> nx.Graph:
    """The mesh graph plus the suggested relays (``role`` ``relay``, links ``suggested``), for export."""
    g = mesh.graph.copy()
    for n in g.nodes:
        g.nodes[n]["hops"] = mesh.hops.get(n, -1)
        g.nodes[n]["articulation_cuts"] = mesh.articulation.get(n, 0)
    chain = {}
    for relay in mesh.relays:
        x, y, z = relay["xyz_m"]
        g.add_node(relay["id"], x_m=x, y_m=y, z_m=z, role="relay", kind="", hops=-1, articulation_cuts=0)
        chain.setdefault(tuple(relay["joins"]), []).append(relay["id"])
    for (radio, target), ids in chain.items():
        path = [radio, *ids, target]
        for u, v in zip(path[:-1], path[1:]):
            pu, pv = (np.array([g.nodes[n][k] for k in ("x_m", "y_m", "z_m")]) for n in (u, v))
            g.add_edge(u, v, link="suggested", length_m=float(np.linalg.norm(pu - pv)), hops=1)
    return g


def mesh_summary(mesh: RadioMesh) -> dict:
    """Figures of the mesh for ``mesh_summary.json``."""
    g = mesh.graph
    survey = _survey_nodes(g)
    node_hops = [mesh.hops[n] for n in survey if n in mesh.hops]
    roles = nx.get_node_attributes(g, "role")
    return {
        "gateway": {"id": mesh.gateway, "xyz_m": [g.nodes[mesh.gateway][k] for k in ("x_m", "y_m", "z_m")]},
        "range_m": mesh.range_m,
        "radios": {role: sum(1 for r in roles.values() if r == role) for role in ("node", "collar", "gateway")},
        "radio_links": sum(1 for *_, d in g.edges(data=True) if d["link"] == "radio"),
        "cable_links": sum(1 for *_, d in g.edges(data=True) if d["link"] == "cable"),
        "connected": not mesh.disconnected,
        "disconnected_nodes": list(mesh.disconnected),
        "hops": {"max": max(node_hops) if node_hops else None,
                 "mean": float(np.mean(node_hops)) if node_hops else None,
                 "per_node": {n: mesh.hops[n] for n in survey if n in mesh.hops}},
        "articulation_points": [{"radio": s, "nodes_cut_off": c}
                                for s, c in sorted(mesh.articulation.items(), key=lambda kv: (-kv[1], kv[0]))],
        "suggested_relays": list(mesh.relays),
        "note": "links are straight-line distances within the radio range; terrain shadowing is not modelled",
    }
