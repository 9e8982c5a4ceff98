"""Checks of the buried-sphere reference (tests/references/sphere_under_air.py).

- Far from the sphere it gives the half-space first arrivals (direct wave or
  refracted air wave; Telford, Geldart and Sheriff 1990, Applied Geophysics,
  2nd ed., refraction section, from memory).
- Beside the sphere, where the path through the sphere and then along the
  ground is the first arrival, scikit-fmm (a general-purpose fast-marching
  library from the package registry) on 0.25 m cells agrees within its own
  error (measured: 0.05 and 0.5-0.7 ns late at 0.25 m, -0.06 and 0.2-0.25 ns
  at 0.125 m), while the half-space times are 7.9 to 10.5 ns late: the third
  family of paths is needed and right.
- A geometry whose air-wave leg crosses the sphere is refused.
"""

import numpy as np
import pytest
import skfmm  # general-purpose reference library (test extra)
from scipy.interpolate import RegularGridInterpolator

from tests.references.air_halfspace import half_space_first_arrival_ns
from tests.references.sphere_under_air import BuriedSphere, first_arrival_ns

V_ROCK, V_AIR = 0.115, 0.299792458  # limestone (Davis and Annan 1989); c (SI definition)
CASE = BuriedSphere(0.0, (0.0, 0.0, -4.5), 2.0, V_ROCK, V_AIR)
RECEIVERS = np.array([[12.0, 1.0, 0.0], [18.0, -2.0, -1.0], [20.0, 2.0, -3.0], [8.0, 0.0, 0.0]])


@pytest.mark.parametrize("a, b", [([30.0, 0.0, -3.0], [60.0, 5.0, -6.0]), ([30.0, 0.0, 0.0], [40.0, 0.0, -9.0]),
                                  ([25.0, 3.0, -2.0], [27.0, 4.0, -8.0])])
def test_far_from_the_sphere_it_is_the_half_space(a, b):
    expected = half_space_first_arrival_ns(np.array(a), np.array(b), 0.0, V_ROCK, V_AIR)
    assert first_arrival_ns(CASE, a, b)[0] == pytest.approx(float(expected), rel=1e-12)


def test_through_the_sphere_then_along_the_ground_against_scikit_fmm():
    h = 0.25
    axes = [np.arange(lo + h / 2, hi, h) for lo, hi in ((-8, 22), (-6, 6), (-12, 2))]
    X, Y, Z = np.meshgrid(*axes, indexing="ij")
    centre = np.asarray(CASE.centre)
    air = (Z > 0) | ((X - centre[0]) ** 2 + (Y - centre[1]) ** 2 + (Z - centre[2]) ** 2 <= CASE.radius**2)
    source, r0 = np.array([0.3, -3.6, -9.0]), 0.5  # a small ball in rock, timed at the rock velocity
    phi = np.sqrt((X - source[0]) ** 2 + (Y - source[1]) ** 2 + (Z - source[2]) ** 2) - r0
    field = skfmm.travel_time(phi, np.where(air, V_AIR, V_ROCK), dx=h, order=2) + r0 / V_ROCK
    fmm = RegularGridInterpolator(axes, np.asarray(field))(RECEIVERS)
    exact = [first_arrival_ns(CASE, source, b) for b in RECEIVERS]
    assert [family for _, family in exact] == ["sphere + air wave"] * len(RECEIVERS)
    times = np.array([t for t, _ in exact])
    assert np.max(np.abs(fmm - times)) < 1.0, fmm - times
    half_space = half_space_first_arrival_ns(np.tile(source, (len(RECEIVERS), 1)), RECEIVERS, 0.0, V_ROCK, V_AIR)
    assert np.min(half_space - times) > 5.0  # measured 7.9 to 10.5 ns


def test_an_air_wave_leg_through_the_sphere_is_refused():
    with pytest.raises(ValueError, match="crosses the sphere"):
        first_arrival_ns(CASE, [-3.5, 0.5, -10.0], [12.0, 1.0, 0.0])


def test_the_sphere_must_be_buried():
    with pytest.raises(ValueError, match="below the ground"):
        BuriedSphere(0.0, (0.0, 0.0, -1.0), 2.0, V_ROCK, V_AIR)
