"""Tests for plan.radio.schedule.

Outside sources: networkx (vertex-cover check, its 2-approximate minimum
vertex cover for the size comparison); slot durations worked out by hand from
the stated timing equation (sequential sampling takes one sample per pulse:
common practice, no published source).
"""

from __future__ import annotations

import csv

import networkx as nx
import pytest
from networkx.algorithms.approximation import min_weighted_vertex_cover

from plan.radio.schedule import ScheduleOptions, plan_schedule, schedule_summary, write_schedule_csv
from reconstruct.errors import InputError


def _graph():
    g = nx.Graph()
    for n, kind in (("A", "surface"), ("B", "surface"), ("C", "borehole"), ("D", "borehole"), ("E", "face"),
                    ("Z", "surface")):
        g.add_node(n, kind=kind)
    g.add_edge("A", "B", length_m=12.0)
    g.add_edge("A", "C", length_m=6.0)
    g.add_edge("A", "D", length_m=9.0)
    g.add_edge("C", "E", length_m=3.0)
    return g


def test_every_heard_node_transmits_once_and_its_neighbours_listen():
    schedule = plan_schedule(_graph(), velocity_m_per_ns=0.12, frequency_mhz=100)
    assert [s.transmitter for s in schedule.slots] == ["A", "B", "C", "D", "E"]
    assert schedule.slots[0].listeners == ("B", "C", "D")
    assert schedule.silent == ("Z",)
    assert schedule.pairs_both_directions == 4
    # default record length: 1.5 x 12 m / 0.12 m/ns = 150 ns; sample interval a tenth of 10 ns
    assert schedule.record_length_ns == 150.0 and schedule.sample_interval_ns == 1.0
    starts = [s.start_s for s in schedule.slots]
    assert starts == pytest.approx([sum(s.duration_s for s in schedule.slots[:k]) for k in range(5)])


def test_slot_duration_by_hand():
    options = ScheduleOptions(stacks=10, pulse_repetition_khz=100.0, record_length_ns=100.0,
                              sample_interval_ns=1.0, command_overhead_s=2.0, data_rate_kbps=50.0,
                              bytes_per_sample=2, deploy_minutes_per_node=5, deploy_minutes_per_string=20)
    schedule = plan_schedule(_graph(), velocity_m_per_ns=0.12, frequency_mhz=100, options=options,
                             hops={"B": 2, "C": 1, "D": 3}, strings=2)
    slot = schedule.slots[0]  # A transmits; B, C, D listen
    acquire = 10 * 100 / 100e3  # stacks x samples / PRF
    upload = (2 + 1 + 3) * 100 * 2 * 8 / 50e3  # hops x samples x bytes x 8 bits / rate
    assert slot.acquire_s == pytest.approx(acquire)
    assert slot.upload_s == pytest.approx(upload)
    assert slot.duration_s == pytest.approx(2.0 + acquire + upload)
    # 4 surface-like nodes (A, B, E, Z) and 2 strings
    assert schedule.deploy_s == pytest.approx(60 * (5 * 4 + 20 * 2))
    real_time = plan_schedule(_graph(), velocity_m_per_ns=0.12, frequency_mhz=100,
                              options=ScheduleOptions(stacks=10, sampling="real_time"))
    assert real_time.slots[0].acquire_s == pytest.approx(10 / 100e3)
    summary = schedule_summary(schedule)
    assert summary["time_on_site_hours"] == pytest.approx((schedule.survey_s + schedule.deploy_s) / 3600)


def test_cover_records_every_pair_with_fewer_transmitters():
    g = nx.gnm_random_graph(40, 120, seed=5)
    nx.set_edge_attributes(g, 10.0, "length_m")
    cover = plan_schedule(g, velocity_m_per_ns=0.1, frequency_mhz=100, options=ScheduleOptions(transmitters="cover"))
    chosen = {s.transmitter for s in cover.slots}
    assert all(u in chosen or v in chosen for u, v in g.edges)  # a vertex cover
    assert len(chosen) < sum(1 for n in g if g.degree(n) > 0)
    # greedy cover no larger than networkx's 2-approximation
    assert len(chosen) <= len(min_weighted_vertex_cover(g))


def test_csv_and_errors(tmp_path):
    schedule = plan_schedule(_graph(), velocity_m_per_ns=0.12, frequency_mhz=100)
    write_schedule_csv(tmp_path / "schedule.csv", schedule)
    with open(tmp_path / "schedule.csv", newline="") as handle:
        rows = list(csv.DictReader(handle))
    assert [r["transmitter"] for r in rows] == ["A", "B", "C", "D", "E"]
    assert rows[0]["listeners"] == "B;C;D"
    empty = nx.Graph()
    empty.add_nodes_from("AB")
    with pytest.raises(InputError, match="no pair of nodes hears each other"):
        plan_schedule(empty, velocity_m_per_ns=0.12, frequency_mhz=100)
    with pytest.raises(InputError, match=r"stacks \(--stacks\) must be a whole number >= 1 \(got 0\)"):
        ScheduleOptions(stacks=0)
