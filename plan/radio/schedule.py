"""Shot schedule: who transmits in which slot, who listens, and how long it all takes.

One node transmits per slot (simultaneous transmitters would interfere);
every node that hears it by the link budget (the pair graph) listens. With
``transmitters="all"`` every node that anyone hears transmits once, so every
heard pair is recorded in both directions (reciprocal pairs check the picks
and the node clocks). With ``transmitters="cover"`` only a vertex cover of
the pair graph transmits (greedy: repeatedly the node with the most pairs not
yet recorded), so every heard pair is recorded at least once in fewer slots.

Duration of a slot
------------------
``t_slot = t_command + t_acquire + t_upload`` with

- ``t_command``: radio command and synchronisation overhead per slot;
- ``t_acquire = stacks * t_trace``: the listeners record together;
  ``t_trace = n_samples / PRF`` with sequential (equivalent-time) sampling,
  one sample per pulse, or ``1 / PRF`` with real-time sampling;
  ``n_samples = ceil(record_length / sample_interval)``;
- ``t_upload = sum over listeners of hops * n_samples * bytes_per_sample * 8 / data_rate``:
  each listener's stacked trace crosses the mesh, taking the radio channel
  once per hop (1 hop where the mesh is not known or the node is cut off).

The default record length is 1.5 times the longest straight-ray time of a
heard pair at the rock velocity, rounded up to 10 ns, so that late first
arrivals (slow rock, detours) still fall inside the record; the default
sample interval is a tenth of the antenna period. Time on site adds the
deployment and retrieval of the nodes and hole strings.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import networkx as nx
import numpy as np

from reconstruct.errors import InputError
from reconstruct.io.outputs import write_csv_atomic

__all__ = ["ScheduleOptions", "Slot", "Schedule", "plan_schedule", "schedule_summary", "write_schedule_csv",
           "SCHEDULE_CSV_HEADER"]

#: Columns of ``schedule.csv``; ``listeners`` holds the listener ids joined by ``;``.
SCHEDULE_CSV_HEADER = ("slot", "start_s", "duration_s", "transmitter", "n_listeners", "listeners", "stacks",
                       "record_length_ns", "samples_per_trace", "acquire_s", "upload_s")

_TRANSMITTERS = ("all", "cover")
_SAMPLING = ("sequential", "real_time")


# the command-line option of each field, for messages
_OPTION_OF = {"stacks": "--stacks", "pulse_repetition_khz": "--prf", "record_length_ns": "--record-length",
              "sample_interval_ns": "--sample-interval", "command_overhead_s": "--command-overhead",
              "data_rate_kbps": "--data-rate", "deploy_minutes_per_node": "--deploy-node",
              "deploy_minutes_per_string": "--deploy-string"}


def _label(name: str) -> str:
    option = _OPTION_OF.get(name)
    return f"{name} ({option})" if option else name


@dataclass(frozen=True)
class ScheduleOptions:
    """Acquisition and radio settings of the schedule.

    Parameters
    ----------
    stacks : int
        Traces stacked per record (>= 1).
    pulse_repetition_khz : float
        Pulse repetition frequency in kHz.
    sampling : {'sequential', 'real_time'}
        One sample per pulse (equivalent time) or a whole trace per pulse.
    record_length_ns : float or None
        Record length; None: 1.5 times the longest heard straight-ray time.
    sample_interval_ns : float or None
        None: a tenth of the antenna period.
    command_overhead_s : float
        Radio command and synchronisation per slot, seconds.
    data_rate_kbps : float
        Radio data rate available for traces, kbit/s.
    bytes_per_sample : int
    transmitters : {'all', 'cover'}
    deploy_minutes_per_node : float
        Setting out and picking up one surface or face node.
    deploy_minutes_per_string : float
        Lowering and recovering one hole string.
    """

    stacks: int = 32
    pulse_repetition_khz: float = 100.0
    sampling: str = "sequential"
    record_length_ns: float | None = None
    sample_interval_ns: float | None = None
    command_overhead_s: float = 1.0
    data_rate_kbps: float = 50.0
    bytes_per_sample: int = 2
    transmitters: str = "all"
    deploy_minutes_per_node: float = 5.0
    deploy_minutes_per_string: float = 20.0

    def __post_init__(self):
        problems = []
        for name in ("stacks", "bytes_per_sample"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
                problems.append(f"{_label(name)} must be a whole number >= 1 (got {value!r})")
        for name in ("pulse_repetition_khz", "data_rate_kbps"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                problems.append(f"{_label(name)} must be a number > 0 (got {value!r})")
        for name in ("record_length_ns", "sample_interval_ns"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                problems.append(f"{_label(name)} must be a number > 0 in ns (got {value!r}); leave it out for the default")
        for name in ("command_overhead_s", "deploy_minutes_per_node", "deploy_minutes_per_string"):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                problems.append(f"{_label(name)} must be a number >= 0 (got {value!r})")
        if self.sampling not in _SAMPLING:
            problems.append(f"sampling must be one of {', '.join(_SAMPLING)} (got {self.sampling!r})")
        if self.transmitters not in _TRANSMITTERS:
            problems.append(f"transmitters must be one of {', '.join(_TRANSMITTERS)} (got {self.transmitters!r})")
        if problems:
            raise InputError(problems)


@dataclass(frozen=True)
class Slot:
    """One transmitter slot; times in seconds."""

    index: int
    start_s: float
    duration_s: float
    transmitter: str
    listeners: tuple[str, ...]
    acquire_s: float
    upload_s: float


@dataclass(frozen=True)
class Schedule:
    """The slots and the figures they were computed with."""

    slots: tuple[Slot, ...]
    options: ScheduleOptions
    record_length_ns: float
    sample_interval_ns: float
    samples_per_trace: int
    silent: tuple[str, ...]
    pairs_recorded: int
    pairs_both_directions: int
    deploy_s: float

    @property
    def survey_s(self) -> float:
        """Acquisition time, seconds (all slots)."""
        return sum(s.duration_s for s in self.slots)


def _greedy_cover(graph: nx.Graph) -> list:
    """Transmitters covering every edge: repeatedly the node with most uncovered edges."""
    remaining = {n: set(graph.neighbors(n)) for n in graph}
    order = {n: k for k, n in enumerate(graph)}
    chosen = []
    while True:
        node = max(remaining, key=lambda n: (len(remaining[n]), -order[n]), default=None)
        if node is None or not remaining[node]:
            return chosen
        chosen.append(node)
        for other in remaining.pop(node):
            remaining[other].discard(node)


def plan_schedule(pair_graph: nx.Graph, *, velocity_m_per_ns: float, frequency_mhz: float,
                  options: ScheduleOptions = ScheduleOptions(), hops: dict | None = None,
                  strings: int = 0) -> Schedule:
    """Slots for a pair graph (heard pairs as edges with ``length_m``).

    Parameters
    ----------
    pair_graph : networkx.Graph
        From :func:`plan.radio.pair_graph.build_pair_graph`; node attribute ``kind``.
    velocity_m_per_ns : float
        Rock velocity, for the default record length.
    frequency_mhz : float
        Antenna frequency, for the default sample interval.
    hops : dict, optional
        Radio hops to the gateway per node (:class:`plan.radio.mesh.RadioMesh`).
    strings : int
        Number of hole strings to deploy.
    """
    if pair_graph.number_of_edges() == 0:
        raise InputError("no pair of nodes hears each other, so nothing can be scheduled; place the nodes "
                         "closer together or check radar.system_performance_db")
    longest_m = max(d["length_m"] for *_, d in pair_graph.edges(data=True))
    record = options.record_length_ns
    if record is None:
        record = 10.0 * math.ceil(1.5 * longest_m / velocity_m_per_ns / 10.0)
    interval = options.sample_interval_ns if options.sample_interval_ns is not None else 100.0 / frequency_mhz
    samples = int(math.ceil(record / interval - 1e-9))
    pulses = samples if options.sampling == "sequential" else 1
    acquire = options.stacks * pulses / (options.pulse_repetition_khz * 1e3)
    trace_s = samples * options.bytes_per_sample * 8 / (options.data_rate_kbps * 1e3)
    if options.transmitters == "cover":
        transmitters = _greedy_cover(pair_graph)
    else:
        transmitters = [n for n in pair_graph if pair_graph.degree(n) > 0]
    slots, start = [], 0.0
    for k, tx in enumerate(transmitters):
        listeners = tuple(sorted(pair_graph.neighbors(tx)))
        hop_sum = sum(max((hops or {}).get(n, 1), 1) for n in listeners)
        upload = trace_s * hop_sum
        duration = options.command_overhead_s + acquire + upload
        slots.append(Slot(k + 1, start, duration, tx, listeners, acquire, upload))
        start += duration
    chosen = set(transmitters)
    both = sum(1 for u, v in pair_graph.edges if u in chosen and v in chosen)
    surface_like = sum(1 for _, d in pair_graph.nodes(data=True) if d.get("kind") != "borehole")
    deploy = 60.0 * (options.deploy_minutes_per_node * surface_like + options.deploy_minutes_per_string * strings)
    silent = tuple(sorted(n for n in pair_graph if n not in chosen))
    return Schedule(tuple(slots), options, float(record), float(interval), samples, silent,
                    pair_graph.number_of_edges(), both, deploy)


def schedule_summary(schedule: Schedule) -> dict:
    """Figures of a schedule for ``schedule_summary.json``."""
    o = schedule.options
    survey = schedule.survey_s
    return {
        "slots": len(schedule.slots),
        "transmitters": o.transmitters,
        "silent_nodes": list(schedule.silent),
        "pairs_recorded": schedule.pairs_recorded,
        "pairs_recorded_both_directions": schedule.pairs_both_directions,
        "record_length_ns": schedule.record_length_ns,
        "sample_interval_ns": schedule.sample_interval_ns,
        "samples_per_trace": schedule.samples_per_trace,
        "stacks": o.stacks,
        "pulse_repetition_khz": o.pulse_repetition_khz,
        "sampling": o.sampling,
        "command_overhead_s": o.command_overhead_s,
        "data_rate_kbps": o.data_rate_kbps,
        "bytes_per_sample": o.bytes_per_sample,
        "acquire_s_total": sum(s.acquire_s for s in schedule.slots),
        "upload_s_total": sum(s.upload_s for s in schedule.slots),
        "radio_overhead_s_total": len(schedule.slots) * o.command_overhead_s,
        "survey_s": survey,
        "deploy_and_retrieve_s": schedule.deploy_s,
        "time_on_site_hours": (survey + schedule.deploy_s) / 3600.0,
        "note": "time on site = deployment and retrieval + acquisition; travel, set-up of the gateway "
                "and breaks are not included",
    }


def write_schedule_csv(path, schedule: Schedule):
    """Write one row per slot (:data:`SCHEDULE_CSV_HEADER`), atomically."""
    return write_csv_atomic(path, SCHEDULE_CSV_HEADER, (
        [s.index, f"{s.start_s:.3f}", f"{s.duration_s:.3f}", s.transmitter, len(s.listeners), ";".join(s.listeners),
         schedule.options.stacks, f"{schedule.record_length_ns:g}", schedule.samples_per_trace,
         f"{s.acquire_s:.3f}", f"{s.upload_s:.3f}"]
        for s in schedule.slots))
