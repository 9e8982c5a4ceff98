"""Two-point ray bending: each traced ray moved to a path of least time through the cells.

A ray traced back through a travel-time field (:mod:`reconstruct.forward.ray_tracing`)
follows a field that is itself only accurate to a fraction of a cell, and
next to a sharp body the field's own time can be early or late by several
per cent (first-order differences behind the contrast depend on the
direction of travel). Bending takes the traced ray as the start and moves its
points so that the time along it, summed exactly cell by cell (per-cell
lengths as in Siddon 1985, times the cell's slowness), gets smaller: the
perturbation idea of Um and Thurber (1987), with the move of each point
found by a pattern search instead of their gradient formula, since the
slowness of a voxel model is constant per cell (its gradient is zero inside
a cell and undefined on its faces).

Each interior point in turn is moved by +-delta along the two directions
across the ray (perpendicular to the chord of its two neighbours) when that
shortens the time of its two segments; delta is halved when a sweep brings
nothing. The result is a polyline whose time is exactly the sum of its
per-cell lengths times the slowness, so that the time and the row of the
Jacobian agree by construction; by Fermat's principle it is never earlier
than the least time through the same cells (any polyline is a path), and
the search stops in the local minimum nearest the traced ray.

Measured: a ray refracted across a plane interface on a cell face comes
within 0.02 % of Snell's time; a head wave along a faster half-space stays
0.25 % late (moves across the ray slide the critical-angle legs along it only
slowly), where the field itself is 0.01 % off. Next to a sphere of 2.5 m
radius at 1 m cells (benchmarks/bench_sharp_bodies.py) bending makes the time
that of a real path through the voxel model, which the field's is not
(-0.5 to +2.4 ns off it next to the air-filled sphere), but the voxel model
itself is up to 2.3 ns early (air-filled) and 5.2 ns late (water-filled)
against the true sphere. Cost: 2-5 ms per ray of 12-24 m, about 6 ms per ray
on the 200-node benchmark model (2 cores shared with other work).

References
----------
Um, J. and Thurber, C. (1987), A fast algorithm for two-point seismic ray
tracing, Bull. Seismol. Soc. Am. 77(3), 972-986.
Siddon, R. L. (1985), Fast calculation of the exact radiological path for a
three-dimensional CT array, Medical Physics 12(2), 252-255.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from reconstruct.model.grid import Grid

__all__ = ["bend_rays"]

#: largest number of face crossings per axis of one short segment
_MAX_CROSSINGS = 8


@njit(cache=True)
def _segment_time(p0, p1, origin, cell, slow, alphas):
    """Time along segment p0-p1 through the cells (per-cell lengths times slowness), ns.

    ``alphas`` is scratch space of at least ``3 * _MAX_CROSSINGS + 2`` values
    (no allocation per call: this runs millions of times).
    """
    d0 = p1[0] - p0[0]
    d1 = p1[1] - p0[1]
    d2 = p1[2] - p0[2]
    length = np.sqrt(d0 * d0 + d1 * d1 + d2 * d2)
    if length == 0.0:
        return 0.0
    alphas[0] = 0.0
    na = 1
    for a in range(3):
        da = p1[a] - p0[a]
        if da == 0.0:
            continue
        i0 = int(np.floor((p0[a] - origin[a]) / cell[a]))
        i1 = int(np.floor((p1[a] - origin[a]) / cell[a]))
        lo = min(i0, i1) + 1
        hi = min(max(i0, i1), lo + _MAX_CROSSINGS - 1)
        for kp in range(lo, hi + 1):
            al = (origin[a] + kp * cell[a] - p0[a]) / da
            if 0.0 < al < 1.0:
                # insertion into the sorted list
                m = na
                while m > 0 and alphas[m - 1] > al:
                    alphas[m] = alphas[m - 1]
                    m -= 1
                alphas[m] = al
                na += 1
    alphas[na] = 1.0
    na += 1
    nx, ny, nz = slow.shape
    total = 0.0
    for q in range(na - 1):
        dq = alphas[q + 1] - alphas[q]
        if dq <= 0.0:
            continue
        am = 0.5 * (alphas[q] + alphas[q + 1])
        i = min(max(int(np.floor((p0[0] + am * d0 - origin[0]) / cell[0])), 0), nx - 1)
        j = min(max(int(np.floor((p0[1] + am * d1 - origin[1]) / cell[1])), 0), ny - 1)
        k = min(max(int(np.floor((p0[2] + am * d2 - origin[2]) / cell[2])), 0), nz - 1)
        total += dq * length * slow[i, j, k]
    return total


@njit(cache=True)
def _across(prev, nxt):
    """Two unit vectors (u, w) perpendicular to the chord prev-next, as six scalars."""
    t0 = nxt[0] - prev[0]
    t1 = nxt[1] - prev[1]
    t2 = nxt[2] - prev[2]
    norm = max(np.sqrt(t0 * t0 + t1 * t1 + t2 * t2), 1e-300)
    t0 /= norm
    t1 /= norm
    t2 /= norm
    # start from the axis least aligned with the chord
    if abs(t0) <= abs(t1) and abs(t0) <= abs(t2):
        u0, u1, u2 = 1.0 - t0 * t0, -t0 * t1, -t0 * t2
    elif abs(t1) <= abs(t2):
        u0, u1, u2 = -t1 * t0, 1.0 - t1 * t1, -t1 * t2
    else:
        u0, u1, u2 = -t2 * t0, -t2 * t1, 1.0 - t2 * t2
    norm = np.sqrt(u0 * u0 + u1 * u1 + u2 * u2)
    u0 /= norm
    u1 /= norm
    u2 /= norm
    return u0, u1, u2, t1 * u2 - t2 * u1, t2 * u0 - t0 * u2, t0 * u1 - t1 * u0


@njit(cache=True)
def _bend_one(points, origin, cell, slow, delta0, delta_min, max_sweeps, tolerance):
    """Bend one polyline in place (end points fixed); returns its time, ns."""
    n = points.shape[0]
    seg = np.empty(n - 1)
    scratch = np.empty(3 * _MAX_CROSSINGS + 2)
    for s in range(n - 1):
        seg[s] = _segment_time(points[s], points[s + 1], origin, cell, slow, scratch)
    delta = delta0
    trial = np.empty(3)
    sweeps = 0
    while delta >= delta_min and sweeps < max_sweeps:
        sweeps += 1
        gained = 0.0
        for i in range(1, n - 1):
            u0, u1, u2, w0, w1, w2 = _across(points[i - 1], points[i + 1])
            best = seg[i - 1] + seg[i]
            best_a = 0.0
            best_b = 0.0
            left = 0.0
            right = 0.0
            for m in range(4):
                ca = delta if m == 0 else (-delta if m == 1 else 0.0)
                cb = delta if m == 2 else (-delta if m == 3 else 0.0)
                trial[0] = points[i, 0] + ca * u0 + cb * w0
                trial[1] = points[i, 1] + ca * u1 + cb * w1
                trial[2] = points[i, 2] + ca * u2 + cb * w2
                t0 = _segment_time(points[i - 1], trial, origin, cell, slow, scratch)
                t1 = _segment_time(trial, points[i + 1], origin, cell, slow, scratch)
                if t0 + t1 < best - 1e-12:
                    best = t0 + t1
                    best_a = ca
                    best_b = cb
                    left = t0
                    right = t1
            if best_a != 0.0 or best_b != 0.0:
                gained += seg[i - 1] + seg[i] - best
                points[i, 0] += best_a * u0 + best_b * w0
                points[i, 1] += best_a * u1 + best_b * w1
                points[i, 2] += best_a * u2 + best_b * w2
                seg[i - 1] = left
                seg[i] = right
        if gained <= tolerance:
            delta *= 0.5
    return np.sum(seg)


def _resample(polyline, spacing_m):
    """Points evenly spaced along a polyline (end points kept), at most ``spacing_m`` apart."""
    p = np.asarray(polyline, dtype=float)
    step = np.linalg.norm(np.diff(p, axis=0), axis=1)
    along = np.concatenate([[0.0], np.cumsum(step)])
    total = along[-1]
    n = max(int(np.ceil(total / spacing_m)), 2)
    s = np.linspace(0.0, total, n + 1)
    return np.stack([np.interp(s, along, p[:, a]) for a in range(3)], axis=1)


def _detours(start, end, spacing_m):
    """Start paths that leave the straight line A-B sideways: a half-sine bulge
    of a quarter of the distance in four directions across it."""
    chord = np.linalg.norm(end - start)
    n = max(int(np.ceil(chord / spacing_m)), 2)
    s = np.linspace(0.0, 1.0, n + 1)[:, None]
    line = start + s * (end - start)
    u0, u1, u2, w0, w1, w2 = _across(start, end)
    bulge = 0.25 * chord * np.sin(np.pi * s)
    return [line + sign * bulge * np.array(direction)
            for direction in ((u0, u1, u2), (w0, w1, w2)) for sign in (1.0, -1.0)]


def bend_rays(grid: Grid, slowness_ns_per_m, polylines, *, reference_ns=None, retry_above: float = 0.01,
              spacing_fraction: float = 0.5, delta_fraction: float = 0.25, delta_min_fraction: float = 0.01,
              tolerance_ns: float = 1e-3, max_sweeps: int = 100):
    """Bend polylines to paths of locally least time through the model's cells.

    Parameters
    ----------
    grid : Grid
    slowness_ns_per_m : ndarray, shape grid.shape
        Slowness of each cell, ns/m (constant inside a cell).
    polylines : list of ndarray (k_i, 3)
        Start paths (traced rays), metres; their end points stay where they are.
    reference_ns : array_like, shape (n,), optional
        An estimate of each first arrival (the field's time). Where the bent
        path is later than it by more than ``retry_above`` (a fraction), the
        path is stuck in a later local minimum (a ray traced straight into a
        slow body from right behind it, where the paths around it tie): four
        detours around the straight line are bent as well and the fastest
        result is kept.
    spacing_fraction : float
        The paths are resampled to points at most this many cell sizes apart.
    delta_fraction, delta_min_fraction : float
        First and last trial move of a point, in cell sizes.
    tolerance_ns : float
        A sweep that gains less than this halves the trial move.
    max_sweeps : int
        Most sweeps over the points of one path.

    Returns
    -------
    bent : list of ndarray (m_i, 3)
        The bent paths, metres.
    time_ns : ndarray, shape (n,)
        Time along each bent path: the sum of its exact per-cell lengths times
        the slowness (equal to ``polyline_matrix(grid, bent) @ s`` to rounding).
    """
    slow = np.ascontiguousarray(np.asarray(slowness_ns_per_m, dtype=float).reshape(grid.shape))
    origin = np.asarray(grid.origin_m, dtype=float)
    cell = np.asarray(grid.cell_m, dtype=float)
    size = float(cell.min())
    settings = (delta_fraction * size, delta_min_fraction * size, int(max_sweeps), float(tolerance_ns))
    bent, times = [], np.empty(len(polylines))
    for r, line in enumerate(polylines):
        points, times[r] = _bend_coarse_to_fine(line, (origin, cell, slow), spacing_fraction * size, settings)
        if reference_ns is not None and times[r] > reference_ns[r] * (1.0 + retry_above):
            for start in _detours(points[0], points[-1], spacing_fraction * size):
                other, t = _bend_coarse_to_fine(start, (origin, cell, slow), spacing_fraction * size, settings)
                if t < times[r]:
                    times[r], points = t, other
        bent.append(points)
    return bent, times


def _bend_coarse_to_fine(line, model, spacing_m, settings):
    """Bend a path first with few points, then with twice as many each time
    down to ``spacing_m`` (Um and Thurber 1987 double the points the same way):
    a few long segments move the path as a whole, past the corners of cells
    that one short segment cannot get round."""
    origin, cell, slow = model
    delta0, delta_min, max_sweeps, tolerance = settings
    line = np.asarray(line, dtype=float)
    chord = float(np.linalg.norm(line[-1] - line[0]))
    spacing = max(chord / 4.0, spacing_m)
    while True:
        points = np.ascontiguousarray(_resample(line, spacing))
        first = max(delta0, 0.25 * spacing)
        time_ns = _bend_one(points, origin, cell, slow, first, delta_min, max_sweeps, tolerance)
        if spacing <= spacing_m:
            return points, time_ns
        line = points
        spacing = max(0.5 * spacing, spacing_m)
