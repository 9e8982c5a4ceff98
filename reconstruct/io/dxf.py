"""Exchange with mine-planning software through DXF drawings (read and write with ezdxf).

Reading: planned works from the drawings listed under ``planned_works_dxf`` in
the site description. Each drawing states its units, an offset in metres that
takes drawing coordinates to site coordinates, and which of its layers hold
which kind of planned work::

    site = drawing * metres_per_unit + offset_m

Entities read from the model space of a mapped layer:

``LWPOLYLINE``, ``POLYLINE`` (2D with its elevation, and 3D)
    A closed polyline is a ``polygon`` work, an open one a ``polyline`` work.
    Arcs (bulges) are replaced by chords within :data:`ARC_SAGITTA_M`.
``3DFACE``
    A ``polygon`` work of its three or four corners (haul roads, benches, pit
    designs triangulated by the mine-planning software).
``LINE``
    A ``polyline`` work of two points. On a ``blast_pattern`` layer a line is
    one blast hole from its collar (the higher end) to its toe.
``POINT``
    On a ``blast_pattern`` layer only: hole collars. The points of one layer
    become one ``polygon`` work, the outline (convex hull in plan) of the
    collars, each corner at its collar's elevation. The depth of the holes is
    not known from points: when the drawing's entry gives ``hole_depth_m``
    (and optionally ``subdrill_m``), each point becomes a vertical blast hole
    of the work, named by its handle, and screening checks along the holes;
    otherwise the work is the outline only (or draw holes as LINEs from collar
    to toe).

A layer not in the mapping is skipped with a note. Layer names are compared
without regard to case, as CAD programs do. Every problem names the file, the
layer and the entity (type and handle) and says the fix.

Writing: triangles as ``3DFACE`` entities, one layer per group (a void body),
in a drawing whose ``$INSUNITS`` says metres.

References
----------
Autodesk (2012). DXF Reference (AutoCAD 2012): header variable ``$INSUNITS``,
entities LWPOLYLINE, POLYLINE, LINE, POINT and 3DFACE.
ezdxf developers. ezdxf: a Python package to create and modify DXF drawings,
https://ezdxf.readthedocs.io
"""

from __future__ import annotations

import logging
import math
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reconstruct.errors import InputError
from reconstruct.io.outputs import atomic_path
from reconstruct.io.site import BlastHole, PlannedWork

__all__ = [
    "DXF_UNITS",
    "ARC_SAGITTA_M",
    "DxfDrawing",
    "read_planned_works_dxf",
    "write_faces_dxf",
]

log = logging.getLogger(__name__)

#: Units a drawing may be in: name -> (metres per drawing unit, ``$INSUNITS`` code, words).
DXF_UNITS = {
    "m": (1.0, 6, "metres"),
    "cm": (0.01, 5, "centimetres"),
    "mm": (0.001, 4, "millimetres"),
    "km": (1000.0, 7, "kilometres"),
    "ft": (0.3048, 2, "feet"),
    "us_survey_ft": (1200.0 / 3937.0, 21, "US survey feet"),
    "in": (0.0254, 1, "inches"),
}

#: Largest gap, in metres, between an arc of a polyline and the chords that replace it.
ARC_SAGITTA_M = 0.05

#: At most this many entity problems are listed per drawing; the rest are counted.
_MAX_LISTED = 10

# entity types each kind of planned work can be made of
_USABLE = {
    "haul_road": ("LWPOLYLINE", "POLYLINE", "3DFACE", "LINE"),
    "bench": ("LWPOLYLINE", "POLYLINE", "3DFACE", "LINE"),
    "blast_pattern": ("LWPOLYLINE", "POLYLINE", "LINE", "POINT"),
}
_UNIT_WORDS = {code: words for _, code, words in DXF_UNITS.values()}


@dataclass(frozen=True)
class DxfDrawing:
    """One drawing listed under ``planned_works_dxf`` in the site description.

    Parameters
    ----------
    path : pathlib.Path
        The DXF file (already resolved against the site file's folder).
    units : str
        A key of :data:`DXF_UNITS`: the unit of the drawing's coordinates.
    offset_m : tuple of 3 float
        Added, in metres, to the drawing's coordinates (after conversion to
        metres) to reach site coordinates.
    layers : tuple of (str, str)
        Layer name and the kind of planned work its entities are.
    key : str
        Where the entry sits in the site file (``planned_works_dxf[0]``), for messages.
    hole_depth_m : float or None
        Depth of the blast holes whose collars are drawn as POINTs, m (the
        entry's ``hole_depth_m``); None when not given.
    subdrill_m : float
        Their drilling below ``hole_depth_m``, m (the entry's ``subdrill_m``).
    """

    path: Path
    units: str
    offset_m: tuple[float, float, float]
    layers: tuple[tuple[str, str], ...]
    key: str = "planned_works_dxf[0]"
    hole_depth_m: float | None = None
    subdrill_m: float = 0.0

    @property
    def metres_per_unit(self) -> float:
        return DXF_UNITS[self.units][0]

    def to_site_m(self, points) -> np.ndarray:
        """Drawing coordinates (n, 3) to site coordinates in metres."""
        return np.asarray(points, dtype=float) * self.metres_per_unit + np.asarray(self.offset_m)


