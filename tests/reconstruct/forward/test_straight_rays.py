"""Tests of the straight-ray operator (reconstruct.forward.straight_rays).

Outside references: Euclidean geometry (a straight segment's length is the
norm of its end-point difference, computed with numpy.linalg.norm); the
method of Siddon, R. L. (1985), Fast calculation of the exact radiological
path for a three-dimensional CT array, Medical Physics 12(2), 252-255, whose
result is the exact length of the ray inside each cell; an independent
numerical method (dense sampling of the ray, cell membership by numpy.floor);
and the speed of light from scipy.constants.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants

from reconstruct.model.grid import Grid
from reconstruct.forward.straight_rays import ray_lengths_m, straight_ray_matrix

pytestmark = pytest.mark.filterwarnings("error")


def _random_grid(rng):
    origin = rng.uniform(-500.0, 500.0, 3)
    cell = rng.uniform(0.3, 3.0, 3)  # non-cubic cells
    shape = rng.integers(2, 12, 3)
    return Grid(tuple(origin), tuple(cell), tuple(shape))


def _random_points_inside(rng, grid, n):
    return np.asarray(grid.origin_m) + rng.uniform(0.0, 1.0, (n, 3)) * grid.size_m


def test_lengths_sum_to_euclidean_distance_inside_random_grids():
    # geometry: a segment inside the box is cut into pieces whose lengths add
    # up to |rx - tx| (Siddon 1985, Medical Physics 12(2), 252-255: exact lengths)
    rng = np.random.default_rng(1985)
    for _ in range(20):
        grid = _random_grid(rng)
        tx = _random_points_inside(rng, grid, 200)
        rx = _random_points_inside(rng, grid, 200)
        G = straight_ray_matrix(grid, tx, rx)
        assert G.shape == (200, grid.n_cells)
        expected = np.linalg.norm(rx - tx, axis=1)
        np.testing.assert_allclose(np.asarray(G.sum(axis=1)).ravel(), expected, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(ray_lengths_m(tx, rx), expected, rtol=1e-15)
        assert np.all(G.data > 0)


def test_lengths_match_dense_sampling_per_cell():
    # independent numerical method: sample each ray at 200k evenly spaced
    # points, find each sample's cell with numpy.floor and count; every cell's
    # length is then known to within about two sample spacings
    rng = np.random.default_rng(7)
    grid = Grid((-3.0, 12.0, 95.5), (0.7, 1.3, 0.45), (6, 5, 9))
    n_samples = 200_000
    lo, hi = np.asarray(grid.origin_m), grid.end_m
    # end points beyond the box on purpose: only the inside part must count
    tx = lo - 1.0 + rng.uniform(0.0, 1.0, (8, 3)) * (hi - lo + 2.0)
    rx = lo - 1.0 + rng.uniform(0.0, 1.0, (8, 3)) * (hi - lo + 2.0)
    G = straight_ray_matrix(grid, tx, rx).toarray()
    alpha = (np.arange(n_samples) + 0.5) / n_samples
    for i in range(tx.shape[0]):
        length = np.linalg.norm(rx[i] - tx[i])
        pts = tx[i] + alpha[:, None] * (rx[i] - tx[i])
        ijk = np.floor((pts - lo) / np.asarray(grid.cell_m)).astype(np.int64)
        ok = np.all((ijk >= 0) & (ijk < np.asarray(grid.shape)), axis=1)
        flat = np.ravel_multi_index(tuple(ijk[ok].T), grid.shape)
        sampled = np.bincount(flat, minlength=grid.n_cells) * (length / n_samples)
        np.testing.assert_allclose(G[i], sampled, rtol=0, atol=2.5 * length / n_samples)


def test_axis_parallel_ray_through_cell_interiors_gets_one_cell_size_per_cell():
    # geometry: a ray along z through a column crosses every cell over its full height
    grid = Grid((10.0, -4.0, 100.0), (2.0, 1.5, 0.5), (3, 4, 6))
    G = straight_ray_matrix(grid, [11.0, -3.25, 90.0], [11.0, -3.25, 110.0]).toarray()[0]
    expected = np.zeros(grid.shape)
    expected[0, 0, :] = 0.5
    np.testing.assert_allclose(G, expected.ravel(), rtol=1e-12)


@pytest.mark.parametrize(
    "tx, rx, length",
    [
        # along the interior face x = 1 (between cells ix 0 and 1), in y
        ([1.0, -2.0, 0.5], [1.0, 5.0, 0.5], 3.0),
        # along the interior edge x = 1, y = 2 (four cells meet), in z
        ([1.0, 2.0, 3.0], [1.0, 2.0, -3.0], 3.0),
        # along the outer face z = 0 and the outer edge x = 3, y = 0
        ([0.5, 0.5, 0.0], [0.5, 2.5, 0.0], 2.0),
        ([3.0, 0.0, -1.0], [3.0, 0.0, 4.0], 3.0),
        # along the far face x = 3, leaving through the top at z = 3
        ([3.0, 0.5, 0.5], [3.0, 2.5, 3.5], 2.5 / 3.0 * np.sqrt(13.0)),
    ],
)
def test_rays_along_faces_and_edges_are_counted_once(tx, rx, length):
    # geometry: the clipped length worked out by hand; a ray on a face must be
    # counted once (on one side), not twice and not lost
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (3, 3, 3))
    G = straight_ray_matrix(grid, tx, rx)
    assert G.sum() == pytest.approx(length, rel=1e-12)
    # every used cell touches the ray's line: its distance to the line is 0
    ijk = np.array(np.unravel_index(G.indices, grid.shape)).T
    p, d = np.asarray(tx, float), np.asarray(rx, float) - np.asarray(tx, float)
    d = d / np.linalg.norm(d)
    for cell in ijk:
        corner_lo, corner_hi = cell * 1.0, cell + 1.0
        centre = 0.5 * (corner_lo + corner_hi)
        along = p + np.dot(centre - p, d) * d
        assert np.all((along >= corner_lo - 1e-12) & (along <= corner_hi + 1e-12))


def test_ray_through_cell_corners_on_the_main_diagonal():
    # geometry: the diagonal of a cube of 4 x 4 x 4 unit cells passes through
    # the corners and crosses the diagonal cells only, each over sqrt(3)
    grid = Grid((-2.0, -2.0, -2.0), (1.0, 1.0, 1.0), (4, 4, 4))
    G = straight_ray_matrix(grid, [-2.0, -2.0, -2.0], [2.0, 2.0, 2.0])
    diagonal = np.ravel_multi_index((np.arange(4),) * 3, grid.shape)
    assert sorted(G.indices) == sorted(diagonal)
    np.testing.assert_allclose(G.data, np.sqrt(3.0), rtol=1e-12)


def test_zero_length_ray_gives_an_empty_row():
    # geometry: a ray of no length crosses nothing
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (3, 3, 3))
    G = straight_ray_matrix(grid, [[1.5, 1.5, 1.5], [1.0, 1.0, 1.0]], [[1.5, 1.5, 1.5], [1.0, 1.0, 1.0]])
    assert G.shape == (2, 27) and G.nnz == 0


@pytest.mark.parametrize(
    "tx, rx, length",
    [
        # enters at x = 0 and leaves at x = 4: 4 m of a 10 m ray
        ([-3.0, 1.5, 2.5], [7.0, 1.5, 2.5], 4.0),
        # oblique, clipped by hand: p = (-2, -1, 1) + a (8, 4, 0); x in 0..4
        # gives a in 0.25..0.75, y in 0..4 gives a in 0.25..1.25 -> a in 0.25..0.75
        ([-2.0, -1.0, 1.0], [6.0, 3.0, 1.0], 0.5 * np.sqrt(80.0)),
        # misses the box entirely
        ([-1.0, -1.0, -1.0], [5.0, 5.0, -1.0], 0.0),
        # one end on the box and pointing away from it
        ([0.0, 2.0, 2.0], [-3.0, 2.0, 2.0], 0.0),
    ],
)
def test_rays_partly_outside_count_only_the_inside_part(tx, rx, length):
    # geometry: analytic clipping of the segment to the box 0..4 in x, y and z
    grid = Grid((0.0, 0.0, 0.0), (1.0, 0.5, 2.0), (4, 8, 2))
    G = straight_ray_matrix(grid, tx, rx)
    assert G.sum() == pytest.approx(length, rel=1e-12, abs=1e-12)


def test_travel_time_in_uniform_rock_and_in_air():
    # t = L / v for a straight ray in a uniform medium; in air the radar wave
    # travels at the speed of light, c from scipy.constants in m/s -> m/ns
    rng = np.random.default_rng(3)
    grid = Grid((0.0, 0.0, 0.0), (0.5, 0.75, 1.0), (10, 8, 6))
    tx, rx = _random_points_inside(rng, grid, 50), _random_points_inside(rng, grid, 50)
    G = straight_ray_matrix(grid, tx, rx)
    distance_m = np.linalg.norm(rx - tx, axis=1)
    for velocity_m_per_ns in (0.1, constants.c * 1e-9):
        time_ns = G @ np.full(grid.n_cells, 1.0 / velocity_m_per_ns)
        np.testing.assert_allclose(time_ns, distance_m / velocity_m_per_ns, rtol=1e-9)
    assert constants.c * 1e-9 == pytest.approx(0.299792458)


def test_swapping_transmitter_and_receiver_gives_the_same_row():
    # reciprocity: the path of a straight ray does not depend on its direction
    rng = np.random.default_rng(11)
    grid = Grid((5.0, -5.0, 50.0), (1.1, 0.9, 0.6), (7, 9, 8))
    lo, hi = np.asarray(grid.origin_m) - 1.0, grid.end_m + 1.0
    tx = lo + rng.uniform(0.0, 1.0, (100, 3)) * (hi - lo)
    rx = lo + rng.uniform(0.0, 1.0, (100, 3)) * (hi - lo)
    forward = straight_ray_matrix(grid, tx, rx).toarray()
    backward = straight_ray_matrix(grid, rx, tx).toarray()
    np.testing.assert_allclose(forward, backward, rtol=1e-12, atol=1e-12)


def test_batches_give_the_same_matrix_and_report_progress():
    rng = np.random.default_rng(5)
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (5, 5, 5))
    tx, rx = _random_points_inside(rng, grid, 23), _random_points_inside(rng, grid, 23)
    calls = []
    small = straight_ray_matrix(grid, tx, rx, chunk_size=4, progress=lambda d, t: calls.append((d, t)))
    whole = straight_ray_matrix(grid, tx, rx)
    np.testing.assert_array_equal(small.toarray(), whole.toarray())
    assert calls == [(4, 23), (8, 23), (12, 23), (16, 23), (20, 23), (23, 23)]


def test_no_rays_gives_an_empty_matrix():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (2, 2, 2))
    G = straight_ray_matrix(grid, np.zeros((0, 3)), np.zeros((0, 3)))
    assert G.shape == (0, 8)


@pytest.mark.parametrize(
    "tx, rx, message",
    [
        (np.zeros((2, 2)), np.zeros((2, 3)), r"tx_xyz_m has shape \(2, 2\), expected \(n, 3\)"),
        (np.zeros((2, 3)), np.zeros((2, 3, 1)), r"rx_xyz_m has shape \(2, 3, 1\), expected \(n, 3\)"),
        (np.zeros((2, 3)), np.zeros((3, 3)), r"tx_xyz_m has shape \(2, 3\) but rx_xyz_m has shape \(3, 3\)"),
        ([[0.0, np.nan, 0.0]], [[1.0, 1.0, 1.0]], "tx_xyz_m holds NaN or infinite coordinates"),
        ([[0.0, 0.0, 0.0]], [[1.0, np.inf, 1.0]], "rx_xyz_m holds NaN or infinite coordinates"),
    ],
)
def test_bad_shapes_raise_value_error_naming_the_argument(tx, rx, message):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (2, 2, 2))
    with pytest.raises(ValueError, match=message):
        straight_ray_matrix(grid, tx, rx)
