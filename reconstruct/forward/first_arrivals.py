"""First-arrival times and bent rays of many node pairs through one model.

For every node that serves as a source, one first-arrival travel-time field
is computed over the whole grid, air included (:mod:`reconstruct.forward.eikonal`),
and the rays of all its pairs are traced back through it
(:mod:`reconstruct.forward.ray_tracing`). Reciprocity (the time from A to B
equals the time from B to A) means one field serves every pair that has the
node at either end, so the sources are chosen to cover all pairs with few
fields (greedy: the node with most uncovered pairs first). The per-source
work runs through :func:`reconstruct.parallel.map_tasks`: serially, in a local
process pool or on a Dask cluster. Each worker holds the model once and one
field at a time, so memory grows with the number of workers, not of nodes.

One set of physics: the times and the operator agree
-----------------------------------------------------
A traced ray does not lie exactly on the path the field's time belongs to
(steps of half a lattice spacing through a field that is itself only accurate
to a fraction of a cell; the air wave along the ground surface traced zigzag
between the air and the ground cells). The time along the traced ray,
``G_i . s`` (exact per-cell lengths times the slowness, air included), was
measured against the field's time ``T_i`` (benchmarks/bench_ray_consistency.py,
all pairs): on the demo quarry's truth model on the 1 m simulation grid, pairs
whose ray runs partly in air |G_i . s - T_i| / T_i median 0.54 %, 95th
percentile 2.5 %, max 21 % (nearly always later: the traced ray is not the
fastest path); the other pairs median 0.001 %, 95th percentile 0.60 %, max
6.0 %. On the 2 m model grid: 1.1 %, 5.7 %, 55 % and 0.002 %, 4.1 %, 26 %.
Linearising ``t ~ T(s_k) + G_k (s - s_k)`` with such a mismatch puts the
mismatch into the model at every step.

Each row of the operator is therefore scaled so that ``G_i . s = T_i``
exactly (:func:`consistent_rows`): the times stay those of the field, which
are checked against outside references (tests/references/sphere.py,
scikit-fmm on fine grids), and the linearisation is consistent by
construction. What this gives up: the ray's path is kept as traced, only its
lengths are stretched or shrunk by one factor, so the sensitivity is spread
over the cells of the traced path rather than of the true fastest path, and
the derivative of the time with respect to a cell's slowness is off by the
same factor (where the traced path wanders, by up to the mismatch above). The
scale factors are returned (:attr:`ForwardResult.length_scale`) so that a
caller can see where the ray and the field disagree. Two alternatives were
weighed: taking ``G_i . s`` of the traced ray as the forward time (rejected:
it is late by the mismatch above, up to 21 %, and would break Fermat's
principle against the references) and bending each ray to a path of locally
least time through the cells (Um and Thurber 1987;
:mod:`reconstruct.forward.bending`), whose time and row agree by construction.
Bending is available (``bent_ray_forward(bend=True)``) but not the default:
it costs about 6 ms per ray on the 200-node benchmark model (2 cores shared;
about 2 minutes more per iteration for 19,900 pairs, against a 60 s target),
and next to a sphere of 2.5 m radius at 1 m cells it does not bring the times
within 1 ns of the exact ones, because the voxel model itself is that far
from the sphere (benchmarks/bench_sharp_bodies.py holds the table).

References
----------
Um, J. and Thurber, C. (1987), A fast algorithm for two-point seismic ray
tracing, Bull. Seismol. Soc. Am. 77(3), 972-986.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from reconstruct.forward.bending import bend_rays
from reconstruct.forward.ray_tracing import polyline_matrix, trace_rays
from reconstruct.model.grid import Grid
from reconstruct.parallel import Executor, map_tasks

#: A bent ray is used when its time is at most this fraction later than the field's.
_BEND_ACCEPT = 0.01

__all__ = ["ForwardResult", "choose_sources", "bent_ray_forward", "consistent_rows", "first_arrival_times",
           "unique_pairs"]


@dataclass(frozen=True)
class ForwardResult:
    """Times and rays of all unique node pairs for one model."""

    time_ns: np.ndarray  # (n_pairs,)
    operator: sp.csr_matrix  # (n_pairs, n_cells), metres
    reached: np.ndarray  # (n_pairs,) bool: descent reached the source
    polylines: list | None
    #: (n_pairs,) factor each traced ray's lengths were multiplied by so that
    #: ``operator @ s == time_ns`` (1: the traced ray's time was the field's)
    length_scale: np.ndarray | None = None


def consistent_rows(matrix: sp.csr_matrix, slowness_ns_per_m, time_ns):
    """Scale each row of a path-length matrix so that its time is ``time_ns``.

    Parameters
    ----------
    matrix : scipy.sparse.csr_matrix, shape (n_rays, n_cells)
        Per-cell path lengths of traced rays, metres.
    slowness_ns_per_m : array_like, n_cells values
    time_ns : array_like, shape (n_rays,)
        The first-arrival times the rows must reproduce, ns.

    Returns
    -------
    matrix : scipy.sparse.csr_matrix
        Row i multiplied by ``time_ns[i] / (row_i . s)``, so that
        ``matrix @ s == time_ns`` to rounding (see the module notes for what
        this gives up). A row with no time along it (an empty ray) is left as it is.
    scale : ndarray, shape (n_rays,)
        The factors.
    """
    matrix = sp.csr_matrix(matrix, dtype=float, copy=True)
    along = matrix @ np.asarray(slowness_ns_per_m, dtype=float).ravel()
    time_ns = np.asarray(time_ns, dtype=float)
    usable = (along > 0) & np.isfinite(time_ns) & (time_ns > 0)
    scale = np.ones(along.size)
    scale[usable] = time_ns[usable] / along[usable]
    matrix.data *= np.repeat(scale, np.diff(matrix.indptr))
    return matrix, scale


def choose_sources(pair_a: np.ndarray, pair_b: np.ndarray, n_nodes: int, xyz_m=None):
    """Pick source nodes so that every pair has a source at one end.

    Greedy cover: repeatedly take the node with the most uncovered pairs.
    With ``xyz_m`` (node positions), ties go to the node farthest from the
    centroid of the nodes that still have uncovered pairs: the receivers left
    for later sources then stay close together, and a field that stops once
    its receivers are reached (``travel_time_field(receivers_xyz_m=...)``)
    covers less of the box. On the 200-node benchmark survey this cut the
    estimated marched volume from 84 % to 70 % of the box per field (all
    pairs, where every remaining node ties).
    Returns a list of ``(source, pair_indices, other_nodes)``.
    """
    pair_a = np.asarray(pair_a, dtype=np.int64)
    pair_b = np.asarray(pair_b, dtype=np.int64)
    xyz = None if xyz_m is None else np.asarray(xyz_m, dtype=float)
    uncovered = np.ones(pair_a.size, dtype=bool)
    tasks = []
    while uncovered.any():
        counts = np.bincount(pair_a[uncovered], minlength=n_nodes) + np.bincount(
            pair_b[uncovered], minlength=n_nodes)
        if xyz is None:
            source = int(np.argmax(counts))
        else:
            tied = np.flatnonzero(counts == counts.max())
            centre = xyz[counts > 0].mean(axis=0)
            source = int(tied[np.argmax(np.sum((xyz[tied] - centre) ** 2, axis=1))])
        mine = uncovered & ((pair_a == source) | (pair_b == source))
        index = np.flatnonzero(mine)
        others = np.where(pair_a[index] == source, pair_b[index], pair_a[index])
        tasks.append((source, index, others))
        uncovered[index] = False
    return tasks


def _shared_inputs(grid: Grid, slowness_ns_per_m, xyz_m, eikonal_options, **extra) -> dict:
    """The read-only inputs every per-source task needs, sent once per map."""
    from reconstruct.forward.eikonal import EikonalOptions

    return {
        "grid": {"origin_m": grid.origin_m, "cell_m": grid.cell_m, "shape": grid.shape},
        "slowness": np.ascontiguousarray(np.asarray(slowness_ns_per_m, dtype=float).reshape(grid.shape)),
        "xyz": np.asarray(xyz_m, dtype=float),
        "eikonal": eikonal_options if eikonal_options is not None else EikonalOptions(),
        **extra,
    }


def _task_field(task, shared):
    """The grid, the source's travel-time field and the receiver positions of one task."""
    from reconstruct.forward.eikonal import travel_time_field

    source, _, others = task
    grid = Grid(**shared["grid"])
    xyz = shared["xyz"]
    field = travel_time_field(grid, shared["slowness"], xyz[source], options=shared["eikonal"],
                              receivers_xyz_m=xyz[others])
    return grid, field, xyz[others]


