"""Tests of the result writers (reconstruct.io.outputs).

Outside references: files are read back with the standard library (json,
csv, hashlib for sha256) and VTK image data with pyvista.read; the VTK cell
order (x varies fastest) is undone with numpy's reshape(order="F"). That a
file written through a temporary name and os.replace is either old or new,
never partial, is common practice, no published source.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import stat

import numpy as np
import pytest

from reconstruct.model.grid import Grid
from reconstruct.io.outputs import (
    atomic_path,
    build_manifest,
    sha256_of_file,
    write_cell_arrays_vti,
    write_csv_atomic,
    write_json_atomic,
    write_text_atomic,
)

pytestmark = pytest.mark.filterwarnings("error")


def _umask():
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def test_write_text_leaves_the_file_and_no_temporary(tmp_path):
    path = write_text_atomic(tmp_path / "out" / "notes.txt", "ligne 1\nzweite Zeile ü\n")
    assert path == tmp_path / "out" / "notes.txt"
    assert path.read_bytes() == "ligne 1\nzweite Zeile ü\n".encode("utf-8")
    assert os.listdir(path.parent) == ["notes.txt"]


def test_written_files_get_the_usual_permissions(tmp_path):
    # common practice, no published source: new files get 0o666 less the umask,
    # as open() gives them; a private 0600 file would hide results from colleagues
    path = write_text_atomic(tmp_path / "a.txt", "x")
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o666 & ~_umask()


def test_write_json_round_trip_with_nan_as_null(tmp_path):
    data = {
        "rms_ns": 1.25,
        "missing": float("nan"),
        "inf": float("inf"),
        "numpy_scalar": np.float32("nan"),
        "count": np.int64(7),
        "array": np.array([1.0, np.nan, 3.0]),
        "nested": [{"a": (np.float64(2.5), np.nan)}],
        1: "key made text",
    }
    path = write_json_atomic(tmp_path / "summary.json", data)
    text = path.read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    assert json.loads(text) == {
        "rms_ns": 1.25,
        "missing": None,
        "inf": None,
        "numpy_scalar": None,
        "count": 7,
        "array": [1.0, None, 3.0],
        "nested": [{"a": [2.5, None]}],
        "1": "key made text",
    }
    assert os.listdir(tmp_path) == ["summary.json"]


def test_write_json_refuses_objects_it_cannot_write(tmp_path):
    with pytest.raises(TypeError, match="cannot write object to JSON"):
        write_json_atomic(tmp_path / "bad.json", {"x": object()})
    assert os.listdir(tmp_path) == []


def test_write_csv_round_trip(tmp_path):
    rows = [("T1", "R1", 12.5), ("T2", "R,2", -0.25), ("T3", 'R"3', "")]
    path = write_csv_atomic(tmp_path / "picks.csv", ["tx", "rx", "time_ns"], rows)
    with open(path, newline="", encoding="utf-8") as handle:
        back = list(csv.reader(handle))
    assert back == [["tx", "rx", "time_ns"], ["T1", "R1", "12.5"], ["T2", "R,2", "-0.25"], ["T3", 'R"3', ""]]
    assert os.listdir(tmp_path) == ["picks.csv"]


def test_an_exception_keeps_the_old_content_and_removes_the_temporary(tmp_path):
    path = tmp_path / "model.txt"
    path.write_text("old\n", encoding="utf-8")
    with pytest.raises(RuntimeError, match="interrupted"):
        with atomic_path(path) as tmp:
            assert tmp.parent == tmp_path and tmp.suffix == ".txt" and tmp != path
            tmp.write_text("half of the new", encoding="utf-8")
            raise RuntimeError("interrupted")
    assert path.read_text(encoding="utf-8") == "old\n"
    assert os.listdir(tmp_path) == ["model.txt"]


def test_an_interrupt_before_any_file_existed_leaves_nothing(tmp_path):
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(tmp_path / "new.vti"):
            raise KeyboardInterrupt
    assert os.listdir(tmp_path) == []


def test_vti_round_trip_with_pyvista(tmp_path):
    pyvista = pytest.importorskip("pyvista")
    grid = Grid((500.0, -20.0, 95.5), (0.5, 1.0, 2.0), (3, 4, 5))
    rng = np.random.default_rng(42)
    velocity = rng.uniform(0.08, 0.12, grid.shape)  # asymmetric: every element differs
    ground = rng.random(grid.shape) < 0.5
    count = np.arange(grid.n_cells, dtype=np.int32).reshape(grid.shape)
    path = write_cell_arrays_vti(
        tmp_path / "model.vti", grid,
        {"velocity_m_per_ns": velocity, "ground": ground, "ray_count": count},
    )
    assert os.listdir(tmp_path) == ["model.vti"]
    image = pyvista.read(str(path))
    assert tuple(image.dimensions) == (4, 5, 6)
    np.testing.assert_allclose(image.spacing, grid.cell_m, rtol=1e-15)
    np.testing.assert_allclose(image.origin, grid.origin_m, rtol=1e-15)
    assert image.n_cells == grid.n_cells

    back = np.asarray(image.cell_data["velocity_m_per_ns"]).reshape(grid.shape, order="F")
    for ix in range(grid.shape[0]):
        for iy in range(grid.shape[1]):
            for iz in range(grid.shape[2]):
                assert back[ix, iy, iz] == velocity[ix, iy, iz]
    # VTK's own cell id: ix + nx * (iy + ny * iz)
    assert image.cell_data["ray_count"][2 + 3 * (1 + 4 * 3)] == count[2, 1, 3]
    # the cell holding a point, asked of VTK, carries that cell's value
    point = [500.0 + 0.5 * 2.5, -20.0 + 1.0 * 3.5, 95.5 + 2.0 * 0.5]
    assert image.cell_data["velocity_m_per_ns"][image.find_containing_cell(point)] == velocity[2, 3, 0]

    flags = np.asarray(image.cell_data["ground"])
    assert flags.dtype == np.uint8
    np.testing.assert_array_equal(flags.reshape(grid.shape, order="F"), ground.astype(np.uint8))


def test_vti_refuses_an_array_of_the_wrong_shape(tmp_path):
    pytest.importorskip("pyvista")
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (3, 4, 5))
    with pytest.raises(ValueError, match=r"cell array 'velocity' has shape \(5, 4, 3\), expected \(3, 4, 5\)"):
        write_cell_arrays_vti(tmp_path / "m.vti", grid, {"velocity": np.zeros((5, 4, 3))})
    assert os.listdir(tmp_path) == []


def test_manifest_hashes_match_hashlib(tmp_path):
    site = tmp_path / "site.yaml"
    picks = tmp_path / "picks.csv"
    site.write_bytes(b"model:\n  cell_m: 1.0\n")
    picks.write_bytes(bytes(range(256)) * 5000)  # more than one 1 MiB read block
    manifest = build_manifest(
        command=["reconstruct", "run"],
        inputs={"site": site, "picks": picks, "nodes": None},
        parameters={"lambda": 1.0},
        outputs=[tmp_path / "b.vti", tmp_path / "a.json"],
        started="2024-01-01T00:00:00+00:00",
        finished="2024-01-01T00:01:00+00:00",
    )
    for role, path in (("site", site), ("picks", picks)):
        entry = manifest["inputs"][role]
        assert entry["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
        assert entry["bytes"] == len(path.read_bytes())
        assert entry["path"] == str(path)
    assert "nodes" not in manifest["inputs"]
    assert manifest["outputs"] == [str(tmp_path / "a.json"), str(tmp_path / "b.vti")]
    assert manifest["versions"]["numpy"] == np.__version__
    assert sha256_of_file(picks) == hashlib.sha256(picks.read_bytes()).hexdigest()
    # the manifest itself must be writable as JSON
    back = json.loads(write_json_atomic(tmp_path / "manifest.json", manifest).read_text(encoding="utf-8"))
    assert back["inputs"]["site"]["sha256"] == manifest["inputs"]["site"]["sha256"]