def _fmt(v: float) -> str:
    return f"{v:.6g}"


def _xyz(p) -> str:
    return "(" + ", ".join(_fmt(v) for v in p) + ")"


class _Reading:
    """Problems, notes and works collected while reading one drawing."""

    def __init__(self, drawing: DxfDrawing, box_lo_m, box_hi_m):
        self.drawing = drawing
        self.where = f"{drawing.key}: {drawing.path}"
        self.lo = np.asarray(box_lo_m, dtype=float)
        self.hi = np.asarray(box_hi_m, dtype=float)
        self.problems: list[str] = []
        self.entity_problems: list[str] = []
        self.notes: list[str] = []
        self.works: list[PlannedWork] = []

    def entity_problem(self, entity, layer: str, text: str) -> None:
        self.entity_problems.append(f"{self.where}: layer {layer!r}, {_entity_name(entity)}: {text}")

    def all_problems(self) -> list[str]:
        listed = self.entity_problems[:_MAX_LISTED]
        more = len(self.entity_problems) - len(listed)
        if more:
            listed.append(f"{self.where}: and {more} more entities with problems like these")
        return self.problems + listed

    def far_outside(self, points_m) -> float:
        """Distance in metres from the nearest of ``points_m`` to the model box."""
        gap = np.maximum(np.maximum(self.lo - points_m, points_m - self.hi), 0.0)
        return float(np.linalg.norm(gap, axis=1).min())

    def box_text(self) -> str:
        lo, hi = self.lo, self.hi
        return (f"x {_fmt(lo[0])}..{_fmt(hi[0])}, y {_fmt(lo[1])}..{_fmt(hi[1])}, "
                f"z {_fmt(lo[2])}..{_fmt(hi[2])} m")


def _entity_name(entity) -> str:
    return f"{entity.dxftype()} (handle {entity.dxf.handle})"


def read_planned_works_dxf(drawing: DxfDrawing, box_lo_m, box_hi_m) -> tuple[list[PlannedWork], list[str]]:
    """Read the planned works of one DXF drawing, in site coordinates.

    Parameters
    ----------
    drawing : DxfDrawing
        The file, its units, the offset and the layer-to-kind mapping.
    box_lo_m, box_hi_m : sequence of 3 float
        Corners of the model box, m. A work lying farther from the box than
        the box's largest side (after units and offset) is refused: the units
        or the offset are likely wrong.

    Returns
    -------
    works : list of PlannedWork
        One per usable entity (one per layer for blast-hole collars drawn as
        POINTs), named ``<file> <layer> <type> <handle>``.
    notes : list of str
        Layers skipped, units not stated by the drawing, what is not used yet.

    Raises
    ------
    InputError
        Listing every problem, each naming the file, the layer and the entity.
        The drawing is only read, never modified.
    """
    doc = _open_drawing(drawing)
    reading = _Reading(drawing, box_lo_m, box_hi_m)
    _check_units(doc, reading)
    mapping = {name.upper(): kind for name, kind in drawing.layers}
    by_layer: dict[str, list] = {}
    unmapped: Counter = Counter()
    spelling: dict[str, str] = {}  # CAD layer names ignore case: one group per name, first spelling shown
    for entity in doc.modelspace():
        layer = entity.dxf.get("layer", "0")
        key = layer.upper()
        layer = spelling.setdefault(key, layer)
        if key in mapping:
            by_layer.setdefault(layer, []).append(entity)
        else:
            unmapped[layer] += 1
    for layer, entities in by_layer.items():
        _read_layer(reading, layer, mapping[layer.upper()], entities)
    if unmapped:
        reading.notes.append(
            f"{reading.where}: skipped {sum(unmapped.values())} entities on layers not in "
            f"{drawing.key}.layers: " + ", ".join(f"{n} ({c})" for n, c in sorted(unmapped.items())))
    if not reading.works and not reading.all_problems():
        found = ", ".join(f"{n} ({c})" for n, c in sorted(unmapped.items())) or "none"
        reading.problems.append(
            f"{reading.where}: no planned work found on the mapped layers "
            f"({', '.join(name for name, _ in drawing.layers)}); the drawing's layers with "
            f"entities in model space are: {found}; fix the layer names in {drawing.key}.layers")
    problems = reading.all_problems()
    if problems:
        raise InputError(problems)
    for note in reading.notes:
        log.info(note)
    return reading.works, reading.notes


