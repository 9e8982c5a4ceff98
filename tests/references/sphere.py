"""Exact first-arrival times past a sphere of constant velocity in a homogeneous medium.

An outside reference for the forward model next to sharp bodies. Between two
points A and B outside a sphere (centre O, radius R, velocity v1) in a medium
of velocity v0, the first arrival is the least time over all paths (Fermat's
principle). Inside each medium the fastest path is straight, so the candidates
are:

- the straight segment A-B, timed exactly (its chord inside the sphere at v1,
  the rest at v0); when it misses the sphere this is the answer for a slow
  sphere;
- paths refracted through the sphere: straight segments A-P, P-Q, Q-B with P
  and Q on the sphere's surface; the polyline is timed exactly (each segment's
  length inside the sphere at v1, outside at v0) and minimised over P and Q
  with ``scipy.optimize.minimize`` from several starts, so that the minimum
  is an upper bound of the true time that equals it at the true ray;
- for a slow sphere (v1 < v0) whose body blocks the straight segment, the
  shortest path around it at v0: the two tangent segments joined by the
  great-circle arc in the plane through A, B and O (Cerveny 2001, the
  shortest path around a convex obstacle; a diffracted, creeping path).

References
----------
.. [1] Fermat's principle of least time; Cerveny, V. (2001), Seismic Ray
   Theory, Cambridge University Press, chapter 3 (ray paths as stationary
   travel time) and the shortest-path construction around a convex body.
.. [2] Nocedal, J. and Wright, S. J. (2006), Numerical Optimization, 2nd ed.,
   Springer (the quasi-Newton minimiser behind ``scipy.optimize.minimize``).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import minimize


def _chord_inside(p, q, centre, radius):
    """Length of the part of segment p-q that lies inside the sphere."""
    d = q - p
    length = np.linalg.norm(d)
    if length == 0.0:
        return 0.0
    u = d / length
    f = p - centre
    b = float(f @ u)
    c = float(f @ f) - radius * radius
    disc = b * b - c
    if disc <= 0.0:
        return 0.0
    root = np.sqrt(disc)
    t0, t1 = max(-b - root, 0.0), min(-b + root, length)
    return max(t1 - t0, 0.0)


def polyline_time_ns(points, centre, radius, v_inside, v_outside):
    """Exact time along a polyline: each segment's length inside the sphere at v_inside, the rest at v_outside."""
    total = 0.0
    for p, q in zip(points[:-1], points[1:]):
        inside = _chord_inside(p, q, centre, radius)
        total += inside / v_inside + (np.linalg.norm(q - p) - inside) / v_outside
    return total


def _on_sphere(angles, centre, radius):
    theta, phi = angles
    return centre + radius * np.array([np.sin(theta) * np.cos(phi), np.sin(theta) * np.sin(phi), np.cos(theta)])


def _angles_of(point, centre):
    d = point - centre
    d = d / np.linalg.norm(d)
    return np.array([np.arccos(np.clip(d[2], -1.0, 1.0)), np.arctan2(d[1], d[0])])


def refracted_time_ns(a, b, centre, radius, v_inside, v_outside, *, starts=12, seed=0):
    """Least time over polylines A-P-Q-B with P, Q on the sphere (several starts)."""
    a, b, centre = (np.asarray(x, dtype=float) for x in (a, b, centre))

    def cost(x):
        p = _on_sphere(x[:2], centre, radius)
        q = _on_sphere(x[2:], centre, radius)
        return polyline_time_ns([a, p, q, b], centre, radius, v_inside, v_outside)

    rng = np.random.default_rng(seed)
    guesses = []
    # the points of the sphere nearest A and B, and where the straight line enters and leaves
    guesses.append(np.concatenate([_angles_of(a, centre), _angles_of(b, centre)]))
    mid = centre + 0.0
    for t in (0.3, 0.5, 0.7):
        m = a + t * (b - a)
        if np.linalg.norm(m - centre) > 1e-9:
            mid = m
        guesses.append(np.concatenate([_angles_of(a + 0.5 * (mid - a), centre), _angles_of(b + 0.5 * (mid - b), centre)]))
    while len(guesses) < starts:
        guesses.append(np.concatenate([[np.arccos(rng.uniform(-1, 1)), rng.uniform(-np.pi, np.pi)],
                                       [np.arccos(rng.uniform(-1, 1)), rng.uniform(-np.pi, np.pi)]]))
    best = np.inf
    for x0 in guesses:
        res = minimize(cost, x0, method="Nelder-Mead",
                       options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000, "maxfev": 40000})
        best = min(best, float(res.fun))
    return best


def around_time_ns(a, b, centre, radius, v_outside):
    """Shortest path around the sphere at v_outside: tangent segments joined by a great-circle arc.

    Valid when the straight segment A-B crosses the sphere (otherwise the straight
    segment is shorter); A and B must lie outside the sphere.
    """
    a, b, centre = (np.asarray(x, dtype=float) for x in (a, b, centre))
    da, db = np.linalg.norm(a - centre), np.linalg.norm(b - centre)
    cos_aob = float((a - centre) @ (b - centre)) / (da * db)
    aob = np.arccos(np.clip(cos_aob, -1.0, 1.0))
    arc = aob - np.arccos(radius / da) - np.arccos(radius / db)
    if arc <= 0:
        return np.linalg.norm(b - a) / v_outside
    return (np.sqrt(da * da - radius * radius) + np.sqrt(db * db - radius * radius) + radius * arc) / v_outside


def first_arrival_ns(a, b, centre, radius, v_inside, v_outside, *, starts=12, seed=0):
    """Exact first-arrival time (ns) from A to B past the sphere; A and B outside it."""
    a, b, centre = (np.asarray(x, dtype=float) for x in (a, b, centre))
    for name, p in (("a", a), ("b", b)):
        if np.linalg.norm(p - centre) <= radius:
            raise ValueError(f"{name} lies inside the sphere")
    straight = polyline_time_ns([a, b], centre, radius, v_inside, v_outside)
    crosses = _chord_inside(a, b, centre, radius) > 0.0
    candidates = [straight]
    if v_inside > v_outside or crosses:
        candidates.append(refracted_time_ns(a, b, centre, radius, v_inside, v_outside, starts=starts, seed=seed))
    if v_inside < v_outside and crosses:
        candidates.append(around_time_ns(a, b, centre, radius, v_outside))
    return min(candidates)
