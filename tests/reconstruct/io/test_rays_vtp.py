"""Tests of the ray-path writer (reconstruct.io.outputs.write_rays_vtp).

Outside references: the file is read back with pyvista.read (VTK's own XML
reader), and each polyline is taken from VTK's cell list (cell point ids);
arrays are compared with numpy.array_equal. That a file written through a
temporary name and os.replace is either old or new, never partial, is common
practice, no published source.
"""

from __future__ import annotations

import os

import numpy as np
import pytest

from reconstruct.io.outputs import write_rays_vtp

pytestmark = pytest.mark.filterwarnings("error")


def _rays():
    straight = np.array([[0.0, 0.0, 100.0], [30.0, 40.0, 90.0]])
    bent = np.array([[0.0, 0.0, 100.0], [5.0, 2.0, 96.5], [12.5, 3.0, 95.25], [20.0, 0.0, 99.0]])
    vertical = np.array([[7.0, 7.0, 80.0], [7.0, 7.0, 85.0], [7.0, 7.0, 110.0]])
    return [straight, bent, vertical]


def _polyline(mesh, i):
    return mesh.points[mesh.get_cell(i).point_ids]


def test_round_trip_of_cells_points_and_arrays(tmp_path):
    import pyvista

    rays = _rays()
    path = write_rays_vtp(
        tmp_path / "out" / "rays.vtp",
        rays,
        tx_ids=["T1", "T1", "B2-07"],
        rx_ids=["R4", "R5", "T1"],
        time_ns=[101.5, np.nan, 33.0],
        predicted_time_ns=[100.25, 80.0, 33.5],
        input_lines=[2, 3, 7],
    )
    assert path == tmp_path / "out" / "rays.vtp"
    assert os.listdir(path.parent) == ["rays.vtp"]
    mesh = pyvista.read(path)
    assert mesh.n_cells == 3
    for i, ray in enumerate(rays):
        # VTK reports a two-point entry of the lines list as a line, longer ones as polylines
        expected = pyvista.CellType.LINE if len(ray) == 2 else pyvista.CellType.POLY_LINE
        assert mesh.get_cell(i).type == expected
        assert np.array_equal(_polyline(mesh, i), ray)
    data = mesh.cell_data
    assert set(data.keys()) == {"pair_index", "tx", "rx", "time_ns", "predicted_time_ns", "input_line"}
    assert np.array_equal(data["pair_index"], [0, 1, 2])
    assert list(data["tx"]) == ["T1", "T1", "B2-07"]
    assert list(data["rx"]) == ["R4", "R5", "T1"]
    assert np.array_equal(data["time_ns"], [101.5, np.nan, 33.0], equal_nan=True)
    assert np.array_equal(data["predicted_time_ns"], [100.25, 80.0, 33.5])
    assert np.array_equal(data["input_line"], [2, 3, 7])


def test_optional_arrays_are_left_out_when_not_given(tmp_path):
    import pyvista

    path = write_rays_vtp(tmp_path / "rays.vtp", _rays()[:2], tx_ids=["A", "A"], rx_ids=["B", "C"])
    mesh = pyvista.read(path)
    assert set(mesh.cell_data.keys()) == {"pair_index", "tx", "rx"}
    assert mesh.n_cells == 2


def test_node_ids_beyond_ascii_survive(tmp_path):
    import pyvista

    path = write_rays_vtp(
        tmp_path / "rays.vtp", _rays()[:2], tx_ids=["Nœud-1", "Süd 2"], rx_ids=["Été-3", "北4"]
    )
    mesh = pyvista.read(path)
    assert list(mesh.cell_data["tx"]) == ["Nœud-1", "Süd 2"]
    assert list(mesh.cell_data["rx"]) == ["Été-3", "北4"]


def test_no_rays_give_an_empty_file(tmp_path):
    import pyvista

    mesh = pyvista.read(write_rays_vtp(tmp_path / "rays.vtp", [], tx_ids=[], rx_ids=[], time_ns=[]))
    assert mesh.n_cells == 0
    assert len(mesh.cell_data["time_ns"]) == 0


def test_inputs_are_not_modified(tmp_path):
    rays = _rays()
    copies = [r.copy() for r in rays]
    observed = np.array([1.0, 2.0, 3.0])
    write_rays_vtp(tmp_path / "rays.vtp", rays, tx_ids=["a", "b", "c"], rx_ids=["d", "e", "f"], time_ns=observed)
    assert all(np.array_equal(r, c) for r, c in zip(rays, copies))
    assert np.array_equal(observed, [1.0, 2.0, 3.0])


@pytest.mark.parametrize(
    "polylines, kwargs, message",
    [
        ([np.zeros((1, 3))], {}, r"polylines\[0\] has shape \(1, 3\); expected \(k, 3\) with k >= 2"),
        ([np.zeros((2, 2))], {}, r"polylines\[0\] has shape \(2, 2\); expected \(k, 3\) with k >= 2"),
        ([np.array([[0, 0, 0], [np.nan, 0, 0]])], {}, r"polylines\[0\] has non-finite coordinates"),
        ([np.zeros((2, 3))], {"tx_ids": []}, r"tx_ids has 0 entries, expected one per polyline \(1\)"),
        ([np.zeros((2, 3))], {"input_lines": [1, 2]}, r"input_lines has shape \(2,\), expected \(1,\)"),
        ([np.zeros((2, 3))], {"predicted_time_ns": [[1.0]]}, r"predicted_time_ns has shape \(1, 1\), expected \(1,\)"),
    ],
)
def test_wrong_arguments_are_named_and_nothing_is_written(tmp_path, polylines, kwargs, message):
    arguments = {"tx_ids": ["a"], "rx_ids": ["b"], **kwargs}
    with pytest.raises(ValueError, match=message):
        write_rays_vtp(tmp_path / "rays.vtp", polylines, **arguments)
    assert os.listdir(tmp_path) == []
