"""Tests of the regularisation operators (reconstruct.inverse.regularization).

Outside references: a hand derivation for linear fields (below), brute-force
loops over a tiny grid counting face-sharing ground pairs, and numpy
(argwhere, cumsum) for the numbering of the unknowns. Bad-input tests assert
the message text.

Hand derivation: for a slowness ``s(x) = s0 + g . x`` sampled at cell
centres, two neighbours along axis ``a`` differ by ``g_a h_a``. The row
weights ``w h_ref / h_a`` turn that into ``w g_a h_ref``: the same for every
pair of the axis, whatever the cell size along it.
"""

from __future__ import annotations

import numpy as np
import pytest

from reconstruct.model.grid import Grid, ground_mask
from reconstruct.inverse.regularization import first_difference_operator, unknown_index_map

pytestmark = pytest.mark.filterwarnings("error")

GRID = Grid((100.0, -50.0, 20.0), (1.0, 2.0, 0.5), (4, 3, 5))


def _row_axes(D, ground):
    """Axis (0, 1, 2) of each row, found from the two cells' coordinates."""
    ijk = np.argwhere(ground)  # C order, the same order as the unknowns
    D = D.tocsr()
    axes = []
    for r in range(D.shape[0]):
        cols = D.indices[D.indptr[r]:D.indptr[r + 1]]
        vals = D.data[D.indptr[r]:D.indptr[r + 1]]
        assert cols.size == 2 and vals.sum() == pytest.approx(0.0, abs=1e-12)
        minus, plus = cols[np.argmin(vals)], cols[np.argmax(vals)]
        step = ijk[plus] - ijk[minus]
        assert np.abs(step).sum() == 1 and step.max() == 1  # face neighbours, minus -> plus upward
        axes.append(int(np.argmax(step)))
    return np.array(axes)


def _brute_pairs(ground):
    counts = [0, 0, 0]
    nx, ny, nz = ground.shape
    for ix in range(nx):
        for iy in range(ny):
            for iz in range(nz):
                for axis, (jx, jy, jz) in enumerate(((ix + 1, iy, iz), (ix, iy + 1, iz), (ix, iy, iz + 1))):
                    if jx < nx and jy < ny and jz < nz and ground[ix, iy, iz] and ground[jx, jy, jz]:
                        counts[axis] += 1
    return counts


def test_linear_field_gives_constant_differences():
    # hand derivation in the module docstring: each row equals w * g_a * h_ref
    ground = np.ones(GRID.shape, dtype=bool)
    slope = np.array([0.002, -0.003, 0.005])  # ns/m per m
    centres = GRID.cell_centres_m()
    slowness = 8.0 + centres @ slope
    weights = (1.5, 1.5, 0.25)
    D = first_difference_operator(GRID, ground, horizontal_weight=1.5, vertical_weight=0.25)
    axes = _row_axes(D, ground)
    h_ref = np.mean(GRID.cell_m)
    expected = np.array([weights[a] * slope[a] * h_ref for a in axes])
    np.testing.assert_allclose(D @ slowness[ground], expected, rtol=1e-9)


def test_constant_field_gives_zero():
    ground = ground_mask(GRID, lambda x, y: 21.0 + 0.5 * (x - 100.0))
    D = first_difference_operator(GRID, ground)
    np.testing.assert_allclose(D @ np.full(int(ground.sum()), 7.3), 0.0, atol=1e-12)


def test_rows_are_the_face_sharing_ground_pairs_counted_by_brute_force():
    # sloping ground: some columns are all ground, some part air; air cells
    # are not unknowns, so no row may reach them
    ground = ground_mask(GRID, lambda x, y: 21.2 + 0.4 * (x - 100.0) - 0.2 * (y + 50.0))
    assert ground.any() and not ground.all()
    D = first_difference_operator(GRID, ground)
    assert D.shape == (sum(_brute_pairs(ground)), int(ground.sum()))
    axes = _row_axes(D, ground)
    np.testing.assert_array_equal(np.bincount(axes, minlength=3), _brute_pairs(ground))


def test_pairs_across_an_air_pocket_are_left_out():
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (3, 3, 3))
    ground = np.ones(grid.shape, dtype=bool)
    ground[1, 1, 1] = False  # a void in the middle: its six faces give no rows
    D = first_difference_operator(grid, ground)
    assert _brute_pairs(ground) == [18 - 2, 18 - 2, 18 - 2]
    assert D.shape == (48, 26)


def test_weights_scale_the_right_rows():
    ground = np.ones(GRID.shape, dtype=bool)
    h_ref = np.mean(GRID.cell_m)
    D = first_difference_operator(GRID, ground, horizontal_weight=2.0, vertical_weight=0.5)
    axes = _row_axes(D, ground)
    magnitude = np.asarray(abs(D).max(axis=1).todense()).ravel()
    expected = np.array([(2.0, 2.0, 0.5)[a] * h_ref / GRID.cell_m[a] for a in axes])
    np.testing.assert_allclose(magnitude, expected, rtol=1e-12)
    # doubling one weight doubles only its rows
    D2 = first_difference_operator(GRID, ground, horizontal_weight=2.0, vertical_weight=1.0)
    ratio = np.asarray(abs(D2).max(axis=1).todense()).ravel() / magnitude
    np.testing.assert_allclose(ratio, np.where(axes == 2, 2.0, 1.0), rtol=1e-12)