def _forward_task(task, shared):
    """One source: its field, the times at its receivers and their traced rays."""
    pair_index = task[1]
    grid, field, receivers = _task_field(task, shared)
    times = field.interpolate(receivers)
    polylines, reached = trace_rays(field, receivers)
    matrix = polyline_matrix(grid, polylines, slowness_ns_per_m=shared["slowness"])
    if shared.get("bend"):
        polylines, times, matrix = _bent_rows(grid, shared["slowness"], polylines, times, matrix)
    matrix, scale = consistent_rows(matrix, shared["slowness"], times)
    return {
        "pair_index": pair_index,
        "time_ns": times,
        "indptr": matrix.indptr,
        "indices": matrix.indices,
        "data": matrix.data,
        "reached": reached,
        "scale": scale,
        "polylines": polylines if shared["keep_rays"] else None,
    }


def _bent_rows(grid, slowness, polylines, times, matrix):
    """Bend the traced rays (:func:`reconstruct.forward.bending.bend_rays`) and
    take a bent ray, its time and its exact per-cell lengths wherever it is no
    later than the field's time by more than ``_BEND_ACCEPT``; elsewhere (the
    bending stuck in a later local minimum) keep the traced ray and the field's time."""
    bent, bent_ns = bend_rays(grid, slowness, polylines, reference_ns=times, retry_above=_BEND_ACCEPT)
    use = bent_ns <= times * (1.0 + _BEND_ACCEPT)
    bent_matrix = polyline_matrix(grid, bent)
    matrix = sp.diags(use.astype(float)) @ bent_matrix + sp.diags((~use).astype(float)) @ matrix
    matrix = sp.csr_matrix(matrix)
    matrix.eliminate_zeros()
    polylines = [b if u else p for b, p, u in zip(bent, polylines, use)]
    return polylines, np.where(use, bent_ns, times), matrix


