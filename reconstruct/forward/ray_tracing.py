"""Bent rays: tracing first-arrival rays back through a travel-time field.

A ray from a receiver back to its source follows the steepest descent of the
source's travel-time field ``T``: ``dx/ds = -grad T / |grad T|`` (the ray is
normal to the wavefronts). Steps are a fraction of the lattice spacing; the
gradient is that of the trilinear interpolant. Once within one step of the
source the ray ends with a straight segment onto it.

Each polyline is then cut at the cell faces it crosses (Siddon's parametric
crossings, per segment) into exact per-cell path lengths, giving rows in the
same sparse format as :func:`reconstruct.forward.straight_rays.straight_ray_matrix`.

References
----------
.. [1] Cerveny, V. (2001), Seismic Ray Theory, Cambridge University Press
   (rays are orthogonal trajectories of the wavefronts in isotropic media).
.. [2] Siddon, R. L. (1985), Fast calculation of the exact radiological path
   for a three-dimensional CT array, Medical Physics 12(2), 252-255.
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp
from numba import njit

from reconstruct.model.grid import Grid
from reconstruct.forward.time_field import TimeField

__all__ = ["trace_rays", "polyline_matrix", "ray_time_ns"]


@njit(cache=True)
def _node_gradient_axis(times, spacing, i, j, k, a):
    """Central difference along axis ``a`` at lattice point (i, j, k); one-sided at edges."""
    n = times.shape[a]
    c = i if a == 0 else (j if a == 1 else k)
    lo = c - 1 if c > 0 else c
    hi = c + 1 if c < n - 1 else c
    if hi == lo:
        return 0.0
    if a == 0:
        return (times[hi, j, k] - times[lo, j, k]) / ((hi - lo) * spacing[0])
    if a == 1:
        return (times[i, hi, k] - times[i, lo, k]) / ((hi - lo) * spacing[1])
    return (times[i, j, hi] - times[i, j, lo]) / ((hi - lo) * spacing[2])


@njit(cache=True)
def _gradient(times, origin, spacing, px, py, pz):
    """Trilinear interpolation of central-difference gradients at point p.

    Smoother than the gradient of the trilinear interpolant itself, which
    jumps at every lattice face and bends rays near sources. Scalars in and
    out: the per-step small arrays of an earlier version cost most of the
    tracing time in allocation.
    """
    nx, ny, nz = times.shape
    i0 = 0
    j0 = 0
    k0 = 0
    fx = 0.0
    fy = 0.0
    fz = 0.0
    for a in range(3):
        pa = px if a == 0 else (py if a == 1 else pz)
        ua = (pa - origin[a]) / spacing[a]
        hi = times.shape[a] - 1
        ua = min(max(ua, 0.0), float(hi))
        ia = min(int(np.floor(ua)), max(hi - 1, 0))
        if a == 0:
            i0 = ia
            fx = ua - ia
        elif a == 1:
            j0 = ia
            fy = ua - ia
        else:
            k0 = ia
            fz = ua - ia
    gx = 0.0
    gy = 0.0
    gz = 0.0
    for dx in range(2):
        wx = fx if dx else 1.0 - fx
        for dy in range(2):
            wy = fy if dy else 1.0 - fy
            for dz in range(2):
                wz = fz if dz else 1.0 - fz
                w = wx * wy * wz
                if w == 0.0:
                    continue
                i = min(i0 + dx, nx - 1)
                j = min(j0 + dy, ny - 1)
                k = min(k0 + dz, nz - 1)
                gx += w * _node_gradient_axis(times, spacing, i, j, k, 0)
                gy += w * _node_gradient_axis(times, spacing, i, j, k, 1)
                gz += w * _node_gradient_axis(times, spacing, i, j, k, 2)
    return gx, gy, gz


@njit(cache=True)
def _trace(times, origin, spacing, source, start, step, end_radius, max_steps, out):
    """Steepest descent from ``start`` to ``source``; fills ``out`` (max_steps+2, 3).

    Returns (number of points, reached): reached is False when the step limit
    ran out or the gradient vanished; the caller then falls back to a straight ray.
    """
    px = start[0]
    py = start[1]
    pz = start[2]
    out[0, 0] = px
    out[0, 1] = py
    out[0, 2] = pz
    n = 1
    for _ in range(max_steps):
        d_src = np.sqrt((source[0] - px) ** 2 + (source[1] - py) ** 2 + (source[2] - pz) ** 2)
        if d_src <= end_radius:
            out[n, 0] = source[0]
            out[n, 1] = source[1]
            out[n, 2] = source[2]
            return n + 1, True
        gx, gy, gz = _gradient(times, origin, spacing, px, py, pz)
        norm = np.sqrt(gx * gx + gy * gy + gz * gz)
        if norm == 0.0 or not np.isfinite(norm):
            return n, False
        px = px - step * gx / norm
        py = py - step * gy / norm
        pz = pz - step * gz / norm
        out[n, 0] = px
        out[n, 1] = py
        out[n, 2] = pz
        n += 1
    return n, False


def trace_rays(field: TimeField, receivers_xyz_m, *, step_fraction: float = 0.5, max_length_factor: float = 4.0):
    """Trace rays from receivers back to the field's source.

    Parameters
    ----------
    field : TimeField
        First-arrival times from one source.
    receivers_xyz_m : array_like, shape (n, 3)
    step_fraction : float
        Step length as a fraction of the smallest lattice spacing.
    max_length_factor : float
        A ray may be at most this many times longer than the straight line
        (plus 10 steps) before it is given up.

    Returns
    -------
    polylines : list of ndarray (k_i, 3)
        From receiver to source, metres.
    reached : ndarray of bool
        False where the descent did not reach the source; such a polyline is
        replaced by the straight segment.
    """
    rx = np.atleast_2d(np.asarray(receivers_xyz_m, dtype=float))
    times = np.ascontiguousarray(field.times_ns, dtype=float)
    origin = np.asarray(field.origin_m, dtype=float)
    spacing = np.asarray(field.spacing_m, dtype=float)
    source = np.asarray(field.source_xyz_m, dtype=float)
    step = step_fraction * float(spacing.min())
    # within two lattice spacings of the source the field is too coarse to steer by
    end_radius = max(2.0 * float(spacing.max()), 1.5 * step)
    straight = np.linalg.norm(rx - source, axis=1)
    max_steps = (max_length_factor * straight / step).astype(np.int64) + 10
    offsets = np.zeros(rx.shape[0] + 1, dtype=np.int64)
    np.cumsum(max_steps + 2, out=offsets[1:])
    buffer = np.empty((int(offsets[-1]), 3))
    counts = np.zeros(rx.shape[0], dtype=np.int64)
    reached = np.zeros(rx.shape[0], dtype=bool)
    _trace_all((times, origin, spacing, source), rx, step, end_radius, max_steps, (offsets, buffer, counts, reached))
    polylines = [
        buffer[offsets[i]:offsets[i] + counts[i]].copy() if reached[i] else np.vstack([rx[i], source])
        for i in range(rx.shape[0])
    ]
    return polylines, reached


@njit(cache=True)
def _trace_all(field, receivers, step, end_radius, max_steps, output):
    """Trace every receiver in one compiled loop; ray i fills out[offsets[i]:].

    ``field`` is ``(times, origin, spacing, source)`` of the time field and
    ``output`` ``(offsets, out, counts, reached)``, filled in place.
    """
    times, origin, spacing, source = field
    offsets, out, counts, reached = output
    for i in range(receivers.shape[0]):
        view = out[offsets[i]:offsets[i + 1]]
        n, ok = _trace(times, origin, spacing, source, receivers[i], step, end_radius, max_steps[i], view)
        counts[i] = n
        reached[i] = ok


@njit(cache=True)
def _polyline_cells(points, starts, origin, cell, shape, slowness, face_tolerance, rows, cols, lens):
    """Exact per-cell lengths of all polylines in one compiled loop.

    Polyline r is ``points[starts[r]:starts[r + 1]]``. Returns the number of
    entries written to rows, cols and lens (sized by the caller for the worst case).
    """
    count = 0
    for s in range(points.shape[0] - 1):
        ray = np.searchsorted(starts, s, side="right") - 1
        if s + 1 >= starts[ray + 1]:
            continue  # the last point of a polyline starts no segment
        p0 = points[s]
        p1 = points[s + 1]
        d = p1 - p0
        length = np.sqrt(np.sum(d * d))
        if length == 0.0:
            continue
        crossings = 0
        for a in range(3):
            crossings += abs(int(np.floor((p1[a] - origin[a]) / cell[a]))
                             - int(np.floor((p0[a] - origin[a]) / cell[a])))
        alphas = np.empty(crossings + 2)
        na = 2
        alphas[0] = 0.0
        alphas[1] = 1.0
        for a in range(3):
            if d[a] == 0.0:
                continue
            i0 = int(np.floor((p0[a] - origin[a]) / cell[a]))
            i1 = int(np.floor((p1[a] - origin[a]) / cell[a]))
            lo = min(i0, i1) + 1
            hi = max(i0, i1)
            for kp in range(lo, hi + 1):
                al = (origin[a] + kp * cell[a] - p0[a]) / d[a]
                if 0.0 < al < 1.0:
                    alphas[na] = al
                    na += 1
        seg = np.sort(alphas[:na])
        for q in range(na - 1):
            da = seg[q + 1] - seg[q]
            if da * length <= 1e-12:
                continue
            am = 0.5 * (seg[q] + seg[q + 1])
            ijk = np.empty(3, np.int64)
            for a in range(3):
                idx = int(np.floor((p0[a] + am * d[a] - origin[a]) / cell[a]))
                ijk[a] = min(max(idx, 0), shape[a] - 1)
            if face_tolerance > 0.0:
                # A piece that runs along a cell face (both ends within the tolerance
                # of it) is a head wave on that face: it travels in the faster of the
                # two cells sharing the face (Podvin and Lecomte, 1991).
                for a in range(3):
                    ua = p0[a] + seg[q] * d[a]
                    ub = p0[a] + seg[q + 1] * d[a]
                    lower = origin[a] + ijk[a] * cell[a]
                    for side in range(2):
                        face = lower + side * cell[a]
                        if (abs(ua - face) <= face_tolerance * cell[a]
                                and abs(ub - face) <= face_tolerance * cell[a]):
                            other = ijk[a] + (1 if side == 1 else -1)
                            if 0 <= other < shape[a]:
                                here = slowness[ijk[0], ijk[1], ijk[2]]
                                nb = ijk.copy()
                                nb[a] = other
                                if slowness[nb[0], nb[1], nb[2]] < here:
                                    ijk[a] = other
                            break
            flat = (ijk[0] * shape[1] + ijk[1]) * shape[2] + ijk[2]
            rows[count] = ray
            cols[count] = flat
            lens[count] = da * length
            count += 1
    return count


def polyline_matrix(grid: Grid, polylines, *, slowness_ns_per_m=None, face_tolerance: float = 0.25) -> sp.csr_matrix:
    """Per-cell path lengths of polylines, shape (n_rays, grid.n_cells), metres.

    Points outside the grid are clamped into the edge cells (rays are traced
    inside the model box). With ``slowness_ns_per_m`` (shape grid.shape), a piece
    of a ray that runs along a cell face, within ``face_tolerance`` cell sizes,
    is given to the faster of the two cells that share the face: a ray traced
    through a travel-time field follows a head wave (the air wave along the
    ground surface above all) only to within a fraction of a cell.
    """
    origin = np.asarray(grid.origin_m, dtype=float)
    cell = np.asarray(grid.cell_m, dtype=float)
    shape = np.asarray(grid.shape, dtype=np.int64)
    if slowness_ns_per_m is None:
        slowness = np.zeros((1, 1, 1))
        face_tolerance = 0.0
    else:
        slowness = np.ascontiguousarray(np.asarray(slowness_ns_per_m, dtype=float).reshape(grid.shape))
    if len(polylines) == 0:
        return sp.csr_matrix((0, grid.n_cells))
    points = np.ascontiguousarray(np.concatenate([np.asarray(p, dtype=float) for p in polylines]))
    starts = np.zeros(len(polylines) + 1, dtype=np.int64)
    np.cumsum([len(p) for p in polylines], out=starts[1:])
    # worst case: every face crossing of every segment starts a new piece
    index = np.floor((points - origin) / cell).astype(np.int64)
    steps = np.abs(np.diff(index, axis=0)).sum(axis=1) + 1
    capacity = int(steps.sum()) + 1
    r = np.empty(capacity, dtype=np.int64)
    c = np.empty(capacity, dtype=np.int64)
    v = np.empty(capacity)
    n = _polyline_cells(points, starts, origin, cell, shape, slowness, float(face_tolerance), r, c, v)
    r, c, v = r[:n], c[:n], v[:n]
    matrix = sp.csr_matrix((v, (r, c)), shape=(len(polylines), grid.n_cells))
    matrix.sum_duplicates()
    return matrix


def ray_time_ns(matrix: sp.csr_matrix, slowness_ns_per_m) -> np.ndarray:
    """Travel time along each ray: path lengths times slowness, ns."""
    return matrix @ np.asarray(slowness_ns_per_m, dtype=float).ravel()
