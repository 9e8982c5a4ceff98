"""Checks of the air half-space reference (tests/references/air_halfspace.py).

- The worked figure of tests/REFERENCES.md: nodes 3 m deep, 44 m apart, rock
  0.115 m/ns: refracted air wave about 195 ns, direct wave about 380 ns
  (head-wave formula, Telford, Geldart and Sheriff 1990, Applied Geophysics,
  2nd ed., refraction section; from memory).
- At the critical offset the head-wave time equals the time of the critically
  reflected path, (d1 + d2) / cos(theta_c) * s_rock (elementary geometry with
  Snell's law, sin(theta_c) = s_air / s_rock).
- Fermat's principle: the formula equals the least time over paths that leave
  the rock at one surface point and re-enter it at another, found by
  scipy.optimize (Nelder-Mead).
- scikit-fmm (a general-purpose fast-marching library from the package
  registry) on a fine 2D grid of rock under air gives the same first arrivals.
"""

import numpy as np
import pytest
import skfmm  # general-purpose reference library (test extra)
from scipy.interpolate import RegularGridInterpolator

from tests.references.air_halfspace import (
    critical_offset_m,
    direct_time_ns,
    fermat_surface_path_ns,
    half_space_first_arrival_ns,
    head_wave_time_ns,
)

V_ROCK, V_AIR = 0.115, 0.299792458  # limestone (Davis and Annan 1989); c (SI definition)
S_ROCK, S_AIR = 1 / V_ROCK, 1 / V_AIR


def test_worked_figure_of_the_references():
    t_head = head_wave_time_ns(44.0, 3.0, 3.0, S_ROCK, S_AIR)
    assert t_head == pytest.approx(195.0, abs=0.5)
    assert direct_time_ns(44.0, 3.0, 3.0, S_ROCK) == pytest.approx(382.6, abs=0.5)
    a, b = np.array([0.0, 0.0, -3.0]), np.array([44.0, 0.0, -3.0])
    assert half_space_first_arrival_ns(a, b, 0.0, V_ROCK, V_AIR) == pytest.approx(t_head, rel=1e-12)


@pytest.mark.parametrize("d1, d2", [(3.0, 3.0), (0.0, 10.0), (2.0, 7.5)])
def test_critical_offset_matches_the_critically_reflected_path(d1, d2):
    x = float(critical_offset_m(d1, d2, S_ROCK, S_AIR))
    cos_c = np.sqrt(1 - (S_AIR / S_ROCK) ** 2)
    assert head_wave_time_ns(x, d1, d2, S_ROCK, S_AIR) == pytest.approx((d1 + d2) / cos_c * S_ROCK, rel=1e-9)
    assert np.isinf(head_wave_time_ns(0.9 * x, d1, d2, S_ROCK, S_AIR))


@pytest.mark.parametrize("x, d1, d2", [(20.0, 3.0, 3.0), (12.0, 0.0, 9.0), (35.0, 6.0, 1.0), (8.0, 0.0, 0.0)])
def test_formula_is_the_fermat_minimum(x, d1, d2):
    assert head_wave_time_ns(x, d1, d2, S_ROCK, S_AIR) == pytest.approx(
        fermat_surface_path_ns(x, d1, d2, S_ROCK, S_AIR), rel=1e-7)


def test_surface_points_see_the_direct_air_wave():
    a, b = np.array([1.0, 2.0, 0.0]), np.array([13.0, -3.0, 0.0])
    assert half_space_first_arrival_ns(a, b, 0.0, V_ROCK, V_AIR) == pytest.approx(13.0 / V_AIR, rel=1e-12)


def test_against_scikit_fmm_on_a_fine_grid():
    # 2D section: x from -2 to 42 m, z from -10 to 4 m, ground at z = 0, 0.1 m cells
    h = 0.1
    xs = np.arange(-2.0 + h / 2, 42.0, h)
    zs = np.arange(-10.0 + h / 2, 4.0, h)
    X, Z = np.meshgrid(xs, zs, indexing="ij")
    speed = np.where(Z < 0, V_ROCK, V_AIR)
    source = np.array([0.0, -3.0])
    r0 = 0.5  # the source is a small circle in rock: time r0 * s_rock at its edge
    phi = np.hypot(X - source[0], Z - source[1]) - r0
    field = skfmm.travel_time(phi, speed, dx=h, order=2) + r0 * S_ROCK
    at = RegularGridInterpolator((xs, zs), field)
    receivers = np.array([(x, z) for x in (6.0, 12.0, 20.0, 30.0, 40.0) for z in (-0.0, -1.5, -3.0, -6.0)])
    fmm = at(receivers)
    exact = half_space_first_arrival_ns(np.array([[source[0], 0.0, source[1]]] * len(receivers)),
                                        np.column_stack([receivers[:, 0], np.zeros(len(receivers)), receivers[:, 1]]),
                                        0.0, V_ROCK, V_AIR)
    error = fmm - exact
    # the air wave wins at most of these receivers: the check is about the refracted wave
    head = head_wave_time_ns(receivers[:, 0], 3.0, -receivers[:, 1], S_ROCK, S_AIR)
    assert np.count_nonzero(head < direct_time_ns(receivers[:, 0], 3.0, -receivers[:, 1], S_ROCK)) >= 12
    # measured: 0.01 to 0.32 ns late at 0.1 m cells (0.14 ns at 0.05 m: first order at the ground surface)
    assert np.max(np.abs(error)) < 0.5, error
    assert np.min(error) > -0.1, error
