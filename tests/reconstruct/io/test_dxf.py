"""Tests for reconstruct.io.dxf: planned works read from DXF drawings, 3D faces written.

The drawings are made here with ezdxf (a general-purpose DXF library from the
package registry), which is the outside reference for the round trips: what
ezdxf writes at known coordinates must come back at the same site coordinates
within 1 mm. Values are invented. Unit factors: 1 ft = 0.3048 m exactly
(international foot, 1959); DXF ``$INSUNITS`` codes (4 mm, 6 m) and the bulge
= tan(included angle / 4) of a polyline arc from the Autodesk DXF Reference
(2012).
"""

import csv
import hashlib
import json
import math

import ezdxf
import numpy as np
import pytest
import yaml

from reconstruct.cli import main
from reconstruct.errors import InputError
from reconstruct.io.dxf import ARC_SAGITTA_M, DxfDrawing, read_planned_works_dxf, write_faces_dxf
from reconstruct.io.site import load_site
from tests.cli_helpers import assert_user_error, run_main

TOL_M = 1e-3  # the round-trip tolerance: 1 mm

# site coordinates of the works drawn below (model box x 0..60, y 0..40, z 70..110)
ROAD = [(2.0, 5.0, 101.0), (30.0, 8.5, 100.25), (58.0, 20.0, 99.5)]
BENCH = [(10.0, 10.0, 96.0), (40.0, 10.0, 96.0), (40.0, 30.0, 96.0), (10.0, 30.0, 96.0)]
RAMP_2D = [(5.0, 35.0), (25.0, 36.0)]  # 2D polyline at elevation 104.5
RAMP_2D_Z = 104.5
PIT_3D = [(20.0, 20.0, 90.0), (25.0, 22.0, 88.5), (30.0, 20.0, 87.0)]
FACE = [(30.0, 30.0, 95.0), (35.0, 30.0, 95.5), (35.0, 35.0, 96.0), (30.0, 35.0, 95.5)]
HOLES = [((12.0, 3.0, 100.0), (12.5, 3.0, 88.0)), ((15.0, 3.0, 100.0), (15.5, 3.0, 88.0))]
COLLARS = [(45.0 + 3.0 * i, 25.0 + 3.0 * j, 100.0 + 0.1 * i) for i in range(4) for j in range(3)]

LAYERS = {"HAUL_ROAD": "haul_road", "Bench_Design": "bench", "PIT": "bench", "SHOT_12": "blast_pattern",
          "COLLARS": "blast_pattern"}


def _site_data(drawing_entry):
    return {
        "name": "dxf test pit",
        "model": {"origin_m": [0, 0, 70], "size_m": [60, 40, 40], "cell_m": 2.0},
        "ground": {"flat_elevation_m": 100.0},
        "rock": {"velocity_m_per_ns": 0.12, "conductivity_ms_per_m": 1.0, "antenna_frequency_mhz": 100},
        "planned_works_dxf": [drawing_entry],
    }


def _to_drawing(points, scale, offset):
    return [tuple((np.asarray(p, float) - np.asarray(offset[:len(p)])) / scale) for p in points]


def _draw_works(path, *, units_code=6, scale=1.0, offset=(0.0, 0.0, 0.0), extra=None):
    """A drawing of every entity type voidcube reads; ``scale`` m per unit, ``offset`` m."""
    doc = ezdxf.new("R2010", setup=False)
    if units_code is not None:
        doc.header["$INSUNITS"] = units_code
    msp = doc.modelspace()
    road = _to_drawing(ROAD, scale, offset)
    msp.add_polyline3d(road, dxfattribs={"layer": "HAUL_ROAD"})
    bench = _to_drawing(BENCH, scale, offset)
    msp.add_lwpolyline([p[:2] for p in bench], close=True,
                       dxfattribs={"layer": "BENCH_DESIGN", "elevation": bench[0][2]})
    ramp = _to_drawing(RAMP_2D, scale, offset)
    ramp_line = msp.add_polyline2d(ramp, dxfattribs={"layer": "Bench_Design"})
    ramp_line.dxf.elevation = (0.0, 0.0, (RAMP_2D_Z - offset[2]) / scale)
    msp.add_polyline3d(_to_drawing(PIT_3D, scale, offset), dxfattribs={"layer": "PIT"})
    msp.add_3dface(_to_drawing(FACE, scale, offset), dxfattribs={"layer": "PIT"})
    for collar, toe in HOLES:
        # drawn toe first: the reader must put the collar (higher end) first
        start, end = _to_drawing([toe, collar], scale, offset)
        msp.add_line(start, end, dxfattribs={"layer": "SHOT_12"})
    for collar in _to_drawing(COLLARS, scale, offset):
        msp.add_point(collar, dxfattribs={"layer": "COLLARS"})
    msp.add_text("not a planned work", dxfattribs={"layer": "ANNOTATION"})
    if extra is not None:
        extra(msp)
    doc.saveas(path)
    return path