def _open_drawing(drawing: DxfDrawing):
    import ezdxf  # imported here: only sites with drawings need it

    where = f"{drawing.key}.file: {drawing.path}"
    if drawing.path.suffix.lower() == ".dwg":
        raise InputError(f"{where}: is a DWG file; save or export the drawing as DXF from the CAD or "
                         "mine-planning program and give that file")
    if not drawing.path.is_file():
        raise InputError(f"{where}: file not found; the path is relative to the site file's folder")
    try:
        with open(drawing.path, "rb"):
            pass
    except OSError as error:
        raise InputError(f"{where}: cannot be read ({error.strerror}); check the file and its "
                         "permissions") from None
    try:
        return ezdxf.readfile(str(drawing.path))
    except (ezdxf.DXFError, OSError, UnicodeDecodeError, ValueError) as error:
        raise InputError(f"{where}: not a readable DXF drawing ({error}); export it again as DXF "
                         "(ASCII or binary) from the CAD or mine-planning program") from None


def _check_units(doc, reading: _Reading) -> None:
    drawing = reading.drawing
    stated = DXF_UNITS[drawing.units][1]
    code = int(doc.header.get("$INSUNITS", 0) or 0)
    if code == 0:
        reading.notes.append(f"{reading.where}: the drawing does not state its units ($INSUNITS unset "
                             f"or 0); read in {DXF_UNITS[drawing.units][2]} as {drawing.key}.units says")
    elif code != stated:
        said = _UNIT_WORDS.get(code, f"unit code {code}")
        match = [k for k, (_, c, _) in DXF_UNITS.items() if c == code]
        fix = f"set {drawing.key}.units to {match[0]}" if match else "save the drawing in metres"
        reading.problems.append(
            f"{reading.where}: the drawing says its units are {said} ($INSUNITS = {code}) but "
            f"{drawing.key}.units is {drawing.units} ({DXF_UNITS[drawing.units][2]}); {fix}, "
            "or correct $INSUNITS in the drawing if it is wrong")


def _read_layer(reading: _Reading, layer: str, kind: str, entities) -> None:
    collars = []
    for entity in entities:
        kind_of = entity.dxftype()
        if kind_of not in _USABLE[kind]:
            usable = ", ".join(_USABLE[kind])
            reading.entity_problem(entity, layer, f"a {kind_of} cannot be a {kind} (usable: {usable}); "
                                   "move it to a layer not in the mapping, or redraw it as one of those")
            continue
        if kind_of == "POINT":
            collars.append((entity, reading.drawing.to_site_m([entity.dxf.location])[0]))
            continue
        shape = _entity_shape(entity, reading, layer, kind)
        if shape is None:
            continue
        geometry, points_m = shape
        if _placed(reading, entity, layer, points_m):
            reading.works.append(PlannedWork(_work_name(reading, layer, entity), kind, geometry,
                                             tuple(tuple(float(v) for v in p) for p in points_m)))
    if collars:
        _collar_outline(reading, layer, collars)


def _work_name(reading: _Reading, layer: str, entity) -> str:
    return f"{reading.drawing.path.name} {layer} {entity.dxftype()} {entity.dxf.handle}"


def _entity_shape(entity, reading: _Reading, layer: str, kind: str):
    """``(geometry, points_m)`` of a polyline, 3D face or line; None after a problem."""
    kind_of = entity.dxftype()
    if kind_of == "LINE":
        points = reading.drawing.to_site_m([entity.dxf.start, entity.dxf.end])
        if kind == "blast_pattern" and points[1, 2] > points[0, 2]:
            points = points[::-1]  # collar first: the higher end
        return _checked_points(entity, reading, layer, "polyline", points)
    if kind_of == "3DFACE":
        points = reading.drawing.to_site_m([tuple(v) for v in entity.wcs_vertices()])
        return _checked_points(entity, reading, layer, "polygon", points)
    if kind_of == "POLYLINE" and entity.get_mode() not in ("AcDb2dPolyline", "AcDb3dPolyline"):
        reading.entity_problem(entity, layer, "a polyface or polygon mesh cannot be read; explode it into "
                               "3DFACEs in the CAD program")
        return None
    closed = entity.closed if kind_of == "LWPOLYLINE" else entity.is_closed
    points = reading.drawing.to_site_m(_polyline_wcs(entity, closed, ARC_SAGITTA_M / reading.drawing.metres_per_unit))
    return _checked_points(entity, reading, layer, "polygon" if closed else "polyline", points)


