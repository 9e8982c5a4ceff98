"""Checks of ray bending (reconstruct.forward.bending) against closed forms.

- Uniform medium: any start path bends to the straight segment, t = d / v.
- Two layers with the interface on a cell face, end points in different
  layers: the refracted ray's time is the least over the crossing point of
  sqrt(x^2 + h1^2) / v1 + sqrt((L - x)^2 + h2^2) / v2 (Fermat's principle,
  whose stationary point is Snell's law; any refraction text, e.g. Telford,
  Geldart and Sheriff 1990, Applied Geophysics, 2nd ed., from memory), found
  here with scipy.optimize.minimize_scalar.
- Both end points above a faster half-space, far apart: the head wave,
  t = x / v2 + (h1 + h2) cos(i_c) / v1 with sin(i_c) = v1 / v2 (the
  head-wave formula, tests/REFERENCES.md; Telford, Geldart and Sheriff 1990,
  from memory). Bending starts from the ray traced through the eikonal field.
- Every bent path's time equals its exact per-cell lengths (Siddon 1985,
  polyline_matrix) times the slowness, and bent_ray_forward(bend=True) returns
  an operator whose rows reproduce its times.
"""

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from reconstruct.forward.bending import bend_rays
from reconstruct.forward.eikonal import travel_time_field
from reconstruct.forward.first_arrivals import bent_ray_forward
from reconstruct.forward.ray_tracing import polyline_matrix, trace_rays
from reconstruct.model.grid import Grid
from reconstruct.parallel import Executor

SLOW_V, FAST_V = 0.1, 0.3  # m/ns


def test_uniform_medium_bends_to_the_straight_segment():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (20, 10, 10))
    s = np.full(grid.shape, 1 / SLOW_V)
    a, b = np.array([1.3, 5.2, 4.9]), np.array([18.6, 4.1, 5.7])
    t = np.linspace(0.0, 1.0, 9)[:, None]
    wiggly = a + t * (b - a) + np.sin(np.pi * t) * np.array([0.0, 2.0, 1.5])
    bent, time_ns = bend_rays(grid, s, [wiggly])
    assert time_ns[0] == pytest.approx(np.linalg.norm(b - a) / SLOW_V, rel=1e-4)
    assert np.all(bent[0][0] == a) and np.all(bent[0][-1] == b)


def _two_layers(top_velocity, bottom_velocity, interface_z=5.0):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (30, 6, 12))
    s = np.full(grid.shape, 1 / bottom_velocity)
    s[:, :, int(interface_z):] = 1 / top_velocity
    return grid, s


def test_refracted_ray_across_an_interface_obeys_snell():
    grid, s = _two_layers(SLOW_V, FAST_V)
    a, b = np.array([2.2, 3.1, 9.6]), np.array([26.7, 3.4, 1.3])  # above and below z = 5
    h1, h2 = a[2] - 5.0, 5.0 - b[2]
    length = np.linalg.norm((b - a)[:2])
    snell = minimize_scalar(lambda x: np.hypot(x, h1) / SLOW_V + np.hypot(length - x, h2) / FAST_V,
                            bounds=(0.0, length), method="bounded", options={"xatol": 1e-10}).fun
    bent, time_ns = bend_rays(grid, s, [np.vstack([a, b])])
    assert time_ns[0] == pytest.approx(snell, rel=3e-4)  # measured 1.6e-4
    assert time_ns[0] >= snell * (1 - 1e-9)  # a path is never faster than the least time
    along = polyline_matrix(grid, bent) @ s.ravel()
    assert along[0] == pytest.approx(time_ns[0], rel=1e-12)


def test_head_wave_along_a_faster_half_space():
    grid, s = _two_layers(SLOW_V, FAST_V)  # slow above z = 5, fast below
    a, b = np.array([1.4, 3.0, 7.5]), np.array([28.3, 3.0, 7.0])
    h1, h2 = a[2] - 5.0, b[2] - 5.0
    x = np.linalg.norm((b - a)[:2])
    critical = np.arcsin(SLOW_V / FAST_V)
    head = x / FAST_V + (h1 + h2) * np.cos(critical) / SLOW_V
    assert head < x / SLOW_V  # far enough for the head wave to come first
    field = travel_time_field(grid, s, a, receivers_xyz_m=b[None])
    traced, _ = trace_rays(field, b[None])
    _, time_ns = bend_rays(grid, s, traced, reference_ns=field.interpolate(b[None]))
    assert time_ns[0] == pytest.approx(head, rel=5e-3)  # measured 2.5e-3 late (see bending.py)
    assert time_ns[0] >= head * (1 - 1e-9)


def test_bent_forward_rows_reproduce_their_times():
    grid, s = _two_layers(SLOW_V, FAST_V)
    xyz = np.array([[1.5, 2.5, 8.5], [27.5, 3.5, 7.5], [14.2, 1.1, 10.5], [20.3, 4.4, 2.5]])
    a, b = np.triu_indices(len(xyz), 1)
    plain = bent_ray_forward(grid, s, xyz, a, b, executor=Executor(kind="serial"))
    bent = bent_ray_forward(grid, s, xyz, a, b, executor=Executor(kind="serial"), bend=True)
    assert np.allclose(bent.operator @ s.ravel(), bent.time_ns, rtol=1e-9)
    # bent rays are kept only where they are at most 1 % later than the field's time
    assert np.all(bent.time_ns <= plain.time_ns * 1.01 + 1e-9)