def _entry(units="m", offset=(0, 0, 0), layers=None, file="works.dxf"):
    return {"file": file, "units": units, "offset_m": list(offset), "layers": layers or dict(LAYERS)}


def _load(tmp_path, entry):
    site_path = tmp_path / "site.yaml"
    site_path.write_text(yaml.safe_dump(_site_data(entry), sort_keys=False))
    return load_site(site_path)


def _message(tmp_path, entry) -> str:
    with pytest.raises(InputError) as info:
        _load(tmp_path, entry)
    return str(info.value)


def _by_entity(works, layer, entity_type):
    return [w for w in works if f" {layer} {entity_type} " in f"{w.name} "]


# ------------------------------------------------------------------ round trip

@pytest.mark.parametrize("units, scale, code, offset", [
    ("m", 1.0, 6, (0.0, 0.0, 0.0)),
    ("mm", 1e-3, 4, (512000.25, 6104000.5, -20.0)),
    ("ft", 0.3048, 2, (-100.0, 250.0, 3.0)),
])
def test_round_trip_gives_the_same_geometry_within_1_mm(tmp_path, units, scale, code, offset):
    _draw_works(tmp_path / "works.dxf", units_code=code, scale=scale, offset=offset)
    site = _load(tmp_path, _entry(units, offset))
    works = site.planned_works

    (road,) = _by_entity(works, "HAUL_ROAD", "POLYLINE")
    assert road.kind == "haul_road" and road.geometry == "polyline"
    np.testing.assert_allclose(road.points_m, ROAD, atol=TOL_M, rtol=0)

    # one layer in two spellings (CAD ignores case), named as the drawing first spells it
    (bench,) = _by_entity(works, "BENCH_DESIGN", "LWPOLYLINE")
    assert bench.kind == "bench" and bench.geometry == "polygon"
    np.testing.assert_allclose(bench.points_m, BENCH, atol=TOL_M, rtol=0)

    (ramp,) = _by_entity(works, "BENCH_DESIGN", "POLYLINE")
    np.testing.assert_allclose(ramp.points_m, [(x, y, RAMP_2D_Z) for x, y in RAMP_2D], atol=TOL_M, rtol=0)

    pit = _by_entity(works, "PIT", "POLYLINE")[0]
    np.testing.assert_allclose(pit.points_m, PIT_3D, atol=TOL_M, rtol=0)
    (face,) = _by_entity(works, "PIT", "3DFACE")
    assert face.geometry == "polygon"
    np.testing.assert_allclose(face.points_m, FACE, atol=TOL_M, rtol=0)

    holes = _by_entity(works, "SHOT_12", "LINE")
    assert [w.kind for w in holes] == ["blast_pattern"] * 2
    for work, (collar, toe) in zip(holes, HOLES):
        np.testing.assert_allclose(work.points_m, [collar, toe], atol=TOL_M, rtol=0)

    (pattern,) = [w for w in works if "COLLARS" in w.name]
    # the outline of a 4 x 3 rectangular pattern is its four corner collars
    corners = {(45.0, 25.0), (54.0, 25.0), (54.0, 31.0), (45.0, 31.0)}
    assert pattern.geometry == "polygon"
    assert {(round(x, 3), round(y, 3)) for x, y, _ in pattern.points_m} == corners
    by_xy = {(c[0], c[1]): c[2] for c in COLLARS}
    for x, y, z in pattern.points_m:
        assert abs(z - by_xy[(round(x, 3), round(y, 3))]) < TOL_M
    assert len(works) == 8
    assert any("ANNOTATION (1)" in note for note in site.notes)  # skipped with a note, not an error
    assert any("depth is not known" in note for note in site.notes)
    assert site.planned_works_dxf[0].units == units


