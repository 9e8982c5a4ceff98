"""Tests of the voxel grid (reconstruct.model.grid).

Outside references: numpy (linspace for cell edges, searchsorted for the cell
holding a coordinate, ravel_multi_index and C-order ravel for the flat index),
Python's arbitrary-precision integers for cell counts, and brute-force loops
over cells for the ground mask and the ground top. Bad-input tests assert the
message text.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from reconstruct.errors import InputError
from reconstruct.model.grid import (
    BYTES_PER_CELL_ESTIMATE,
    Grid,
    check_grid_fits_memory,
    ground_mask,
    ground_top_m,
)

pytestmark = pytest.mark.filterwarnings("error")

# exactly representable values so that boundary checks are exact
GRID = Grid((-2.5, 10.0, 100.0), (0.5, 1.0, 1.5), (20, 6, 3))


def test_from_box_keeps_a_box_that_is_a_multiple_of_the_cell():
    grid = Grid.from_box((-2.5, 10.0, 100.0), (10.0, 6.0, 4.5), (0.5, 1.0, 1.5))
    assert grid == GRID
    np.testing.assert_array_equal(grid.end_m, [7.5, 16.0, 104.5])
    assert grid.n_cells == 20 * 6 * 3


def test_from_box_rounds_up_to_whole_cells_and_broadcasts_a_scalar_cell():
    # numpy.ceil as the reference for "extends to the next whole cell"
    grid = Grid.from_box((0.0, 0.0, 0.0), (10.2, 9.9, 0.1), 1.0)
    assert grid.shape == tuple(int(v) for v in np.ceil([10.2, 9.9, 0.1]))
    assert grid.cell_m == (1.0, 1.0, 1.0)
    # 10 m in 0.1 m cells is 100 cells although 10 / 0.1 is not exactly 100 in binary
    assert Grid.from_box((0, 0, 0), (10.0, 10.0, 10.0), 0.1).shape == (100, 100, 100)


def test_edges_and_centres_match_numpy_linspace():
    for axis in range(3):
        n, lo = GRID.shape[axis], GRID.origin_m[axis]
        edges = np.linspace(lo, lo + n * GRID.cell_m[axis], n + 1)
        np.testing.assert_allclose(GRID.edges_m(axis), edges, rtol=1e-15)
        np.testing.assert_allclose(GRID.centres_m(axis), 0.5 * (edges[:-1] + edges[1:]), rtol=1e-15)
    centres = GRID.cell_centres_m()
    assert centres.shape == (20, 6, 3, 3)
    np.testing.assert_array_equal(centres[3, 4, 2], [GRID.centres_m(0)[3], GRID.centres_m(1)[4], GRID.centres_m(2)[2]])


def test_contains_includes_the_boundary_and_nothing_beyond():
    points = np.array([
        [0.0, 12.0, 101.0],  # inside
        [-2.5, 10.0, 100.0],  # origin corner
        [7.5, 16.0, 104.5],  # far corner
        [7.5 + 1e-6, 12.0, 101.0],
        [0.0, 10.0 - 1e-6, 101.0],
        [0.0, 12.0, 104.5 + 1e-6],
    ])
    np.testing.assert_array_equal(GRID.contains(points), [True, True, True, False, False, False])
    assert GRID.contains([0.0, 12.0, 101.0]).tolist() == [True]


def test_cell_index_on_boundaries_matches_searchsorted():
    # numpy.searchsorted(edges, x, side="right") - 1 is the cell whose
    # half-open interval [lo, hi) holds x; the far boundary goes to the last cell
    points = np.array([
        [-2.5, 10.0, 100.0],  # origin: first cell
        [-2.0, 11.0, 101.5],  # interior boundaries: the upper cell
        [0.25, 13.5, 102.0],  # cell interiors
        [7.5, 16.0, 104.5],  # far corner: last cell
    ])
    expected = np.stack([
        np.clip(np.searchsorted(GRID.edges_m(a), points[:, a], side="right") - 1, 0, GRID.shape[a] - 1)
        for a in range(3)
    ], axis=1)
    np.testing.assert_array_equal(GRID.cell_index(points), expected)
    np.testing.assert_array_equal(expected[1], [1, 1, 1])
    np.testing.assert_array_equal(expected[3], [19, 5, 2])


def test_flat_index_is_numpy_c_order():
    rng = np.random.default_rng(0)
    ijk = np.stack([rng.integers(0, n, 50) for n in GRID.shape], axis=1)
    flat = GRID.flat_index(ijk)
    np.testing.assert_array_equal(flat, np.ravel_multi_index(tuple(ijk.T), GRID.shape))
    values = rng.normal(size=GRID.shape)
    np.testing.assert_array_equal(values.ravel()[flat], values[ijk[:, 0], ijk[:, 1], ijk[:, 2]])


def _brute_ground(grid, surface):
    out = np.zeros(grid.shape, dtype=bool)
    for ix, x in enumerate(grid.centres_m(0)):
        for iy, y in enumerate(grid.centres_m(1)):
            for iz, z in enumerate(grid.centres_m(2)):
                out[ix, iy, iz] = z < surface(x, y)
    return out


def test_ground_mask_flat_surface():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (3, 2, 6))
    ground = ground_mask(grid, lambda x, y: np.full_like(x, 3.2))
    # centres 0.5 .. 2.5 are below 3.2, 3.5 and up are above
    np.testing.assert_array_equal(ground[1, 1], [True, True, True, False, False, False])
    assert ground.all(axis=(0, 1)).tolist() == ground.any(axis=(0, 1)).tolist()


def test_ground_mask_sloping_surface_matches_brute_force():
    # module convention: ground where the cell centre is strictly below the surface
    grid = Grid((-5.0, 20.0, 90.0), (0.5, 0.8, 0.4), (12, 7, 30))

    def surface(x, y):
        return 95.0 + 0.3 * x - 0.2 * (y - 20.0)

    ground = ground_mask(grid, surface)
    assert ground.shape == grid.shape and ground.dtype == bool
    np.testing.assert_array_equal(ground, _brute_ground(grid, surface))
    assert ground.any() and not ground.all()


def test_a_centre_exactly_on_the_surface_is_air():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (1, 1, 4))
    ground = ground_mask(grid, lambda x, y: np.full_like(x, 2.5))
    np.testing.assert_array_equal(ground[0, 0], [True, True, False, False])


def test_ground_top_is_the_top_face_of_the_highest_ground_cell():
    grid = Grid((0.0, 0.0, 10.0), (1.0, 1.0, 0.5), (3, 1, 6))
    ground = np.zeros(grid.shape, dtype=bool)
    ground[0, 0, :2] = True  # cells 10.0-11.0
    ground[1, 0, [0, 1, 4]] = True  # an overhang: air between ground cells
    # column 2 has no ground at all
    expected = np.full((3, 1), np.nan)
    for ix in range(3):  # brute force: scan each column from the top
        for iz in reversed(range(grid.shape[2])):
            if ground[ix, 0, iz]:
                expected[ix, 0] = grid.edges_m(2)[iz + 1]
                break
    top = ground_top_m(grid, ground)
    np.testing.assert_array_equal(top, expected)
    assert top[0, 0] == 11.0 and top[1, 0] == 12.5 and np.isnan(top[2, 0])


def test_memory_check_passes_a_small_grid():
    check_grid_fits_memory(GRID, memory_limit_bytes=GRID.n_cells * BYTES_PER_CELL_ESTIMATE)


def test_memory_check_refuses_a_huge_grid_and_suggests_a_cell_that_fits():
    grid = Grid.from_box((0.0, 0.0, 0.0), (2000.0, 1500.0, 400.0), 0.25)  # about 7.7e10 cells
    limit = 2**30
    with pytest.raises(InputError) as info:
        check_grid_fits_memory(grid, memory_limit_bytes=limit, source="site.yaml")
    message = str(info.value)
    assert message.startswith("site.yaml: model.cell_m: the grid of 8000 x 6000 x 1600")
    assert "more than the 1.0 GiB available" in message
    suggested = float(re.search(r"use cells of at least ([0-9.]+) m", message).group(1))
    # the suggestion must actually fit
    coarse = Grid.from_box((0.0, 0.0, 0.0), (2000.0, 1500.0, 400.0), suggested)
    check_grid_fits_memory(coarse, memory_limit_bytes=limit)
    assert suggested > 0.25


def test_memory_check_is_not_fooled_by_integer_overflow():
    # 5e6 ** 3 = 1.25e20 cells is beyond int64; Python integers are exact
    grid = Grid.from_box((0.0, 0.0, 0.0), (5000.0, 5000.0, 5000.0), 0.001)
    assert grid.n_cells == 5_000_000**3 == math.prod(grid.shape)
    with pytest.raises(InputError, match="site: model.cell_m: the grid of 5000000 x 5000000 x 5000000"):
        check_grid_fits_memory(grid, memory_limit_bytes=2**30)


@pytest.mark.parametrize(
    "origin, cell, shape, message",
    [
        ((0, 0, 0), (1, 0, 1), (2, 2, 2), r"cell_m must be > 0 \(got \(1.0, 0.0, 1.0\)\)"),
        ((0, 0, 0), (1, 1, np.nan), (2, 2, 2), "cell_m must be > 0"),
        ((0, np.inf, 0), (1, 1, 1), (2, 2, 2), "origin_m must be finite"),
        ((0, 0, 0), (1, 1, 1), (2, 0, 2), r"shape must be >= 1 along every axis \(got \(2, 0, 2\)\)"),
        ((0, 0), (1, 1, 1), (2, 2, 2), "origin_m, cell_m and shape need three values each"),
    ],
)
def test_bad_grid_arguments_are_refused(origin, cell, shape, message):
    with pytest.raises(ValueError, match=message):
        Grid(origin, cell, shape)