def _times_task(task, shared):
    """One source: its field and the first-arrival times at the other ends of its pairs."""
    _, field, receivers = _task_field(task, shared)
    return task[1], field.interpolate(receivers)


def first_arrival_times(grid: Grid, slowness_ns_per_m, xyz_m, pair_a, pair_b, *, executor: Executor,
                        eikonal_options=None, progress=None) -> np.ndarray:
    """First-arrival times (ns) of node pairs through a model, without tracing rays."""
    shared = _shared_inputs(grid, slowness_ns_per_m, xyz_m, eikonal_options)
    tasks = choose_sources(pair_a, pair_b, shared["xyz"].shape[0], shared["xyz"])
    times = np.empty(np.asarray(pair_a).size)
    for index, values in map_tasks(executor, _times_task, tasks, shared=shared, progress=progress):
        times[index] = values
    return times


def bent_ray_forward(grid: Grid, slowness_ns_per_m, xyz_m, pair_a, pair_b, *, executor: Executor,
                     eikonal_options=None, keep_rays: bool = False, bend: bool = False,
                     progress=None) -> ForwardResult:
    """First-arrival times and bent rays of node pairs through a model.

    Parameters
    ----------
    grid : Grid
    slowness_ns_per_m : ndarray, shape grid.shape
    xyz_m : ndarray, shape (n_nodes, 3)
    pair_a, pair_b : ndarray of int, shape (n_pairs,)
        The two nodes of each pair (order does not matter: reciprocity).
    executor : Executor
    bend : bool
        Bend every traced ray to a path of locally least time through the
        cells (:mod:`reconstruct.forward.bending`) and use the bent ray's time
        and exact per-cell lengths where it is at most 1 % later than the
        field's time (else the traced ray, scaled). Off by default: see the
        measurements in benchmarks/bench_sharp_bodies.py (it costs several
        milliseconds per ray and does not bring the times next to a sphere
        within the targets at 1 m cells, where the voxel model itself differs).

    Returns
    -------
    ForwardResult
        ``time_ns`` the first-arrival times from the fields; ``operator`` the
        traced rays' per-cell lengths, each row scaled so that
        ``operator @ s == time_ns`` (:func:`consistent_rows`; the factors in
        ``length_scale``); ``reached`` False where the descent did not reach
        the source (the straight segment is used, scaled the same way; count
        them with ``(~reached).sum()``).
    """
    shared = _shared_inputs(grid, slowness_ns_per_m, xyz_m, eikonal_options, keep_rays=keep_rays, bend=bend)
    tasks = choose_sources(pair_a, pair_b, shared["xyz"].shape[0], shared["xyz"])
    results = map_tasks(executor, _forward_task, tasks, shared=shared, progress=progress)
    n_pairs = np.asarray(pair_a).size
    time_ns = np.empty(n_pairs)
    reached = np.zeros(n_pairs, dtype=bool)
    scale = np.ones(n_pairs)
    polylines = [None] * n_pairs if keep_rays else None
    blocks, order = [], []
    for res in results:
        idx = res["pair_index"]
        time_ns[idx] = res["time_ns"]
        reached[idx] = res["reached"]
        scale[idx] = res["scale"]
        blocks.append(sp.csr_matrix((res["data"], res["indices"], res["indptr"]),
                                    shape=(idx.size, grid.n_cells)))
        order.append(idx)
        if keep_rays:
            for k, line in zip(idx, res["polylines"]):
                polylines[k] = line
    stacked = sp.vstack(blocks).tocsr()
    order = np.concatenate(order)
    inverse = np.empty_like(order)
    inverse[order] = np.arange(order.size)
    operator = stacked[inverse]
    return ForwardResult(time_ns=time_ns, operator=operator, reached=reached, polylines=polylines,
                         length_scale=scale)


def unique_pairs(picks_tx, picks_rx):
    """Unique unordered node pairs and, for every pick, its pair number.

    Returns ``(pair_a, pair_b, pick_pair)`` with ``pair_a < pair_b``.
    """
    a = np.minimum(picks_tx, picks_rx)
    b = np.maximum(picks_tx, picks_rx)
    keys = np.stack([a, b], axis=1)
    unique, inverse = np.unique(keys, axis=0, return_inverse=True)
    return unique[:, 0], unique[:, 1], inverse.ravel()