def test_collar_points_become_blast_holes_with_the_depth_of_the_entry(tmp_path):
    _draw_works(tmp_path / "works.dxf")
    site = _load(tmp_path, {**_entry(), "hole_depth_m": 10.5, "subdrill_m": 1.0})
    (pattern,) = [w for w in site.planned_works if "COLLARS" in w.name]
    assert pattern.has_holes and len(pattern.holes) == len(COLLARS)
    # flat arrays: pytest.approx takes no nested sequences
    got = np.array(sorted(h.collar_m for h in pattern.holes), dtype=float)
    assert np.allclose(got, np.array(sorted(COLLARS), dtype=float), rtol=0.0, atol=TOL_M)
    # collar elevation, then 10.5 m down to the end of the charge and 1 m more to the toe
    for hole, (top, charge, toe) in zip(pattern.holes, pattern.hole_columns_m()):
        assert (top - charge, charge - toe) == pytest.approx((10.5, 1.0))
    assert any("vertical blast holes 10.5 m deep" in note for note in site.notes)
    assert "planned_works_dxf[0].subdrill_m needs planned_works_dxf[0].hole_depth_m" in _message(
        tmp_path, {**_entry(), "subdrill_m": 1.0})
    assert "planned_works_dxf[0].hole_depth_m must be greater than 0 m (got 0)" in _message(
        tmp_path, {**_entry(), "hole_depth_m": 0})


def test_arcs_of_a_polyline_become_chords_on_the_circle(tmp_path):
    # a half circle of radius 5 m from (10, 20) to (20, 20): bulge = tan(180 deg / 4) = 1
    def extra(msp):
        msp.add_lwpolyline([(10.0, 20.0, 1.0), (20.0, 20.0, 0.0)], format="xyb",
                           dxfattribs={"layer": "HAUL_ROAD", "elevation": 100.0})

    _draw_works(tmp_path / "works.dxf", extra=extra)
    works = _load(tmp_path, _entry()).planned_works
    (arc,) = _by_entity(works, "HAUL_ROAD", "LWPOLYLINE")
    p = np.asarray(arc.points_m)
    radius = np.hypot(p[:, 0] - 15.0, p[:, 1] - 20.0)
    np.testing.assert_allclose(radius, 5.0, atol=TOL_M)
    np.testing.assert_allclose(p[:, 2], 100.0)
    np.testing.assert_allclose(p[[0, -1], :2], [(10.0, 20.0), (20.0, 20.0)], atol=TOL_M)
    # every chord stays within the stated sagitta of the arc: r (1 - cos(angle / 2))
    angles = np.abs(np.diff(np.unwrap(np.arctan2(p[:, 1] - 20.0, p[:, 0] - 15.0))))
    assert np.all(5.0 * (1.0 - np.cos(angles / 2.0)) <= ARC_SAGITTA_M + 1e-9)
    assert abs(angles.sum() - math.pi) < 1e-6


def test_the_drawing_is_not_modified(tmp_path):
    path = _draw_works(tmp_path / "works.dxf")
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    _load(tmp_path, _entry())
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


def test_unset_units_are_read_as_the_site_file_says_with_a_note(tmp_path):
    _draw_works(tmp_path / "works.dxf", units_code=0, scale=1e-3)
    site = _load(tmp_path, _entry(units="mm"))
    np.testing.assert_allclose(_by_entity(site.planned_works, "HAUL_ROAD", "POLYLINE")[0].points_m,
                               ROAD, atol=TOL_M, rtol=0)
    assert any("does not state its units" in note for note in site.notes)


# ------------------------------------------------------------------ bad input

def test_units_that_disagree_with_the_drawing_are_refused(tmp_path):
    _draw_works(tmp_path / "works.dxf", units_code=4, scale=1e-3)
    msg = _message(tmp_path, _entry(units="m"))
    assert "works.dxf" in msg and "planned_works_dxf[0]" in msg
    assert "millimetres ($INSUNITS = 4)" in msg and "set planned_works_dxf[0].units to mm" in msg


def test_an_unusable_entity_on_a_mapped_layer_is_named_with_its_handle(tmp_path):
    handles = []

    def extra(msp):
        handles.append(msp.add_circle((10, 10, 100), 3.0, dxfattribs={"layer": "HAUL_ROAD"}).dxf.handle)
        handles.append(msp.add_point((20, 20, 100), dxfattribs={"layer": "PIT"}).dxf.handle)

    _draw_works(tmp_path / "works.dxf", extra=extra)
    msg = _message(tmp_path, _entry())
    assert f"layer 'HAUL_ROAD', CIRCLE (handle {handles[0]}): a CIRCLE cannot be a haul_road" in msg
    assert f"layer 'PIT', POINT (handle {handles[1]}): a POINT cannot be a bench" in msg
    assert "works.dxf" in msg and "move it to a layer not in the mapping" in msg


