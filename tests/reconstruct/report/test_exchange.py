"""Tests for reconstruct.report.exchange: bodies as DXF, OBJ and STL; the block model CSV.

Outside references: pyvista (VTK's mass properties) measures the volume of the
surfaces as written and as read back (OBJ and STL by VTK's readers, the DXF
by ezdxf), and VTK's image reader reads ``interpretation.vti`` for the
cell-by-cell check of the block model. Cubes and bodies are invented.
"""

from __future__ import annotations

import csv
import json
import math

import ezdxf
import numpy as np
import pytest
import pyvista

from reconstruct.cli import main
from reconstruct.interpret.bodies import find_voids
from reconstruct.io.outputs import read_cell_arrays_vti, write_cell_arrays_vti
from reconstruct.model.grid import Grid
from reconstruct.report import pictures as render
from reconstruct.report.exchange import (BLOCK_CLASSES, EXCHANGE_FILES, body_triangles, stl_precision_m,
                                         write_void_exchange)


ORIGIN_M = (512000.0, 6104000.0, 200.0)  # site coordinates of UTM size


def _two_bodies(origin=ORIGIN_M):
    """An air-filled ellipsoid and a water-filled box in a 40 x 30 x 30 m cube."""
    grid = Grid(origin, (1.0, 1.0, 1.0), (40, 30, 30))
    centres = grid.cell_centres_m() - np.asarray(origin)
    ground = centres[..., 2] < 28.0
    rng = np.random.default_rng(11)
    velocity = np.where(ground, 0.115 + rng.normal(0, 0.0003, grid.shape), 0.2998)
    velocity[(((centres - [12.3, 15.2, 14.6]) / [6.0, 4.0, 3.0]) ** 2).sum(axis=-1) <= 1.0] = 0.25
    velocity[30:36, 10:16, 8:13] = 0.06
    analysis = find_voids(grid, velocity, ground, np.ones(grid.shape), np.full((40, 30), origin[2] + 28.0),
                          frequency_mhz=100.0, path_length_m=30.0, rms_ns=0.5)
    return grid, analysis


def _volume(faces):
    """pyvista's volume of triangles given as (n, 3, 3) corners."""
    n = len(faces)
    cells = np.column_stack([np.full(n, 3), np.arange(3 * n).reshape(n, 3)]).ravel()
    return pyvista.PolyData(np.asarray(faces, float).reshape(-1, 3), cells).volume


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    grid, analysis = _two_bodies()
    mesh = render.void_surfaces(grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)
    folder = tmp_path_factory.mktemp("exchange")
    written = write_void_exchange(folder, mesh, title="test pit")
    return mesh, analysis, folder, written


def test_two_bodies_of_both_fills_are_exported(exported):
    mesh, analysis, folder, written = exported
    assert sorted(p.name for p in written) == ["voids.dxf", "voids.obj", "voids.stl"]
    assert {b.fill for b in analysis.bodies} == {"air", "water_or_clay"}
    assert sorted(body_triangles(mesh)) == sorted(b.body_id for b in analysis.bodies)
    assert not list(folder.glob(".*partial*"))


def test_bodies_reopen_with_the_same_volume_within_1_percent(exported):
    mesh, analysis, folder, _ = exported
    expected = {b.body_id: mesh.extract_cells(np.flatnonzero(mesh.cell_data["body_id"] == b.body_id))
                .extract_surface(algorithm=None).volume for b in analysis.bodies}
    assert all(v > 10.0 for v in expected.values())

    obj = pyvista.read(folder / "voids.obj")  # VTK's OBJ reader: one group id per body
    groups = np.asarray(obj.cell_data["GroupIds"]).astype(int)
    for group, body_id in enumerate(sorted(expected)):
        part = obj.extract_cells(np.flatnonzero(groups == group)).extract_surface(algorithm=None)
        assert part.volume == pytest.approx(expected[body_id], rel=0.01)

    # STL is checked at a small origin (below): at 6.1e6 m its 32-bit floats move corners by 0.5 m

    doc = ezdxf.readfile(folder / "voids.dxf")
    assert doc.header["$INSUNITS"] == 6  # metres
    for body_id, volume in expected.items():
        faces = [[e.dxf.vtx0, e.dxf.vtx1, e.dxf.vtx2]
                 for e in doc.modelspace().query(f'3DFACE[layer=="body_{body_id}"]')]
        assert _volume(faces) == pytest.approx(volume, rel=0.01)


def test_exported_coordinates_keep_the_site_frame_to_the_millimetre(exported, tmp_path):
    # the same cube at a small origin gives the same surfaces shifted: translation invariance
    mesh, _, folder, _ = exported
    grid, analysis = _two_bodies(origin=(0.0, 0.0, 200.0))
    local = render.void_surfaces(grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)
    shift = np.asarray(ORIGIN_M) - (0.0, 0.0, 200.0)
    obj = pyvista.read(folder / "voids.obj")
    np.testing.assert_allclose(np.asarray(obj.bounds).reshape(3, 2) - shift[:, None],
                               np.asarray(local.bounds).reshape(3, 2), atol=1e-3)
    doc = ezdxf.readfile(folder / "voids.dxf")
    corners = np.array([e.dxf.vtx0 for e in doc.modelspace().query("3DFACE")])
    np.testing.assert_allclose(corners.min(axis=0) - shift, np.asarray(local.bounds)[::2], atol=1e-3)
    stl = pyvista.read(folder / "voids.stl")
    # STL holds 32-bit floats: near 6.1e6 m they keep about half a metre, the limit stated in the docs
    np.testing.assert_allclose(stl.bounds, mesh.bounds, atol=0.6)


