"""Ray tracing through travel-time fields, checked against analytic rays.

The fields here are analytic, sampled on a lattice, so that the tracer is
tested on its own (the eikonal solver has its own tests).
Sources named beside each check:
- Straight rays in a homogeneous medium and exact cell lengths: Siddon, R. L.
  (1985), Medical Physics 12(2), 252-255 (reconstruct.forward.straight_rays).
- Linear gradient v = v0 + g z: t = arccosh(1 + g^2 r^2 / (2 v1 v2)) / g and rays
  are circular arcs centred on the level where v = 0 (Slotnick, M. M. (1959),
  Lessons in Seismic Computing, SEG; Cerveny, V. (2001), Seismic Ray Theory,
  Cambridge University Press).
"""

import numpy as np
import pytest

from reconstruct.forward.ray_tracing import polyline_matrix, ray_time_ns, trace_rays
from reconstruct.model.grid import Grid
from reconstruct.forward.straight_rays import straight_ray_matrix
from reconstruct.forward.time_field import TimeField


def _lattice(grid):
    axes = [grid.origin_m[a] + np.arange(grid.shape[a] + 1) * grid.cell_m[a] for a in range(3)]
    return np.stack(np.meshgrid(*axes, indexing="ij"), axis=-1)


def _homogeneous_field(grid, source, velocity):
    points = _lattice(grid)
    times = np.linalg.norm(points - np.asarray(source), axis=-1) / velocity
    return TimeField(grid.origin_m, grid.cell_m, times, np.asarray(source, dtype=float))


def test_rays_in_a_homogeneous_medium_are_straight():
    grid = Grid((0, 0, 0), (1, 1, 1), (40, 20, 30))
    source = np.array([5.3, 10.2, 7.7])
    field = _homogeneous_field(grid, source, 0.12)
    rng = np.random.default_rng(0)
    receivers = rng.uniform([0, 0, 0], [40, 20, 30], (200, 3))
    polylines, reached = trace_rays(field, receivers)
    assert reached.all()
    bent = polyline_matrix(grid, polylines)
    straight = straight_ray_matrix(grid, receivers, np.tile(source, (200, 1)))
    # total length: the straight distance (geometry)
    np.testing.assert_allclose(np.asarray(bent.sum(axis=1)).ravel(),
                               np.linalg.norm(receivers - source, axis=1), atol=5e-3)
    # per-cell lengths close to Siddon's exact straight-ray lengths
    assert abs(bent - straight).max() < 0.2
    # the time along the ray equals distance / velocity
    t = ray_time_ns(bent, np.full(grid.n_cells, 1 / 0.12))
    np.testing.assert_allclose(t, np.linalg.norm(receivers - source, axis=1) / 0.12, rtol=1e-3)


def test_two_point_polylines_equal_siddon_exactly():
    grid = Grid((1.0, -2.0, 3.0), (0.5, 1.0, 0.75), (12, 9, 10))
    rng = np.random.default_rng(1)
    a = rng.uniform([1, -2, 3], [7, 7, 10.5], (50, 3))
    b = rng.uniform([1, -2, 3], [7, 7, 10.5], (50, 3))
    mine = polyline_matrix(grid, [np.vstack([p, q]) for p, q in zip(a, b)])
    reference = straight_ray_matrix(grid, a, b)
    assert abs(mine - reference).max() < 1e-9


def test_polyline_lengths_sum_to_the_polyline_length():
    grid = Grid((0, 0, 0), (1, 1, 1), (10, 10, 10))
    rng = np.random.default_rng(2)
    lines = [rng.uniform(0, 10, (k, 3)) for k in (2, 3, 7, 20)]
    matrix = polyline_matrix(grid, lines)
    expected = [np.sum(np.linalg.norm(np.diff(p, axis=0), axis=1)) for p in lines]
    np.testing.assert_allclose(np.asarray(matrix.sum(axis=1)).ravel(), expected, rtol=1e-12)


def test_rays_in_a_linear_gradient_follow_circular_arcs():
    # v = v0 + g z (Slotnick 1959; Cerveny 2001): rays are arcs of circles whose
    # centres lie at z = -v0 / g, where the velocity would be zero
    v0, g = 0.10, 0.002
    grid = Grid((-5, -5, 0), (1, 1, 1), (110, 10, 45))
    points = _lattice(grid)
    source = np.array([0.0, 0.0, 5.0])
    v1 = v0 + g * source[2]
    v2 = v0 + g * points[..., 2]
    r2 = np.sum((points - source) ** 2, axis=-1)
    times = np.arccosh(1 + g**2 * r2 / (2 * v1 * v2)) / g
    field = TimeField(grid.origin_m, grid.cell_m, times, source)
    receivers = np.array([[30.0, 0.0, 5.0], [60.0, 0.0, 5.0], [90.0, 0.0, 20.0], [40.0, 0.0, 35.0]])
    polylines, reached = trace_rays(field, receivers)
    assert reached.all()
    z_centre = -v0 / g
    for receiver, line in zip(receivers, polylines):
        # circle through source and receiver with its centre on z = z_centre
        (xs, _, zs), (xr, _, zr) = source, receiver
        x_centre = ((xr**2 + (zr - z_centre) ** 2) - (xs**2 + (zs - z_centre) ** 2)) / (2 * (xr - xs))
        radius = np.hypot(xs - x_centre, zs - z_centre)
        distance = np.hypot(line[:, 0] - x_centre, line[:, 2] - z_centre)
        # within one model cell of the analytic arc (our tolerance), in fact much closer
        assert np.max(np.abs(distance - radius)) < 0.5
        assert np.max(np.abs(line[:, 1])) < 1e-6  # stays in the vertical plane of the pair
        # the ray's own time matches the analytic first-arrival time
        matrix = polyline_matrix(grid, [line])
        centres = grid.cell_centres_m()
        slowness = 1.0 / (v0 + g * centres[..., 2])
        t_ray = ray_time_ns(matrix, slowness.ravel())[0]
        t_true = np.arccosh(1 + g**2 * np.sum((receiver - source) ** 2) / (2 * v1 * (v0 + g * zr))) / g
        assert t_ray == pytest.approx(t_true, rel=2e-3)


def test_a_stuck_descent_falls_back_to_the_straight_segment():
    grid = Grid((0, 0, 0), (1, 1, 1), (6, 6, 6))
    field = TimeField(grid.origin_m, grid.cell_m, np.zeros((7, 7, 7)), np.array([1.0, 1.0, 1.0]))
    polylines, reached = trace_rays(field, [[5.0, 5.0, 5.0]])
    assert not reached[0]
    np.testing.assert_allclose(polylines[0], [[5, 5, 5], [1, 1, 1]])


def test_long_segments_crossing_many_cells_equal_siddon():
    # a fallback straight segment may cross hundreds of cell faces (Siddon 1985 as reference)
    grid = Grid((0, 0, 0), (1, 1, 1), (120, 40, 50))
    a = np.array([[0.5, 0.5, 0.5], [119.5, 2.3, 48.1]])
    b = np.array([[119.2, 39.1, 49.6], [0.7, 37.9, 1.2]])
    mine = polyline_matrix(grid, [np.vstack([p, q]) for p, q in zip(a, b)])
    assert abs(mine - straight_ray_matrix(grid, a, b)).max() < 1e-9
