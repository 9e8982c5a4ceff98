"""Tests of node placement in the voxel model (reconstruct.model.placement).

Outside references: the expected positions are worked out by hand from the
grid geometry (cell faces at whole metres) and the distances with
numpy.linalg.norm. Bad-input tests assert the message text, which must name
the node file and line.
"""

from __future__ import annotations

import numpy as np
import pytest

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid, ground_mask
from reconstruct.model.placement import place_nodes
from reconstruct.io.tables import Nodes

pytestmark = pytest.mark.filterwarnings("error")

INSIDE_M = 1e-6  # the documented nudge into the ground cell

# 10 x 10 x 10 m box of 1 m cells
GRID = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (10, 10, 10))
# flat ground at 5.7 m: centres 0.5 .. 5.5 are ground, the voxel top is 6.0 m
FLAT = ground_mask(GRID, lambda x, y: np.full_like(x, 5.7))
# a quarry face: ground up to 8.0 m west of x = 5, up to 3.0 m east of it
STEP = ground_mask(GRID, lambda x, y: np.where(x < 5.0, 7.9, 2.9))


def _nodes(rows, source="nodes.csv"):
    """rows: (id, x, y, z, kind, line)"""
    return Nodes(
        ids=[r[0] for r in rows],
        xyz_m=[r[1:4] for r in rows],
        kinds=[r[4] for r in rows],
        boreholes=[None] * len(rows),
        lines=[r[5] for r in rows],
        source=source,
    )


def test_nodes_in_ground_cells_are_left_alone():
    nodes = _nodes([("B1", 2.5, 2.5, 1.0, "borehole", 2), ("F1", 4.2, 7.3, 5.9, "face", 3), ("U1", 9.0, 9.0, 0.0, None, 4)])
    placed = place_nodes(nodes, GRID, FLAT)
    np.testing.assert_array_equal(placed.xyz_m, nodes.xyz_m)
    np.testing.assert_array_equal(placed.shift_m, 0.0)
    assert placed.snapped.tolist() == [False, False, False]