def test_stl_reopens_with_the_same_volume_within_1_percent_at_a_small_origin(tmp_path):
    grid, analysis = _two_bodies(origin=(1000.0, 2000.0, 200.0))
    mesh = render.void_surfaces(grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)
    write_void_exchange(tmp_path, mesh)
    stl = pyvista.read(tmp_path / "voids.stl")
    assert stl.n_cells > 0.99 * mesh.n_cells  # VTK's STL reader drops the few zero-area triangles
    assert stl.volume == pytest.approx(mesh.volume, rel=0.01)
    assert stl_precision_m(mesh) < 1e-3 < stl_precision_m(_two_bodies_mesh_at_utm())


def _two_bodies_mesh_at_utm():
    grid, analysis = _two_bodies()
    return render.void_surfaces(grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)


def test_no_bodies_still_gives_readable_empty_files(tmp_path):
    grid = Grid((0.0, 0.0, 0.0), (1.0, 1.0, 1.0), (4, 4, 4))
    mesh = render.void_surfaces(grid, np.zeros(grid.shape, int), np.zeros(grid.shape), [])
    write_void_exchange(tmp_path, mesh)
    assert len(ezdxf.readfile(tmp_path / "voids.dxf").modelspace().query("3DFACE")) == 0
    assert not [line for line in (tmp_path / "voids.obj").read_text().splitlines() if line.startswith("v ")]
    data = (tmp_path / "voids.stl").read_bytes()
    assert len(data) == 84 and int(np.frombuffer(data[80:], np.uint32)[0]) == 0  # STL: header, count


# ------------------------------------------------------------------ through the command

def _run_voids(make_inversion_folder):
    folder, site_path = make_inversion_folder()
    grid, arrays = read_cell_arrays_vti(folder / "velocity.vti",
                                        ["velocity_m_per_ns", "slowness_ns_per_m", "ray_length_m", "ray_count",
                                         "ground"])
    arrays["velocity_m_per_ns"][20:25, 12:17, 3:7] = 0.06  # a water- or clay-filled body
    arrays["slowness_ns_per_m"] = 1.0 / arrays["velocity_m_per_ns"]
    arrays["ray_count"][:3, :3, :] = 0  # a corner no ray crossed
    arrays["ray_length_m"][:3, :3, :] = 0.0
    write_cell_arrays_vti(folder / "velocity.vti", grid, arrays)
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    return folder


def test_the_block_model_agrees_with_interpretation_vti_cell_by_cell(make_inversion_folder):
    folder = _run_voids(make_inversion_folder)
    image = pyvista.read(folder / "interpretation.vti")
    shape = tuple(int(n) - 1 for n in image.dimensions)
    cube = {name: np.asarray(image.cell_data[name]).reshape(shape, order="F") for name in image.cell_data}
    with open(folder / "block_model.csv", newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    ground = cube["ground"].astype(bool)
    assert len(rows) == int(ground.sum())
    assert set(rows[0]) == ({"ix", "iy", "iz", "x_m", "y_m", "z_m", "dx_m", "dy_m", "dz_m", "class"}
                            | set(cube) - {"ground"})
    for row in rows:
        cell = (int(row["ix"]), int(row["iy"]), int(row["iz"]))
        assert ground[cell]
        centre = np.asarray(image.origin) + (np.asarray(cell) + 0.5) * np.asarray(image.spacing)
        np.testing.assert_allclose([float(row[k]) for k in ("x_m", "y_m", "z_m")], centre, atol=5e-4)
        assert [float(row[k]) for k in ("dx_m", "dy_m", "dz_m")] == list(image.spacing)
        for name, values in cube.items():
            if name == "ground":
                continue
            value = float(values[cell])
            if math.isnan(value):
                assert row[name] == ""
            else:
                assert float(row[name]) == pytest.approx(value, rel=1e-6, abs=1e-9)
    classes = {}
    for row in rows:
        classes.setdefault(row["class"], set()).add(int(row["body_id"]))
    assert set(classes) <= set(BLOCK_CLASSES)
    assert classes["rock"] == {0} and classes["no rays"] == {0}
    assert "air-filled void" in classes and "water- or clay-filled void" in classes
    corner = [r for r in rows if int(r["ix"]) < 3 and int(r["iy"]) < 3]
    assert corner and {r["class"] for r in corner} == {"no rays"}


def test_the_files_are_in_the_manifest_and_in_voids_json(make_inversion_folder):
    folder = _run_voids(make_inversion_folder)
    manifest = json.loads((folder / "manifest.json").read_text())
    assert set(EXCHANGE_FILES) <= set(manifest["outputs"])
    assert set(EXCHANGE_FILES) <= set(manifest["later_runs"][-1]["outputs"])
    content = json.loads((folder / "voids.json").read_text())
    assert set(content["mine_planning"]["files"]) == set(EXCHANGE_FILES)
    assert content["mine_planning"]["block_model_classes"] == BLOCK_CLASSES
    layers = {e.dxf.layer for e in ezdxf.readfile(folder / "voids.dxf").modelspace()}
    assert layers == {f"body_{b['body_id']}" for b in content["bodies"]}
