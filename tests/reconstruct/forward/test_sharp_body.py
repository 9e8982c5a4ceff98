"""Delays of one sharp ellipsoid (reconstruct.forward.sharp_body) against outside references.

* Spheres: the exact first arrival past a sphere (tests/references/sphere.py:
  Fermat's principle with straight, refracted-through and around paths,
  minimised with scipy.optimize from several starts; Cerveny, V. (2001),
  Seismic Ray Theory, Cambridge University Press). Air-filled
  (0.299792458 m/ns, the SI speed of light), water-filled (0.033 m/ns) in rock
  of 0.115 m/ns (Davis and Annan 1989, tests/REFERENCES.md), and a mild slow
  contrast (0.1 m/ns) where the path refracted through the body, which the
  module does not search, differs most from the straight one.
* Ellipsoids: brute-force minimisation with scipy.optimize over the two
  surface points (fast body), and for a slow body the shortest polyline from
  A to B with every vertex outside the body (scipy.optimize.minimize, SLSQP,
  with the constraint written in the body's unit coordinates), which is at
  most the true path around (segments may cut a corner of the body), so the
  module's planar construction must lie at or above it, and above by little.
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from reconstruct.forward.sharp_body import Ellipsoid, ellipsoid_delay_ns, segment_chord_m
from tests.references.sphere import first_arrival_ns

ROCK = 0.115
S0 = 1.0 / ROCK


def _pairs(rng, n, axes, reach=1.3):
    """Pairs whose lines pass the body's centre at up to ``reach`` times its size (cross, graze, miss)."""
    d = rng.normal(size=(n, 3))
    d /= np.linalg.norm(d, axis=1)[:, None]
    side = rng.normal(size=(n, 3))
    side -= (side * d).sum(1)[:, None] * d
    side /= np.linalg.norm(side, axis=1)[:, None]
    mid = rng.uniform(0.0, reach, n)[:, None] * side * np.asarray(axes)
    return mid - rng.uniform(5.0, 9.0, n)[:, None] * d, mid + rng.uniform(5.0, 9.0, n)[:, None] * d


@pytest.mark.parametrize("v_body, tolerance_ns", [(0.299792458, 1e-3), (0.033, 1e-3), (0.1, 0.05)])
def test_sphere_delays_match_the_exact_reference(v_body, tolerance_ns):
    rng = np.random.default_rng(7)
    radius, centre = 2.5, np.array([10.0, 10.0, 10.0])
    a, b = _pairs(rng, 3, (radius,) * 3)
    a, b = a + centre, b + centre
    # two pairs that graze: the line touches the surface
    for k, offset in ((0, 1.0), (1, 0.999)):
        d = np.array([1.0, 0.0, 0.0])
        a[k], b[k] = centre + [0, offset * radius, 0] - 7 * d, centre + [0, offset * radius, 0] + 7 * d
    body = Ellipsoid(tuple(centre), (radius,) * 3, azimuth_deg=23.0)
    delay = ellipsoid_delay_ns(body, a, b, S0, 1.0 / v_body)
    exact = np.array([first_arrival_ns(a[i], b[i], centre, radius, v_body, ROCK, starts=3) for i in range(len(a))])
    exact -= S0 * np.linalg.norm(b - a, axis=1)
    assert np.abs(delay - exact).max() < tolerance_ns
    assert (np.sign(delay[np.abs(exact) > 0.01]) == np.sign(v_body - ROCK) * -1).all()


def _polyline_time(body, points, s1):
    lengths = np.linalg.norm(np.diff(points, axis=0), axis=1)
    chords = segment_chord_m(body, points[:-1], points[1:])
    return float((chords * s1 + (lengths - chords) * S0).sum())