def test_zero_weight_drops_the_rows_of_its_axes():
    ground = np.ones(GRID.shape, dtype=bool)
    counts = _brute_pairs(ground)
    D = first_difference_operator(GRID, ground, horizontal_weight=0.0)
    assert D.shape[0] == counts[2]
    assert np.all(_row_axes(D, ground) == 2)
    empty = first_difference_operator(GRID, ground, horizontal_weight=0.0, vertical_weight=0.0)
    assert empty.shape == (0, GRID.n_cells)


def test_unknown_index_map_numbers_ground_cells_in_c_order():
    rng = np.random.default_rng(2)
    ground = rng.random(GRID.shape) < 0.6
    index = unknown_index_map(ground)
    flat = ground.ravel()
    expected = np.where(flat, np.cumsum(flat) - 1, -1)
    np.testing.assert_array_equal(index, expected)
    assert index.dtype == np.int64


@pytest.mark.parametrize(
    "kwargs, message",
    [
        ({"horizontal_weight": -1.0}, r"horizontal_weight must be finite and >= 0 \(got -1.0\)"),
        ({"vertical_weight": float("nan")}, r"vertical_weight must be finite and >= 0 \(got nan\)"),
        ({"vertical_weight": float("inf")}, r"vertical_weight must be finite and >= 0 \(got inf\)"),
    ],
)
def test_bad_weights_are_refused(kwargs, message):
    with pytest.raises(ValueError, match=message):
        first_difference_operator(GRID, np.ones(GRID.shape, dtype=bool), **kwargs)


def test_ground_of_the_wrong_shape_is_refused():
    with pytest.raises(ValueError, match=r"ground has shape \(4, 3, 4\), expected \(4, 3, 5\)"):
        first_difference_operator(GRID, np.ones((4, 3, 4), dtype=bool))


# --- focusing (compact) weights -------------------------------------------------
# Portniaguine, O. and Zhdanov, M. S. (1999), Focusing geophysical inversion
# images, Geophysics 64(3), 874-887: the minimum gradient support functional
# sum |grad m|^2 / (|grad m|^2 + beta^2) counts the cells where the gradient is
# nonzero as beta -> 0, and the minimum support functional sum m^2 / (m^2 + beta^2)
# counts the cells where the model is nonzero (the compact inversion of Last,
# B. J. and Kubik, K. (1983), Compact gravity inversion, Geophysics 48(6), 713-721).

from reconstruct.inverse.regularization import (  # noqa: E402
    difference_row_cells,
    minimum_gradient_support_weights,
    minimum_support_weights,
)

SMALL = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (5, 4, 3))


def _block_anomaly():
    model = np.zeros(SMALL.shape)
    model[1:3, 1:3, 1] = -5.0  # an air-like block of 4 cells
    model[4, 0, 2] = 2.0  # one slow cell in a corner
    return model


def _cells_with_nonzero_forward_gradient(model, ground):
    """Brute force: cells with a nonzero difference to a ground neighbour at +x, +y or +z."""
    count = 0
    nx, ny, nz = model.shape
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                if not ground[i, j, k]:
                    continue
                for (a, b, c) in ((i + 1, j, k), (i, j + 1, k), (i, j, k + 1)):
                    if a < nx and b < ny and c < nz and ground[a, b, c] and model[a, b, c] != model[i, j, k]:
                        count += 1
                        break
    return count


@pytest.mark.parametrize("with_air", [False, True])
def test_minimum_gradient_support_counts_cells_with_a_nonzero_gradient(with_air):
    ground = np.ones(SMALL.shape, dtype=bool)
    if with_air:
        ground[:, :, 2] = False
        ground[4, 0, 2] = False
    model = _block_anomaly()
    D = first_difference_operator(SMALL, ground)
    x = model[ground]  # C order = the order of the unknowns
    expected = _cells_with_nonzero_forward_gradient(model, ground)
    assert expected > 0
    for beta in (1e-3, 1e-5):
        w = minimum_gradient_support_weights(D, x, beta)
        stabiliser = float(np.sum((w * (D @ x)) ** 2)) / beta**2
        assert stabiliser == pytest.approx(expected, rel=10 * beta)
    # beta large against the gradients: the weights tend to 1 and the penalty to
    # the smooth one, beta^2 |D x|^2 / beta^2 (Portniaguine and Zhdanov, 1999)
    w = minimum_gradient_support_weights(D, x, 1e4)
    assert float(np.sum((w * (D @ x)) ** 2)) == pytest.approx(float(np.sum((D @ x) ** 2)), rel=1e-6)


def test_minimum_support_counts_cells_with_a_nonzero_anomaly():
    x = _block_anomaly().ravel()
    for beta in (1e-3, 1e-5):
        w = minimum_support_weights(x, beta)
        assert float(np.sum((w * x) ** 2)) / beta**2 == pytest.approx(np.count_nonzero(x), rel=10 * beta)


def test_difference_rows_start_from_the_lower_cell():
    ground = np.ones(SMALL.shape, dtype=bool)
    D = first_difference_operator(SMALL, ground)
    cells = difference_row_cells(D)
    ijk = np.argwhere(ground)
    # numpy as the reference: each row's other cell is one step up along one axis
    dense = D.toarray()
    for r in range(D.shape[0]):
        plus = int(np.argmax(dense[r]))
        assert np.abs(ijk[plus] - ijk[cells[r]]).sum() == 1 and np.all(ijk[plus] >= ijk[cells[r]])


def test_focusing_parameter_must_be_positive():
    with pytest.raises(ValueError, match="beta must be finite and > 0"):
        minimum_support_weights(np.ones(3), 0.0)
