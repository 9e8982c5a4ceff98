"""Tests for plan.radio.mesh.

Outside sources: networkx's own shortest paths and articulation points on
hand-made meshes (a line, a star, a ring with a cut vertex), with the answers
also worked out by hand; hand geometry for the number of relays.
"""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pytest

from plan.radio.mesh import build_radio_mesh, mesh_summary, mesh_with_relays
from reconstruct.errors import InputError
from reconstruct.io.site import parse_site
from reconstruct.io.tables import read_nodes


def _site(gateway=(0.0, 50.0, 10.0), range_m=12.0, holes=(), zones=()):
    data = {
        "name": "mesh test",
        "model": {"origin_m": [-100, 0, 0], "size_m": [300, 100, 20], "cell_m": 2.0},
        "ground": {"flat_elevation_m": 10.0},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "boreholes": list(holes),
        "exclusion_zones": list(zones),
        "radio": {"range_m": range_m},
    }
    if gateway is not None:
        data["radio"]["gateway_m"] = list(gateway)
    return parse_site(data)


def _nodes(tmp_path, rows):
    text = "node_id,x_m,y_m,z_m,kind,borehole\n" + "\n".join(
        f"{i},{x},{y},{z},{kind},{hole}" for i, x, y, z, kind, hole in rows)
    path = tmp_path / "nodes.csv"
    path.write_text(text + "\n")
    return read_nodes(path)


def _surface(ids_xy):
    return [(i, x, y, 10.0, "surface", "") for i, x, y in ids_xy]


def _plain_graph(mesh):
    return nx.Graph(mesh.graph.edges)


def test_line_hops_and_cut_vertices(tmp_path):
    # gateway - A - B - C - D, 10 m apart, range 12 m: by hand, hops 1..4 and A, B, C cut off
    # 3, 2 and 1 nodes
    nodes = _nodes(tmp_path, _surface([("A", 10, 50), ("B", 20, 50), ("C", 30, 50), ("D", 40, 50)]))
    mesh = build_radio_mesh(_site(), nodes)
    g = _plain_graph(mesh)
    assert mesh.hops == nx.shortest_path_length(g, mesh.gateway)
    assert {n: mesh.hops[n] for n in "ABCD"} == {"A": 1, "B": 2, "C": 3, "D": 4}
    assert set(mesh.articulation) == set(nx.articulation_points(g)) - {mesh.gateway}
    assert mesh.articulation == {"A": 3, "B": 2, "C": 1}
    assert not mesh.disconnected and not mesh.relays


def test_star_has_one_hop_and_no_cut_vertex(tmp_path):
    # five nodes 10 m around the gateway, 11.76 m from each other, range 11 m
    angles = np.radians(np.arange(5) * 72.0)
    nodes = _nodes(tmp_path, _surface([(f"N{k}", 10 * math.cos(a), 50 + 10 * math.sin(a))
                                       for k, a in enumerate(angles)]))
    mesh = build_radio_mesh(_site(range_m=11.0), nodes)
    g = _plain_graph(mesh)
    assert set(nx.articulation_points(g)) == {mesh.gateway}
    assert mesh.articulation == {}
    assert all(mesh.hops[f"N{k}"] == 1 for k in range(5))


def test_ring_with_a_tail_has_its_cut_vertex(tmp_path):
    # six nodes on a ring of radius 10 m (neighbours 10 m apart), the gateway 10 m outside R0,
    # and a tail node T 10 m outside R3: R0 and R3 are the cut vertices
    ring = [(f"R{k}", 30 + 10 * math.cos(math.radians(60 * k)), 50 + 10 * math.sin(math.radians(60 * k)))
            for k in range(6)]
    nodes = _nodes(tmp_path, _surface(ring + [("T", 10, 50)]))
    mesh = build_radio_mesh(_site(gateway=(50.0, 50.0, 10.0)), nodes)
    g = _plain_graph(mesh)
    assert set(nx.articulation_points(g)) - {mesh.gateway} == {"R0", "R3"}
    assert mesh.articulation == {"R0": 6, "R3": 1}
    assert mesh.hops == nx.shortest_path_length(g, mesh.gateway)
    assert mesh.hops["R3"] == 4 and mesh.hops["T"] == 5


def test_hole_strings_reach_the_mesh_through_their_collar(tmp_path):
    hole = {"id": "BH1", "collar_m": [10, 50, 10], "azimuth_deg": 0, "dip_deg": 90, "length_m": 8}
    nodes = _nodes(tmp_path, [("H1", 10, 50, 6, "borehole", "BH1"), ("H2", 10, 50, 3, "borehole", "BH1")])
    mesh = build_radio_mesh(_site(holes=[hole]), nodes)
    assert mesh.hops["H1"] == mesh.hops["H2"] == 1  # one radio hop from the collar, cables count 0
    links = {frozenset(e): d["link"] for *e, d in mesh.graph.edges(data=True)}
    assert links[frozenset(("H1", "collar:BH1"))] == "cable"
    assert mesh.articulation == {"collar:BH1": 2}


def test_relays_join_a_far_node_and_avoid_an_exclusion_zone(tmp_path):
    # F is 60 m from A: ceil(60 / 12) - 1 = 4 relays on the line between them
    nodes = _nodes(tmp_path, _surface([("A", 10, 50), ("F", 70, 50)]))
    mesh = build_radio_mesh(_site(), nodes)
    assert mesh.disconnected == ("F",)
    assert len(mesh.relays) == 4
    xyz = np.array([r["xyz_m"] for r in mesh.relays])
    np.testing.assert_allclose(sorted(xyz[:, 0]), [22, 34, 46, 58])
    full = mesh_with_relays(mesh)
    assert nx.is_connected(full)
    assert all(length <= 12.0 + 1e-9 for *_, length in full.edges(data="length_m"))
    summary = mesh_summary(mesh)
    assert summary["connected"] is False and summary["disconnected_nodes"] == ["F"]
    # with a zone across the straight line, a pair avoiding it is chosen when one exists
    zone = {"name": "blast area", "polygon_m": [[30, 45], [50, 45], [50, 55], [30, 55]]}
    nodes = _nodes(tmp_path, _surface([("A", 10, 50), ("A2", 10, 62), ("F", 70, 62)]))
    mesh = build_radio_mesh(_site(zones=[zone]), nodes)
    assert mesh.relays and all(r["exclusion_zone"] is None for r in mesh.relays)
    assert mesh.relays[0]["joins"] == ["F", "A2"]


def test_missing_gateway_and_unknown_hole_are_refused(tmp_path):
    nodes = _nodes(tmp_path, _surface([("A", 10, 50)]))
    with pytest.raises(InputError, match=r"radio.gateway_m is missing; add the gateway position"):
        build_radio_mesh(_site(gateway=None), nodes)
    nodes = _nodes(tmp_path, [("H1", 10, 50, 6, "borehole", "BH9")])
    with pytest.raises(InputError, match=r"nodes.csv line 2: node 'H1' names borehole 'BH9'"):
        build_radio_mesh(_site(), nodes)
