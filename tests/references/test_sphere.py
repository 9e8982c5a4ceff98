"""Checks of the exact sphere reference (tests/references/sphere.py) against closed forms.

- Symmetric pair through the centre of a fast sphere: the straight ray is the
  least-time path, t = (d - 2R)/v0 + 2R/v1 (Fermat's principle; any path must
  cover at least d - 2R outside the sphere, and at most 2R fits inside).
- Symmetric pair behind a slow sphere: tangent segments and the great-circle
  arc, t = (2 sqrt(a^2 - R^2) + R (pi - 2 arccos(R/a))) / v0 with a the
  distance of each point from the centre (the shortest path around a convex
  obstacle; Cerveny 2001, Seismic Ray Theory).
- The refracted ray found by the minimiser obeys Snell's law at its entry
  point: sin(i0)/v0 = sin(i1)/v1 (Snell's law of refraction; any optics or
  seismology text, e.g. Telford, Geldart and Sheriff 1990, Applied Geophysics).
- A pair whose straight line misses a slow sphere travels straight.
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from tests.references.sphere import _on_sphere, first_arrival_ns, polyline_time_ns

R, V0 = 2.5, 0.115
AIR, WATER = 0.299792458, 0.033  # c (SI definition); fresh water (Davis and Annan 1989)
CENTRE = np.zeros(3)


def test_fast_sphere_through_the_centre():
    a, b = np.array([-9.0, 0, 0]), np.array([11.0, 0, 0])
    expected = (20.0 - 2 * R) / V0 + 2 * R / AIR
    assert first_arrival_ns(a, b, CENTRE, R, AIR, V0) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("distance", [4.0, 8.0, 15.0])
def test_slow_sphere_is_passed_around(distance):
    a, b = np.array([0, -distance, 0]), np.array([0, distance, 0])
    expected = (2 * np.sqrt(distance**2 - R**2) + R * (np.pi - 2 * np.arccos(R / distance))) / V0
    assert first_arrival_ns(a, b, CENTRE, R, WATER, V0) == pytest.approx(expected, rel=1e-9)


def test_pair_missing_a_slow_sphere_travels_straight():
    a, b = np.array([-10.0, 0, 3.0]), np.array([10.0, 0, 3.0])
    assert first_arrival_ns(a, b, CENTRE, R, WATER, V0) == pytest.approx(20.0 / V0, rel=1e-12)


def test_refracted_ray_obeys_snell_at_entry():
    a, b = np.array([-10.0, 0.0, 1.5]), np.array([9.0, 0.0, 2.0])

    def cost(x):
        return polyline_time_ns([a, _on_sphere(x[:2], CENTRE, R), _on_sphere(x[2:], CENTRE, R), b],
                                CENTRE, R, AIR, V0)

    best = min((minimize(cost, x0, method="Nelder-Mead",
                         options={"xatol": 1e-12, "fatol": 1e-14, "maxiter": 40000, "maxfev": 80000})
                for x0 in ([1.2, np.pi, 1.2, 0.0], [1.0, 3.0, 1.0, 0.2])), key=lambda r: r.fun)
    p = _on_sphere(best.x[:2], CENTRE, R)
    q = _on_sphere(best.x[2:], CENTRE, R)
    normal = p / R
    incoming = (p - a) / np.linalg.norm(p - a)
    inside = (q - p) / np.linalg.norm(q - p)
    sin_i0 = np.linalg.norm(np.cross(incoming, normal))
    sin_i1 = np.linalg.norm(np.cross(inside, normal))
    assert sin_i0 / V0 == pytest.approx(sin_i1 / AIR, rel=2e-3)
    assert best.fun == pytest.approx(first_arrival_ns(a, b, CENTRE, R, AIR, V0), abs=1e-6)


def test_fast_sphere_beside_the_line_still_speeds_the_first_arrival():
    # Fermat: a fast body near the straight line can only make the first arrival earlier
    a, b = np.array([-10.0, 0, 3.0]), np.array([10.0, 0, 3.0])
    t = first_arrival_ns(a, b, CENTRE, R, AIR, V0)
    assert t < 20.0 / V0
    # and never earlier than the whole distance at the fast velocity
    assert t > 20.0 / AIR


def test_points_inside_are_refused():
    with pytest.raises(ValueError, match="inside the sphere"):
        first_arrival_ns(np.zeros(3), np.array([10.0, 0, 0]), CENTRE, R, AIR, V0)