def _polyline_wcs(entity, closed: bool, sagitta: float) -> np.ndarray:
    """Vertices of a LWPOLYLINE or 2D/3D POLYLINE in world coordinates (drawing units), arcs as chords."""
    if entity.dxftype() == "POLYLINE" and entity.get_mode() == "AcDb3dPolyline":
        return np.array([tuple(v) for v in entity.points()], dtype=float)
    if entity.dxftype() == "LWPOLYLINE":
        xyb = [(x, y, b) for x, y, b in entity.get_points("xyb")]
        elevation = float(entity.dxf.elevation)
    else:
        xyb = [(v.dxf.location[0], v.dxf.location[1], v.dxf.bulge) for v in entity.vertices]
        elevation = float(entity.dxf.elevation[2])
    plan = _arcs_as_chords(xyb, closed, sagitta)
    ocs = entity.ocs()
    return np.array([tuple(ocs.to_wcs((x, y, elevation))) for x, y in plan], dtype=float)


def _arcs_as_chords(xyb, closed: bool, sagitta: float) -> list:
    """Plan points of a polyline whose segments may be arcs (bulge = tan(included angle / 4)).

    Each arc is replaced by chords of equal angle whose gap to the arc,
    r (1 - cos(angle / 2)), is at most ``sagitta``; the points lie on the circle.
    """
    from ezdxf.math import bulge_center, bulge_radius

    points = []
    ends = list(range(len(xyb))) if closed else list(range(len(xyb) - 1))
    for i in ends:
        x0, y0, bulge = xyb[i]
        x1, y1, _ = xyb[(i + 1) % len(xyb)]
        points.append((x0, y0))
        if abs(bulge) < 1e-12 or (x0, y0) == (x1, y1):
            continue
        centre = bulge_center((x0, y0), (x1, y1), bulge)
        radius = bulge_radius((x0, y0), (x1, y1), bulge)
        sweep = 4.0 * math.atan(bulge)  # counter-clockwise when positive
        step = 2.0 * math.acos(max(1.0 - sagitta / radius, -1.0)) if sagitta < radius else math.pi
        n = max(int(math.ceil(abs(sweep) / step)), 1)
        start = math.atan2(y0 - centre[1], x0 - centre[0])
        for k in range(1, n):
            angle = start + sweep * k / n
            points.append((centre[0] + radius * math.cos(angle), centre[1] + radius * math.sin(angle)))
    if not closed and xyb:
        points.append(tuple(xyb[-1][:2]))
    return points


def _checked_points(entity, reading: _Reading, layer: str, geometry: str, points_m):
    points_m = np.asarray(points_m, dtype=float)
    if not np.all(np.isfinite(points_m)):
        reading.entity_problem(entity, layer, "has coordinates that are not finite numbers; redraw it")
        return None
    keep = np.ones(len(points_m), dtype=bool)
    keep[1:] = np.linalg.norm(np.diff(points_m, axis=0), axis=1) > 1e-6
    points_m = points_m[keep]
    if geometry == "polygon" and len(points_m) > 1 and np.linalg.norm(points_m[0] - points_m[-1]) <= 1e-6:
        points_m = points_m[:-1]  # a closed ring repeats its first point
    need = 3 if geometry == "polygon" else 2
    if len(points_m) < need:
        reading.entity_problem(entity, layer, f"has {len(points_m)} distinct point(s), a {geometry} needs "
                               f"at least {need}; delete it or redraw it")
        return None
    if geometry == "polygon" and _area_3d_m2(points_m) <= 1e-9:
        reading.entity_problem(entity, layer, "is closed but has zero area (all points on one line); "
                               "open it (a line) or redraw the outline")
        return None
    return geometry, points_m


def _area_3d_m2(points_m) -> float:
    p = np.asarray(points_m, dtype=float)
    cross = np.cross(p - p[0], np.roll(p, -1, axis=0) - p[0]).sum(axis=0)
    return 0.5 * float(np.linalg.norm(cross))


