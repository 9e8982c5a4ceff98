"""Tests for plan.radio.pair_graph.

Outside sources: networkx degree and component functions on the graph built;
the Friis (1946) free-space loss for the hand-checked margin; the head-wave
rule of REFERENCES.md for the air-wave flag (surface-to-surface pairs: common
practice, no published source, that the air wave may arrive first).
"""

from __future__ import annotations

import csv
import math

import networkx as nx
import numpy as np
import pytest

from plan.radio.link_budget import link_budget_for_site
from plan.radio.pair_graph import build_pair_graph, pair_graph_summary, write_graphml, write_pairs_csv
from reconstruct.errors import InputError
from reconstruct.io.site import parse_site
from reconstruct.io.tables import read_nodes


@pytest.fixture()
def site():
    return parse_site({
        "name": "pairs test",
        "model": {"origin_m": [0, 0, 0], "size_m": [200, 20, 40], "cell_m": 2.0},
        "ground": {"flat_elevation_m": 38.0},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "boreholes": [{"id": "BH1", "collar_m": [10, 10, 38], "azimuth_deg": 0, "dip_deg": 90, "length_m": 36},
                      {"id": "BH2", "collar_m": [30, 10, 38], "azimuth_deg": 0, "dip_deg": 90, "length_m": 36}],
        "radar": {"system_performance_db": 90},
    })


def _nodes(tmp_path, rows, name="nodes.csv"):
    path = tmp_path / name
    path.write_text("node_id,x_m,y_m,z_m,kind,borehole\n" + "\n".join(",".join(map(str, r)) for r in rows) + "\n")
    return read_nodes(path)


ROWS = [("A1", 10, 10, 30, "borehole", "BH1"), ("A2", 10, 10, 20, "borehole", "BH1"),
        ("B1", 30, 10, 30, "borehole", "BH2"), ("B2", 30, 10, 20, "borehole", "BH2"),
        ("S1", 20, 10, 38, "surface", ""), ("S2", 40, 10, 38, "surface", ""),
        ("FAR", 195, 10, 5, "", "")]


def test_graph_measures_agree_with_networkx_and_the_far_node_is_deaf(site, tmp_path):
    nodes = _nodes(tmp_path, ROWS)
    pairs = build_pair_graph(site, nodes, link_budget_for_site(site))
    g = pairs.graph
    summary = pair_graph_summary(pairs)
    degrees = [d for _, d in nx.degree(g)]
    assert summary["degree"]["max"] == max(degrees) and summary["degree"]["mean"] == pytest.approx(np.mean(degrees))
    assert summary["deaf_nodes"] == [n for n in g if g.degree(n) == 0] == ["FAR"]
    assert summary["components"] == nx.number_connected_components(g)
    assert summary["pairs"]["heard"] == g.number_of_edges() == int(pairs.links.heard.sum())
    # nodes in one vertical hole sit on each other's dipole axis: the null, not heard
    assert not g.has_edge("A1", "A2") and not g.has_edge("B1", "B2")
    assert g.has_edge("A1", "B1")
    # the surface pair is flagged: the air wave along the surface arrives first; and its direct
    # wave through the rock is not heard: the far field of a dipole lying on a dielectric half-space
    # vanishes along the surface (Engheta, Papas & Elachi 1982; Smith 1984; from memory)
    s1, s2 = nodes.ids.index("S1"), nodes.ids.index("S2")
    k = int(np.flatnonzero((pairs.links.a == s1) & (pairs.links.b == s2))[0])
    assert pairs.links.air_flag[k] and not g.has_edge("S1", "S2") and not g.edges["A2", "B2"]["air_flag"]
    # hand check of one margin: borehole pair broadside, 20 m in rock (Friis spreading)
    budget = pairs.budget
    friis = -10 * math.log10((budget.wavelength_m / (4 * math.pi * 20.0)) ** 2)
    assert g.edges["A2", "B2"]["margin_db"] == pytest.approx(90 - friis - 20 * budget.attenuation_db_per_m)


def test_files_hold_every_pair_and_read_back(site, tmp_path):
    nodes = _nodes(tmp_path, ROWS)
    pairs = build_pair_graph(site, nodes, link_budget_for_site(site))
    write_pairs_csv(tmp_path / "pairs.csv", pairs)
    write_graphml(tmp_path / "pairs.graphml", pairs.graph)
    with open(tmp_path / "pairs.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert len(rows) == 7 * 6 // 2
    assert all((float(r["margin_db"]) >= 0) == (r["heard"] == "1") for r in rows)
    # distance_m, as in every other table, is the straight distance between the two nodes (plain geometry)
    where = {k: nodes.xyz_m[i] for i, k in enumerate(nodes.ids)}
    for r in rows:
        assert float(r["distance_m"]) == pytest.approx(np.linalg.norm(where[r["node_a"]] - where[r["node_b"]]),
                                                       abs=1e-3)
    back = nx.read_graphml(tmp_path / "pairs.graphml")
    assert {frozenset(e) for e in back.edges} == {frozenset(e) for e in pairs.graph.edges}
    assert back.nodes["S1"]["kind"] == "surface"


def test_nodes_outside_the_box_and_unknown_holes_are_refused(site, tmp_path):
    nodes = _nodes(tmp_path, ROWS[:2] + [("OUT", 500, 10, 20, "", "")])
    with pytest.raises(InputError, match="nodes.csv"):
        build_pair_graph(site, nodes, link_budget_for_site(site))
    nodes = _nodes(tmp_path, [("A1", 10, 10, 30, "borehole", "BH7"), ("S1", 20, 10, 38, "surface", ""),
                              ("H", 12, 10, 20, "borehole", "")])
    with pytest.raises(InputError) as info:
        build_pair_graph(site, nodes, link_budget_for_site(site))
    text = str(info.value)
    assert "line 2: node 'A1' names borehole 'BH7', which is not in the site description" in text
    assert "line 4: node 'H' is of kind borehole but its borehole column is blank" in text


def test_too_few_or_too_many_nodes_are_refused(site, tmp_path, monkeypatch):
    import plan.radio.pair_graph

    with pytest.raises(InputError, match="1 node; pairs need at least two nodes"):
        build_pair_graph(site, _nodes(tmp_path, ROWS[:1]), link_budget_for_site(site))
    monkeypatch.setattr(plan.radio.pair_graph, "MAX_NODES", 5)
    with pytest.raises(InputError, match=r"7 nodes give 21 pairs, more than the pair table holds \(5 nodes at most\)"):
        build_pair_graph(site, _nodes(tmp_path, ROWS), link_budget_for_site(site))


def test_read_heard_pairs_round_trip_and_errors(tmp_path):
    from plan.radio.pair_graph import read_heard_pairs

    ids = ["A", "B", "C"]
    path = tmp_path / "pairs.csv"
    path.write_text("node_a,node_b,heard\nA,B,1\nA,C,0\nB,C,1\n", encoding="utf-8")
    a, b = read_heard_pairs(path, ids)
    assert a.tolist() == [0, 1] and b.tolist() == [1, 2]
    path.write_text("node_a,node_b,heard\nA,Z,1\n", encoding="utf-8")
    with pytest.raises(InputError, match=r"pairs.csv, line 2: node 'Z' is not in the node table"):
        read_heard_pairs(path, ids)
    path.write_text("node_a,node_b\nA,B\n", encoding="utf-8")
    with pytest.raises(InputError, match="missing column"):
        read_heard_pairs(path, ids)