def test_a_work_far_outside_the_model_box_names_the_entity_and_the_box(tmp_path):
    # drawn in metres but declared as millimetres in a drawing without $INSUNITS: all lands near 0
    _draw_works(tmp_path / "works.dxf", units_code=0, offset=(500000.0, 6000000.0, 0.0))
    msg = _message(tmp_path, _entry(units="m", offset=(0, 0, 0)))
    assert "outside the model box (x 0..60, y 0..40, z 70..110 m)" in msg
    assert "layer 'HAUL_ROAD', POLYLINE (handle" in msg
    assert "check planned_works_dxf[0].units (m) and planned_works_dxf[0].offset_m" in msg


def test_no_usable_layer_is_an_error_listing_the_drawings_layers(tmp_path):
    _draw_works(tmp_path / "works.dxf")
    msg = _message(tmp_path, _entry(layers={"ROADS": "haul_road"}))
    assert "no planned work found on the mapped layers (ROADS)" in msg
    assert "HAUL_ROAD (1)" in msg and "fix the layer names in planned_works_dxf[0].layers" in msg


def test_degenerate_entities_are_refused(tmp_path):
    handles = []

    def extra(msp):
        handles.append(msp.add_line((5, 5, 100), (5, 5, 100), dxfattribs={"layer": "HAUL_ROAD"}).dxf.handle)
        handles.append(msp.add_lwpolyline([(1, 1), (2, 2), (3, 3)], close=True,
                                          dxfattribs={"layer": "PIT", "elevation": 95}).dxf.handle)
        handles.append(msp.add_point((20, 20, 100), dxfattribs={"layer": "LONE"}).dxf.handle)

    _draw_works(tmp_path / "works.dxf", extra=extra)
    msg = _message(tmp_path, _entry(layers={**LAYERS, "LONE": "blast_pattern"}))
    assert f"LINE (handle {handles[0]}): has 1 distinct point(s), a polyline needs at least 2" in msg
    assert f"LWPOLYLINE (handle {handles[1]}): is closed but has zero area" in msg
    assert f"POINT (handle {handles[2]}): is the only hole collar" in msg


def test_a_polyface_mesh_is_refused_with_the_fix(tmp_path):
    def extra(msp):
        mesh = msp.add_polyface(dxfattribs={"layer": "PIT"})
        mesh.append_face([(0, 0, 90), (1, 0, 90), (1, 1, 90)])

    _draw_works(tmp_path / "works.dxf", extra=extra)
    msg = _message(tmp_path, _entry())
    assert "polyface or polygon mesh cannot be read; explode it into 3DFACEs" in msg


@pytest.mark.parametrize("name, content, expected", [
    ("missing.dxf", None, "file not found; the path is relative to the site file's folder"),
    ("pit.dwg", b"AC1032 binary", "is a DWG file; save or export the drawing as DXF"),
    ("broken.dxf", b"this is not a drawing\n", "not a readable DXF drawing"),
])
def test_a_file_that_cannot_be_read_is_named(tmp_path, name, content, expected):
    if content is not None:
        (tmp_path / name).write_bytes(content)
    msg = _message(tmp_path, _entry(file=name))
    assert f"planned_works_dxf[0].file: {tmp_path / name}: {expected}" in msg


@pytest.mark.parametrize("change, expected", [
    ({"units": "metres"}, "planned_works_dxf[0].units 'metres' is not one of m, cm, mm"),
    ({"layers": {"ROAD": "road"}}, "planned_works_dxf[0].layers.ROAD 'road' is not one of haul_road"),
    ({"layers": {"ROAD": "haul_road", "road": "bench"}}, "are the same layer"),
    ({"layers": []}, "planned_works_dxf[0].layers must be a section of layer names and kinds"),
    ({"offset_m": [1, 2]}, "planned_works_dxf[0].offset_m must be a list of 3 numbers"),
    ({"scale": 2}, "planned_works_dxf[0].scale is not a known key"),
])
def test_bad_site_file_entries_are_named(tmp_path, change, expected):
    _draw_works(tmp_path / "works.dxf")
    msg = _message(tmp_path, {**_entry(), **change})
    assert expected in msg


def test_a_missing_offset_is_asked_for(tmp_path):
    _draw_works(tmp_path / "works.dxf")
    entry = _entry()
    del entry["offset_m"]
    assert "planned_works_dxf[0].offset_m is missing; add it ([x, y, z] in m added" in _message(tmp_path, entry)