def _placed(reading: _Reading, entity, layer: str, points_m) -> bool:
    """False, with a problem, when the work lies far outside the model box."""
    limit = float((reading.hi - reading.lo).max())
    distance = reading.far_outside(points_m)
    if distance <= limit:
        return True
    drawing = reading.drawing
    raw = (points_m[0] - np.asarray(drawing.offset_m)) / drawing.metres_per_unit
    reading.entity_problem(
        entity, layer,
        f"lies {distance:.4g} m outside the model box ({reading.box_text()}) after units and offset: its "
        f"first point is {_xyz(points_m[0])} m in site coordinates, {_xyz(raw)} in the drawing; "
        f"check {drawing.key}.units ({drawing.units}) and {drawing.key}.offset_m "
        f"({_xyz(drawing.offset_m)}), or leave the layer out of the mapping")
    return False


def _collar_outline(reading: _Reading, layer: str, collars) -> None:
    """One blast-pattern work from the hole collars (POINTs) of one layer."""
    points_m = np.array([p for _, p in collars])
    entities = [e for e, _ in collars]
    if not all([_placed(reading, e, layer, p[None, :]) for e, p in collars]):
        return
    xy = points_m[:, :2]
    unique = np.unique(np.round(xy, 6), axis=0)
    handles = ", ".join(e.dxf.handle for e in entities[:5]) + (" ..." if len(entities) > 5 else "")
    if len(unique) < 2:
        reading.entity_problem(entities[0], layer, "is the only hole collar (POINT) of this blast pattern; "
                               "a pattern needs two or more collars, or draw each hole as a LINE from "
                               "collar to toe")
        return
    centred = xy - xy.mean(axis=0)
    spread = np.linalg.svd(centred, compute_uv=False)
    if len(unique) >= 3 and spread[1] > 1e-6 * max(spread[0], 1.0):
        from scipy.spatial import ConvexHull

        corners = points_m[ConvexHull(xy).vertices]
        geometry = "polygon"
    else:  # collars on one line: the line through them, end to end
        direction = np.linalg.svd(centred)[2][0]
        along = centred @ direction
        corners = points_m[[int(np.argmin(along)), int(np.argmax(along))]]
        geometry = "polyline"
    name = f"{reading.drawing.path.name} {layer} blast-hole collars"
    outline = tuple(tuple(float(v) for v in p) for p in corners)
    drawing = reading.drawing
    if drawing.hole_depth_m is not None:
        holes = tuple(BlastHole(e.dxf.handle, tuple(float(v) for v in p)) for e, p in collars)
        reading.works.append(PlannedWork(name, "blast_pattern", geometry, outline, drawing.hole_depth_m,
                                         drawing.subdrill_m, holes))
        reading.notes.append(
            f"{reading.where}: layer {layer!r}: {len(collars)} hole collars (POINT, handles {handles}) kept as "
            f"vertical blast holes {drawing.hole_depth_m:g} m deep with {drawing.subdrill_m:g} m of subdrill "
            f"(from {drawing.key}.hole_depth_m and subdrill_m), named by their handles")
        return
    reading.works.append(PlannedWork(name, "blast_pattern", geometry, outline))
    reading.notes.append(
        f"{reading.where}: layer {layer!r}: {len(collars)} hole collars (POINT, handles {handles}) kept as "
        f"the outline of the blast pattern at collar elevation; the holes' depth is not known from "
        f"points: give {drawing.key}.hole_depth_m (and subdrill_m) to screen along the holes, or draw "
        "holes as LINEs from collar to toe")


def write_faces_dxf(path, faces_by_layer: dict, *, title: str = "") -> Path:
    """Write triangles or quadrilaterals as DXF ``3DFACE`` entities, one layer per group, atomically.

    Parameters
    ----------
    path : path-like
        The ``.dxf`` file to write.
    faces_by_layer : dict of str -> ndarray of shape (n, 3, 3) or (n, 4, 3)
        Corner coordinates in metres (site coordinates) for each layer name.
    title : str
        Stored in the drawing's ``$PROJECTNAME`` header variable.

    Returns
    -------
    pathlib.Path
        The path written; the drawing's ``$INSUNITS`` is 6 (metres).
    """
    import ezdxf

    doc = ezdxf.new("R2010", setup=False, units=DXF_UNITS["m"][1])
    if title:
        doc.header["$PROJECTNAME"] = title
    msp = doc.modelspace()
    for layer, faces in faces_by_layer.items():
        if layer not in doc.layers:
            doc.layers.add(layer)
        for face in np.asarray(faces, dtype=float):
            msp.add_3dface([tuple(float(v) for v in corner) for corner in face], dxfattribs={"layer": layer})
    with atomic_path(path, suffix=".dxf") as tmp:
        doc.saveas(str(tmp))
    return Path(path)