def test_surface_node_is_snapped_to_the_voxel_ground_top():
    # surface at 5.7 m, but the voxel model's ground top is the top face of
    # cell iz = 5, at 6.0 m; the node goes just below it, in that ground cell
    nodes = _nodes([("S1", 3.5, 4.5, 5.7, "surface", 2), ("S2", 7.0, 1.0, 6.4, "surface", 3)])
    placed = place_nodes(nodes, GRID, FLAT)
    np.testing.assert_allclose(placed.xyz_m[:, 2], 6.0 - INSIDE_M, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(placed.xyz_m[:, :2], nodes.xyz_m[:, :2])
    np.testing.assert_allclose(placed.shift_m[:, 2], [0.3 - INSIDE_M, -0.4 - INSIDE_M], atol=1e-12)
    np.testing.assert_allclose(placed.shift_length_m, np.abs(placed.shift_m[:, 2]), atol=1e-12)
    assert placed.snapped.tolist() == [True, True]
    assert FLAT[tuple(GRID.cell_index(placed.xyz_m).T)].all()


def test_face_node_in_the_air_above_flat_ground_drops_into_the_cell_below():
    nodes = _nodes([("F1", 2.5, 3.25, 7.3, "face", 5)])
    placed = place_nodes(nodes, GRID, FLAT)
    np.testing.assert_allclose(placed.xyz_m[0], [2.5, 3.25, 6.0 - INSIDE_M], atol=1e-12)
    assert placed.snapped.tolist() == [True]


def test_face_node_in_the_air_goes_to_the_nearest_ground_cell_sideways():
    # at (5.2, 4.5, 6.5) the node is in air cell (5, 4, 6); the ground cell
    # (4, 4, 6) is one cell west, the ground below is four cells down
    nodes = _nodes([("F1", 5.2, 4.5, 6.5, "face", 2), ("B1", 5.4, 4.5, 6.5, "borehole", 3)])
    placed = place_nodes(nodes, GRID, STEP)
    expected = [[5.0 - INSIDE_M, 4.5, 6.5], [5.0 - INSIDE_M, 4.5, 6.5]]
    np.testing.assert_allclose(placed.xyz_m, expected, atol=1e-12)
    np.testing.assert_allclose(placed.shift_length_m, [0.2 + INSIDE_M, 0.4 + INSIDE_M], atol=1e-12)
    assert STEP[tuple(GRID.cell_index(placed.xyz_m).T)].all()


def test_inputs_are_not_modified():
    nodes = _nodes([("F1", 2.5, 3.25, 7.3, "face", 5), ("S1", 3.5, 4.5, 5.7, "surface", 6)])
    before = np.array(nodes.xyz_m)
    ground = FLAT.copy()
    place_nodes(nodes, GRID, ground)
    np.testing.assert_array_equal(nodes.xyz_m, before)
    np.testing.assert_array_equal(ground, FLAT)


def test_nodes_outside_the_box_name_file_and_line():
    nodes = _nodes([
        ("T1", 5.0, 5.0, 3.0, "face", 2),
        ("T2", 10.5, 5.0, 3.0, "face", 3),
        ("T3", 5.0, -0.25, 3.0, "borehole", 4),
    ], source="survey/nodes.csv")
    with pytest.raises(InputError) as info:
        place_nodes(nodes, GRID, FLAT)
    problems = info.value.problems
    assert len(problems) == 2
    assert problems[0].startswith("survey/nodes.csv: line 3: node T2 at (10.5, 5, 3) m lies outside the model box")
    assert problems[1].startswith("survey/nodes.csv: line 4: node T3 at (5, -0.25, 3) m lies outside")
    assert "x 0..10, y 0..10, z 0..10 m" in problems[0]
    assert "enlarge model.size_m in the site file" in problems[0]


def test_a_node_on_the_box_boundary_is_inside():
    nodes = _nodes([("B1", 0.0, 10.0, 0.0, "borehole", 2)])
    placed = place_nodes(nodes, GRID, FLAT)
    assert placed.snapped.tolist() == [False]


def test_face_node_too_far_in_the_air_is_refused_with_its_line():
    nodes = _nodes([("F1", 2.5, 2.5, 5.0, "face", 2), ("F9", 2.5, 2.5, 9.9, "face", 9)])
    with pytest.raises(InputError) as info:
        place_nodes(nodes, GRID, FLAT, snap_tolerance_m=2.0)
    assert info.value.problems == [
        "nodes.csv: line 9: node F9 would move 3.90 m out of the air into the nearest ground cell "
        "(tolerance 2.00 m); check its z (elevation, metres, up positive) or the site's ground surface"
    ]


def test_surface_node_too_far_above_the_ground_is_refused_with_its_line():
    nodes = _nodes([("S1", 2.5, 2.5, 9.5, "surface", 4)])
    with pytest.raises(InputError, match=r"^nodes.csv: line 4: node S1 would move 3.50 m onto the ground surface "
                                         r"\(tolerance 2.00 m\)"):
        place_nodes(nodes, GRID, FLAT, snap_tolerance_m=2.0)


def test_default_tolerance_is_two_cell_diagonals():
    # two diagonals of a 1 m cube: 2 * sqrt(3) = 3.46 m (more than the 2 m floor)
    near = _nodes([("F1", 2.5, 2.5, 9.4, "face", 2)])  # moves 3.40 m
    assert place_nodes(near, GRID, FLAT).shift_length_m[0] == pytest.approx(3.4 + INSIDE_M)
    far = _nodes([("F1", 2.5, 2.5, 9.5, "face", 2)])  # moves 3.50 m
    with pytest.raises(InputError, match=r"would move 3.50 m .* \(tolerance 3.46 m\)"):
        place_nodes(far, GRID, FLAT)


def test_surface_node_over_a_column_without_ground_is_refused():
    ground = FLAT.copy()
    ground[2, 2, :] = False
    nodes = _nodes([("S1", 2.5, 2.5, 5.7, "surface", 7)])
    with pytest.raises(InputError, match=r"^nodes.csv: line 7: surface node S1 stands over a column with no "
                                         r"ground cells in the model box; lower model.origin_m\[2\]"):
        place_nodes(nodes, GRID, ground)


def test_node_in_the_air_of_a_model_without_ground_is_refused():
    nodes = _nodes([("F1", 2.5, 2.5, 5.0, "face", 2)])
    with pytest.raises(InputError, match="the model has no ground cells to place nodes in; check the site's ground surface"):
        place_nodes(nodes, GRID, np.zeros(GRID.shape, dtype=bool))