def test_fast_ellipsoid_delays_match_brute_force():
    rng = np.random.default_rng(3)
    body = Ellipsoid((0.0, 0.0, 0.0), (4.0, 2.5, 1.8), azimuth_deg=35.0, dip_deg=10.0)
    a, b = _pairs(rng, 6, body.semi_axes_m)
    s1 = 1.0 / 0.299792458
    delay = ellipsoid_delay_ns(body, a, b, S0, s1)
    m, centre = body.matrix(), np.zeros(3)
    for i in range(len(a)):
        def cost(x):
            up = np.array([np.sin(x[0]) * np.cos(x[1]), np.sin(x[0]) * np.sin(x[1]), np.cos(x[0])])
            uq = np.array([np.sin(x[2]) * np.cos(x[3]), np.sin(x[2]) * np.sin(x[3]), np.cos(x[2])])
            return _polyline_time(body, np.array([a[i], centre + m @ up, centre + m @ uq, b[i]]), s1)
        def angles(p):
            u = body.to_unit(p[None])[0]
            u /= np.linalg.norm(u)
            return [np.arccos(u[2]), np.arctan2(u[1], u[0])]

        mid = 0.5 * (a[i] + b[i])
        starts = [angles(a[i]) + angles(b[i]), angles(0.3 * a[i] + 0.7 * mid) + angles(0.3 * b[i] + 0.7 * mid)]
        starts += [list(rng.uniform([0, -np.pi] * 2, [np.pi, np.pi] * 2)) for _ in range(3)]
        best = min(minimize(cost, x0, method="Nelder-Mead",
                            options={"xatol": 1e-9, "fatol": 1e-11, "maxfev": 20000}).fun for x0 in starts)
        best = min(best, _polyline_time(body, np.array([a[i], b[i]]), s1))
        brute = best - S0 * np.linalg.norm(b[i] - a[i])
        # the module's value is the time of a real path or more: not below the brute force by more than
        # its convergence, and not above it
        assert delay[i] == pytest.approx(brute, abs=0.02)


def test_slow_ellipsoid_path_around_is_close_to_the_shortest_outside_polyline():
    rng = np.random.default_rng(5)
    body = Ellipsoid((0.0, 0.0, 0.0), (4.0, 2.5, 1.8), azimuth_deg=35.0)
    a, b = _pairs(rng, 12, body.semi_axes_m, reach=0.6)
    s1 = 1.0 / 0.033
    delay = ellipsoid_delay_ns(body, a, b, S0, s1)
    blocked = np.flatnonzero(segment_chord_m(body, a, b) > 0.5)[:1]
    assert blocked.size >= 1
    k = 16
    for i in blocked:
        around = S0 * np.linalg.norm(b[i] - a[i]) + delay[i]
        best = np.inf
        for start in range(2):
            bulge = rng.normal(size=3)
            bulge -= bulge @ (b[i] - a[i]) / np.linalg.norm(b[i] - a[i]) ** 2 * (b[i] - a[i])
            bulge *= 6.0 / np.linalg.norm(bulge)
            t = np.linspace(0, 1, k + 2)[1:-1, None]
            init = a[i] + t * (b[i] - a[i]) + np.sin(np.pi * t) * bulge

            def length(x):
                pts = np.vstack([a[i], x.reshape(k, 3), b[i]])
                return S0 * np.linalg.norm(np.diff(pts, axis=0), axis=1).sum()

            outside = {"type": "ineq", "fun": lambda x: (body.to_unit(x.reshape(k, 3)) ** 2).sum(1) - 1.0}
            res = minimize(length, init.ravel(), method="SLSQP", constraints=[outside],
                           options={"maxiter": 500, "ftol": 1e-10})
            if res.success:
                best = min(best, res.fun)
        # the brute force cuts corners (a lower bound up to its discretisation); the planar construction is a
        # real path outside the body (an upper bound). The true shortest path around an ellipsoid is not
        # planar: measured gap 1.0-2.1 % of the time on these pairs (more planes do not close it)
        assert best * (1 - 2e-3) <= around <= best * 1.025


def test_delays_are_fast_enough_and_reciprocal():
    rng = np.random.default_rng(11)
    body = Ellipsoid((0.0, 0.0, 0.0), (3.0, 2.0, 1.5), azimuth_deg=60.0)
    a, b = _pairs(rng, 2000, body.semi_axes_m, reach=2.0)
    import time
    started = time.perf_counter()
    delay = ellipsoid_delay_ns(body, a, b, S0, 1.0 / 0.299792458)
    assert time.perf_counter() - started < 3.0  # 0.4 s measured on 2 shared cores
    np.testing.assert_allclose(ellipsoid_delay_ns(body, b[:200], a[:200], S0, 1.0 / 0.299792458),
                               delay[:200], atol=1e-6)