# ------------------------------------------------------------------ writing

def test_written_faces_read_back_by_ezdxf_on_one_layer_per_group(tmp_path):
    rng = np.random.default_rng(3)
    faces = {"body_1": rng.uniform(0, 50, (7, 3, 3)), "body_2": rng.uniform(0, 50, (2, 3, 3))}
    path = write_faces_dxf(tmp_path / "voids.dxf", faces, title="test pit")
    doc = ezdxf.readfile(path)
    assert doc.header["$INSUNITS"] == 6 and doc.header["$PROJECTNAME"] == "test pit"
    for layer, expected in faces.items():
        got = [[tuple(v) for v in e.wcs_vertices(close=False)][:3]
               for e in doc.modelspace().query(f'3DFACE[layer=="{layer}"]')]
        np.testing.assert_allclose(got, expected, atol=1e-9)
    assert not list(tmp_path.glob(".*partial*"))


def test_the_reader_can_be_called_without_a_site_file(tmp_path):
    _draw_works(tmp_path / "works.dxf")
    drawing = DxfDrawing(tmp_path / "works.dxf", "m", (0.0, 0.0, 0.0), (("HAUL_ROAD", "haul_road"),))
    works, notes = read_planned_works_dxf(drawing, (0, 0, 70), (60, 40, 110))
    assert len(works) == 1 and works[0].name.startswith("works.dxf HAUL_ROAD POLYLINE ")
    np.testing.assert_allclose(works[0].points_m, ROAD, atol=TOL_M, rtol=0)
    assert any("skipped" in n and "BENCH_DESIGN (2)" in n for n in notes)


# ------------------------------------------------------------------ through the command

def test_check_inputs_prints_the_notes_and_a_bad_drawing_is_one_clear_error(tmp_path):
    _draw_works(tmp_path / "works.dxf")
    site_path = tmp_path / "site.yaml"
    site_path.write_text(yaml.safe_dump(_site_data(_entry()), sort_keys=False))
    code, out, err = run_main(main, ["check-inputs", "--site", site_path])
    assert code == 0, err
    assert "planned works: 8, read with those of 1 DXF drawing(s)" in out
    assert "note: " in out and "ANNOTATION (1)" in out

    site_path.write_text(yaml.safe_dump(_site_data(_entry(units="ft")), sort_keys=False))
    assert_user_error(*run_main(main, ["check-inputs", "--site", site_path]),
                      "works.dxf", "metres ($INSUNITS = 6)", "set planned_works_dxf[0].units to m")


def _rows(path):
    with open(path, newline="", encoding="utf-8") as handle:
        return list(csv.DictReader(handle))


def test_a_drawn_haul_road_is_screened_like_the_same_road_typed_in(make_inversion_folder):
    # the fixture's site has a haul road typed in from (0, 8, 20) to (30, 8, 20); the same road drawn in mm
    folder, site_path = make_inversion_folder()
    assert main(["voids", str(folder), "--no-pictures", "--quiet"]) == 0
    typed = _rows(folder / "voids.csv")

    doc = ezdxf.new("R2010", setup=False)
    doc.header["$INSUNITS"] = 4
    road = doc.modelspace().add_lwpolyline([(0, 8000), (30000, 8000)],
                                           dxfattribs={"layer": "ROAD", "elevation": 20000})
    doc.saveas(site_path.parent / "road.dxf")
    text = site_path.read_text(encoding="utf-8")
    drawn_site = site_path.parent / "site_drawn.yaml"
    drawn_site.write_text(text[:text.index("planned_works:")] + (
        "planned_works_dxf:\n  - {file: road.dxf, units: mm, offset_m: [0, 0, 0], layers: {ROAD: haul_road}}\n"),
        encoding="utf-8")
    assert main(["voids", str(folder), "--site", str(drawn_site), "--no-pictures", "--quiet"]) == 0
    drawn = _rows(folder / "voids.csv")
    assert typed and len(drawn) == len(typed)
    for a, b in zip(typed, drawn):
        assert b["nearest_work"] == f"road.dxf ROAD LWPOLYLINE {road.dxf.handle}"
        for key in ("standoff_m", "roof_below_work_m"):
            assert float(b[key]) == pytest.approx(float(a[key]), abs=1e-3)
    manifest = json.loads((folder / "manifest.json").read_text())
    assert manifest["later_runs"][-1]["inputs"]["planned_works_dxf[0]"]["sha256"] == hashlib.sha256(
        (site_path.parent / "road.dxf").read_bytes()).hexdigest()
