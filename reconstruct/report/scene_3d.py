"""The 3D view of the void report: a scene the reader can turn, cut and click, inside the one HTML file.

The scene holds the ground surface, the void bodies (one mesh each, in the
colour of their fill; indications translucent), the planned works, the
boreholes and blast holes, the nodes, the exclusion zones and a velocity
section the reader moves with a slider. It is drawn by plotly.js, whose
script is embedded in the page (about 4.8 MB), so the page still opens with
no network and no server. The reader can orbit and zoom (plotly's own
controls), show or hide each layer with a tick box, move the section plane,
and click a body (or choose it from a list) to see its row of the void table.

Everything shown is read from the output folder: ``voids.vtp`` and
``ground.vtp`` (the meshes ``voidcube reconstruct voids`` wrote),
``interpretation.vti`` (else ``velocity.vti``) for the sections,
``nodes_used.csv`` for the nodes and, through ``voids.json`` (key
``site_file``), the site description for planned works, holes and exclusion
zones. A piece that is missing is left out and said so under the view; the
report is written all the same.

Colours come from :mod:`reconstruct.report.colours` only. The sections show
the velocity, the slowness anomaly or the ray count in the colour maps of the
static pictures (velocity, diverging and coverage maps), sampled from
matplotlib's own tables so that both read alike; in the velocity and the
anomaly, cells in the air and cells crossed by no ray are left blank, because
the velocity there says nothing.

The page's own script (:data:`_SCENE_SCRIPT`) does three things: it shows a
trace only while every layer the trace belongs to is ticked (a translucent
indication belongs to its fill's layer and to "indications"), it rebuilds
the section trace from the embedded slices when the slider moves, and it
shows the hidden table row of a body that is clicked or chosen.
"""

from __future__ import annotations

import csv
import json
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from reconstruct.errors import InputError
from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, STATUS_RESOLVED
from reconstruct.interpret.folder import recorded_file_candidates
from reconstruct.io.outputs import read_cell_arrays_vti
from reconstruct.io.site import load_site
from reconstruct.model.grid import Grid
from reconstruct.report import colours
from reconstruct.report.html import escape

__all__ = ["LAYERS", "SECTION_QUANTITIES", "SceneData", "read_scene_data", "cube_sections", "scene_figure",
           "scene_html"]

#: The layers the reader shows or hides: key, words on the page, colour of the swatch (None: no swatch).
LAYERS = (
    ("ground", "ground surface", colours.GROUND_SURFACE_COLOUR),
    ("fast-bodies", "air-filled bodies (faster than the rock)", colours.FILL_COLOURS["air"]),
    ("slow-bodies", "water- or clay-filled bodies (slower than the rock)", colours.FILL_COLOURS["water_or_clay"]),
    ("indications", "indications (unresolved bodies, drawn translucent)", None),
    ("works", "planned works", colours.PLANNED_WORK_COLOUR),
    ("holes", "boreholes and blast holes", colours.HOLE_COLOUR),
    ("nodes", "nodes", colours.NODE_COLOUR),
    ("exclusion", "exclusion zones (outline on the ground)", colours.EXCLUSION_ZONE_COLOUR),
    ("section", "section through the cube", None),
)
#: Layers hidden when the page opens (the section would hide the bodies under it).
_HIDDEN_AT_START = ("section",)

#: Section directions: the axis held constant and the words for it.
_SECTION_AXES = (("z", "horizontal slice (constant elevation)"),
                 ("y", "east-west section (constant y north)"),
                 ("x", "north-south section (constant x east)"))

#: What a section can show: key, cell array, words with the unit, colour map, cells drawn
#: ("covered": ground cells crossed by rays; "ground": every ground cell), decimals kept,
#: and whether the colour scale is centred on zero (then it spans plus and minus the 99th
#: percentile of the size of the values).
SECTION_QUANTITIES = (
    ("velocity", "velocity_m_per_ns", "velocity (m/ns)", colours.VELOCITY_MAP, "covered", 4, False),
    ("anomaly", "slowness_anomaly_ns_per_m", "slowness anomaly (ns/m): slowness minus the background; "
     "positive is slower", colours.DIVERGING_MAP, "covered", 4, True),
    ("rays", "ray_count", "ray count (rays crossing the cell)", colours.COVERAGE_MAP, "ground", 0, False),
)

_CENTRED_PERCENTILE = 99.0
_DIV_ID = "voidcube-scene"
_GROUND_OPACITY = 0.35
_INDICATION_OPACITY = 0.45
_COLOUR_STOPS = 11


@dataclass(frozen=True)
class SceneData:
    """What the 3D view draws, read from an output folder (:func:`read_scene_data`).

    Coordinates in metres, x east, y north, z elevation.
    """

    box_m: tuple  # ((x0, x1), (y0, y1), (z0, z1)) of the model box
    ground: tuple | None  # (points (n, 3), triangles (m, 3)) or None
    bodies: tuple = ()  # (body_id, fill, status, points (n, 3), triangles (m, 3)), one per body
    nodes: tuple = ()  # (node_id, (x, y, z))
    works: tuple = ()  # (name, kind, points (n, 3)), polygons closed
    holes: tuple = ()  # (id, kind, collar (3,), toe (3,))
    exclusion_zones: tuple = ()  # (name, points (n, 3)) on the ground, closed
    sections: tuple = ()  # one dict per quantity shown (cube_sections, with key, label, colours)
    notes: tuple = field(default_factory=tuple)  # what was left out and why


def _triangles(mesh):
    """Points (n, 3) and triangles (m, 3) of a pyvista surface."""
    surface = mesh.triangulate()
    faces = np.asarray(surface.faces).reshape(-1, 4)
    # points stay float64: site coordinates may be large (a national grid), where float32 rounds to metres
    return np.asarray(surface.points, dtype=float), faces[:, 1:].astype(np.int32)


def _read_mesh(path: Path):
    import pyvista

    if not path.is_file():
        raise InputError(f"{path}: file not found; run 'voidcube reconstruct voids' again to write it")
    try:
        return pyvista.read(str(path))
    except Exception as error:  # VTK raises several types for a damaged file
        raise InputError(f"{path}: cannot be read ({error}); run 'voidcube reconstruct voids' again") from None


def _simplified(surface, max_triangles: int):
    """A triangulated surface with at most about ``max_triangles`` (pyvista's ``decimate``)."""
    if surface.n_cells <= max_triangles:
        return surface
    return surface.decimate(1.0 - max_triangles / surface.n_cells)


def _read_bodies(folder: Path, voids: dict, max_triangles: int) -> tuple:
    """Each body's surface from ``voids.vtp``, with its fill and status from the rows of ``voids.json``."""
    mesh = _read_mesh(folder / "voids.vtp")
    if mesh.n_cells == 0:
        return ()
    rows = {int(r["body_id"]): r for r in voids.get("bodies", []) if "body_id" in r}
    ids = np.asarray(mesh.cell_data["body_id"])
    # many or large bodies are simplified, each by the same share, to bound the page's size
    reduction = max(0.0, 1.0 - max_triangles / mesh.n_cells)
    bodies = []
    for body_id in np.unique(ids):
        row = rows.get(int(body_id), {})
        piece = mesh.extract_cells(np.flatnonzero(ids == body_id)).extract_surface(algorithm=None).triangulate()
        if reduction > 0.0:
            piece = piece.decimate(reduction)
        points, triangles = _triangles(piece)
        bodies.append((int(body_id), row.get("fill", FILL_AIR), row.get("status", STATUS_RESOLVED), points,
                       triangles))
    return tuple(bodies)


def _read_nodes(path: Path) -> tuple:
    if not path.is_file():
        raise InputError(f"{path}: file not found")
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    try:
        return tuple((r["node_id"], (float(r["x_m"]), float(r["y_m"]), float(r["z_m"]))) for r in rows)
    except (KeyError, TypeError, ValueError):
        raise InputError(f"{path}: needs numeric columns node_id, x_m, y_m, z_m") from None


def _site_pieces(site) -> dict:
    """Planned works, holes and exclusion zones of a site, as the scene draws them."""
    works = []
    for work in site.planned_works:
        points = np.asarray(work.points_m, dtype=float)
        if work.geometry == "polygon":
            points = np.vstack([points, points[:1]])
        works.append((work.name, work.kind, points))
    holes = tuple((h.id, h.kind, np.asarray(h.collar_m, dtype=float), h.toe_m) for h in site.boreholes)
    zones = []
    for zone in site.exclusion_zones:
        xy = np.asarray(zone.polygon_xy_m + zone.polygon_xy_m[:1], dtype=float)
        z = np.broadcast_to(np.asarray(site.ground.elevation_m(xy[:, 0], xy[:, 1]), dtype=float), xy[:, 0].shape)
        zones.append((zone.name, np.column_stack([xy, z])))
    return {"works": tuple(works), "holes": holes, "exclusion_zones": tuple(zones)}


def _read_cube(folder: Path):
    """Grid and cell arrays for the sections: ``interpretation.vti`` with the anomaly, else
    ``velocity.vti`` without it."""
    names = ("velocity_m_per_ns", "ray_count", "ground")
    try:
        return read_cell_arrays_vti(folder / "interpretation.vti", names + ("slowness_anomaly_ns_per_m",))
    except InputError:
        return read_cell_arrays_vti(folder / "velocity.vti", names)


def _sections(grid: Grid, cube: dict, max_cells: int, max_sections: int) -> tuple:
    """The sections of every quantity of :data:`SECTION_QUANTITIES` found in ``cube``."""
    ground = np.asarray(cube["ground"], dtype=bool)
    masks = {"ground": ground, "covered": ground & (np.asarray(cube["ray_count"]) > 0)}
    found = []
    for key, array, label, colour_map, cells, decimals, centred in SECTION_QUANTITIES:
        if array not in cube:
            continue
        sections = cube_sections(grid, cube[array], masks[cells], decimals=decimals, max_cells=max_cells,
                                 max_sections=max_sections)
        if sections["range"] is None:
            continue
        low, high = sections["range"]
        if centred:
            # the 99th percentile of the size, so that a few extreme cells (air-filled voids
            # clipped at the velocity band) do not pale the rest; beyond it the colour saturates
            values = np.asarray(cube[array], dtype=float)[masks[cells]]
            high = float(np.percentile(np.abs(values[np.isfinite(values)]), _CENTRED_PERCENTILE))
            low = -high
        found.append(dict(sections, key=key, label=label, colorscale=_colour_scale(colour_map),
                          cmin=low, cmax=high if high > low else low + 1.0))
    return tuple(found)


def _site_path(folder: Path, recorded) -> Path:
    """The site file recorded in ``voids.json``: as written, else relative to the folder or its parent
    (a relative path was written relative to where ``voids`` ran)."""
    if not recorded:
        raise InputError(f"{folder / 'voids.json'}: no site_file recorded")
    for candidate in recorded_file_candidates(folder, recorded):
        if candidate.is_file():
            return candidate
    raise InputError(f"{folder / 'voids.json'}: the site file {recorded} recorded there is not found from here")


def read_scene_data(folder, voids: dict, *, max_section_cells: int = 4096, max_sections: int = 40,
                    max_body_triangles: int = 100_000, max_ground_triangles: int = 50_000) -> SceneData:
    """Read what the 3D view shows from an output folder.

    A missing or damaged piece is left out, with a note saying which and why;
    only a folder without a cube raises.

    Parameters
    ----------
    folder : path-like
        The output folder (``voidcube reconstruct voids`` has run on it).
    voids : dict
        The content of ``voids.json`` (body rows, ``site_file``).
    max_section_cells, max_sections : int
        Limits on each section's cells and on the sections per direction
        (see :func:`cube_sections`), which bound the page's size.
    max_body_triangles : int
        When the bodies' surfaces hold more triangles in all, each is
        simplified (pyvista's ``decimate``) by the same share to about this
        many.
    max_ground_triangles : int
        The ground surface is simplified likewise beyond this many.

    Raises
    ------
    InputError
        Neither ``interpretation.vti`` nor ``velocity.vti`` can be read.
    """
    folder = Path(folder)
    notes = []
    grid, cube = _read_cube(folder)
    sections = _sections(grid, cube, max_section_cells, max_sections)
    pieces = {"ground": None, "bodies": (), "nodes": ()}
    readers = (("ground", "the ground surface", lambda: _triangles(_simplified(
                   _read_mesh(folder / "ground.vtp").triangulate(), max_ground_triangles))),
               ("bodies", "the bodies", lambda: _read_bodies(folder, voids, max_body_triangles)),
               ("nodes", "the nodes", lambda: _read_nodes(folder / "nodes_used.csv")))
    for key, words, read in readers:
        try:
            pieces[key] = read()
        except InputError as error:
            notes.append(f"{words} left out: {error}")
    try:
        pieces.update(_site_pieces(load_site(_site_path(folder, voids.get("site_file")))))
    except InputError as error:
        notes.append(f"planned works, holes and exclusion zones left out: {str(error).splitlines()[0]}")
    edges = [grid.edges_m(axis) for axis in range(3)]
    box = tuple((float(e[0]), float(e[-1])) for e in edges)
    return SceneData(box_m=box, sections=sections, notes=tuple(notes), **pieces)


def _strided_centres(grid: Grid, axis: int, stride: int) -> tuple:
    centres = grid.centres_m(axis)
    indices = np.arange(0, len(centres), stride)
    return indices, centres[indices]


def cube_sections(grid: Grid, values, shown, *, decimals: int = 4, max_cells: int = 4096,
                  max_sections: int = 40) -> dict:
    """Sections of a cube along each axis, for the slider of the 3D view.

    Parameters
    ----------
    grid : Grid
    values : ndarray, shape grid.shape, indexed [ix, iy, iz]
        The cell values (velocity in m/ns, ray count, ...).
    shown : ndarray of bool, shape grid.shape
        Cells to draw; the others are blank (None).
    decimals : int
        Decimals kept (rounding keeps the page small).
    max_cells : int
        Largest number of cells in one section: a section with more is thinned
        by taking every k-th cell along both of its axes.
    max_sections : int
        Largest number of sections along one axis: with more cells along it,
        every k-th plane is kept.

    Returns
    -------
    dict
        ``range`` (min, max of the shown values; None when nothing is
        shown) and, for each axis ``"x"``, ``"y"``, ``"z"`` (the axis held
        constant): ``positions`` (m) of the kept planes, ``columns`` and
        ``rows`` (m), the kept cell centres along the section's two axes, and
        ``values``, one 2D list per section indexed [row][column], rows along
        the later of the two axes (z for vertical sections, y for horizontal
        ones).
    """
    cube = np.asarray(values, dtype=float)
    shown = np.asarray(shown, dtype=bool) & np.isfinite(cube)
    kept = {}
    for axis, name in enumerate("xyz"):
        others = [n for a, n in enumerate(grid.shape) if a != axis]
        cell_stride = int(np.ceil(np.sqrt(others[0] * others[1] / max_cells)))
        kept[name] = cell_stride
    result = {"range": None, "x": None, "y": None, "z": None}
    if shown.any():
        result["range"] = [float(cube[shown].min()), float(cube[shown].max())]
    rounded = np.where(shown, np.round(cube, decimals), np.nan)
    for axis, name in enumerate("xyz"):
        plane_stride = int(np.ceil(grid.shape[axis] / max_sections))
        planes, positions = _strided_centres(grid, axis, plane_stride)
        stride = kept[name]
        (a, b) = [other for other in range(3) if other != axis]
        ia, _ = _strided_centres(grid, a, stride)
        ib, _ = _strided_centres(grid, b, stride)
        kept_cells = np.moveaxis(rounded, axis, 0)[planes][:, ia][:, :, ib]  # [plane, a, b]
        result[name] = {
            "positions": [round(float(p), 3) for p in positions],
            "columns": [round(float(v), 3) for v in grid.centres_m(a)[ia]],
            "rows": [round(float(v), 3) for v in grid.centres_m(b)[ib]],
            "values": [[[None if not np.isfinite(v) else (float(v) if decimals else int(v)) for v in row]
                        for row in plane.T] for plane in kept_cells],
        }
    return result


def _colour_scale(map_name: str) -> list:
    """A plotly colour scale sampled from matplotlib's table of ``map_name``."""
    import matplotlib

    table = matplotlib.colormaps[map_name]
    stops = np.linspace(0.0, 1.0, _COLOUR_STOPS)
    return [[float(t), "rgb({:.0f},{:.0f},{:.0f})".format(*(255 * np.asarray(table(t)[:3])))] for t in stops]


def _mesh_trace(points, triangles, *, name, colour, opacity, layers, hover, body=None):
    import plotly.graph_objects as go

    return go.Mesh3d(x=points[:, 0], y=points[:, 1], z=points[:, 2], i=triangles[:, 0], j=triangles[:, 1],
                     k=triangles[:, 2], color=colour, opacity=opacity, flatshading=False, name=name,
                     hovertemplate=hover + "<extra></extra>", meta={"layers": layers, "body": body},
                     showlegend=False)


def _line_traces(items, *, layer, colour, width, dash="solid") -> list:
    """One line trace per (name, points) item."""
    import plotly.graph_objects as go

    return [go.Scatter3d(x=p[:, 0], y=p[:, 1], z=p[:, 2], mode="lines", name=name,
                         line={"color": colour, "width": width, "dash": dash},
                         hovertemplate=escape(name) + "<extra></extra>", meta={"layers": [layer]},
                         showlegend=False)
            for name, p in items]


def _body_traces(data: SceneData) -> list:
    traces = []
    for body_id, fill, status, points, triangles in data.bodies:
        fill_layer = "fast-bodies" if fill == FILL_AIR else "slow-bodies"
        resolved = status == STATUS_RESOLVED
        words = "void" if resolved else "indication (unresolved)"
        fill_words = "air-filled" if fill == FILL_AIR else "water- or clay-filled"
        traces.append(_mesh_trace(points, triangles, name=f"body {body_id}", colour=colours.FILL_COLOURS[FILL_AIR if fill == FILL_AIR else FILL_WATER_OR_CLAY],
                                  opacity=1.0 if resolved else _INDICATION_OPACITY,
                                  layers=[fill_layer] if resolved else [fill_layer, "indications"],
                                  hover=f"body {body_id}: {words}, {fill_words}; click for its row",
                                  body=body_id))
    return traces


def _scene_traces(data: SceneData) -> list:
    import plotly.graph_objects as go

    traces = []
    if data.ground is not None:
        traces.append(_mesh_trace(*data.ground, name="ground surface", colour=colours.GROUND_SURFACE_COLOUR,
                                  opacity=_GROUND_OPACITY, layers=["ground"], hover="ground surface"))
    traces += _body_traces(data)
    traces += _line_traces([(f"{name} ({kind.replace('_', ' ')})", p) for name, kind, p in data.works],
                           layer="works", colour=colours.PLANNED_WORK_COLOUR, width=7)
    traces += _line_traces([(f"{hole_id} ({kind.replace('_', ' ')})", np.vstack([collar, toe]))
                            for hole_id, kind, collar, toe in data.holes],
                           layer="holes", colour=colours.HOLE_COLOUR, width=4)
    traces += _line_traces(data.exclusion_zones, layer="exclusion", colour=colours.EXCLUSION_ZONE_COLOUR,
                           width=4, dash="dash")
    if data.nodes:
        xyz = np.array([p for _, p in data.nodes], dtype=float)
        traces.append(go.Scatter3d(x=xyz[:, 0], y=xyz[:, 1], z=xyz[:, 2], mode="markers", name="nodes",
                                   text=[escape(node_id) for node_id, _ in data.nodes],
                                   marker={"color": colours.NODE_COLOUR, "size": 3},
                                   hovertemplate="node %{text}<extra></extra>", meta={"layers": ["nodes"]},
                                   showlegend=False))
    first = data.sections[0] if data.sections else {"colorscale": _colour_scale(colours.VELOCITY_MAP),
                                                      "cmin": 0.0, "cmax": 1.0, "label": ""}
    traces.append(go.Surface(x=[[0.0]], y=[[0.0]], z=[[None]], surfacecolor=[[None]], name="section",
                             colorscale=first["colorscale"], cmin=first["cmin"], cmax=first["cmax"],
                             colorbar={"title": {"text": escape(first["label"].split(":")[0])}, "len": 0.6},
                             hovertemplate="%{surfacecolor}<extra></extra>", meta={"layers": ["section"]},
                             showlegend=False, visible=False))
    return traces


def scene_figure(data: SceneData):
    """The plotly figure of the scene (layers all shown but the section; drawn to true scale)."""
    import plotly.graph_objects as go

    extents = np.array([hi - lo for lo, hi in data.box_m])
    ratio = extents / extents.max()
    axis_style = {"color": colours.TEXT_COLOUR, "gridcolor": colours.SCENE_GRID_COLOUR,
                  "backgroundcolor": colours.BACKGROUND_COLOUR, "showbackground": False}
    titles = ("x east (m)", "y north (m)", "z elevation (m)")
    scene = {f"{name}axis": dict(axis_style, title={"text": title}, range=list(limits))
             for name, title, limits in zip("xyz", titles, data.box_m)}
    scene.update(aspectmode="manual", aspectratio=dict(zip("xyz", (float(r) for r in ratio))),
                 camera={"eye": {"x": -1.0, "y": -1.35, "z": 0.85}})
    layout = go.Layout(template="none", scene=scene, margin={"l": 0, "r": 0, "t": 10, "b": 0},
                       paper_bgcolor=colours.BACKGROUND_COLOUR, font={"color": colours.TEXT_COLOUR},
                       uirevision="keep", showlegend=False)
    return go.Figure(data=_scene_traces(data), layout=layout)


def _json_for_script(value) -> str:
    """JSON safe inside a <script> element (no '</' can close it)."""
    return json.dumps(value, separators=(",", ":")).replace("<", "\\u003c").replace(">", "\\u003e")


def _controls_html(data: SceneData, body_ids) -> tuple:
    """The controls above the view (layers, section) and below it (choosing a body)."""
    boxes = []
    for key, words, colour in LAYERS:
        swatch = (f'<span class="swatch" style="background:{colour}"></span>' if colour else "")
        checked = "" if key in _HIDDEN_AT_START else " checked"
        boxes.append(f'<label><input type="checkbox" data-layer="{key}"{checked}> {swatch}{escape(words)}</label>')
    axes = "".join(f'<option value="{axis}">{escape(words)}</option>' for axis, words in _SECTION_AXES)
    choices = "".join(f'<option value="{i}">body {i}</option>' for i in body_ids)
    quantities = "".join(f'<option value="{i}">{escape(q["label"])}</option>' for i, q in enumerate(data.sections))
    section = ('<p class="scene-section">Section: <select id="scene-section-quantity">' + quantities
               + '</select> <select id="scene-section-axis">' + axes
               + '</select> <input type="range" id="scene-section-position" min="0" max="0" value="0">'
               ' <span id="scene-section-label"></span></p>') if data.sections else ""
    above = '<div class="scene-layers">' + " ".join(boxes) + "</div>" + section
    below = ('<p>Click a body in the view, or choose it here, to see its row of the void table: '
             '<select id="scene-body-choice"><option value="">(none)</option>' + choices + "</select></p>")
    return above, below


def _rows_html(data: SceneData, voids: dict, body_table: Callable[[dict], str]) -> str:
    rows = {int(r["body_id"]): r for r in voids.get("bodies", []) if "body_id" in r}
    return "".join(f'<div class="scene-body-row" data-body="{body_id}" hidden>{body_table(rows[body_id])}</div>'
                   for body_id, *_ in data.bodies if body_id in rows)


_STYLE = """<style>
.scene-layers label { margin-right: 1.1em; white-space: nowrap; font-size: 0.9em; }
.swatch { display: inline-block; width: 0.9em; height: 0.9em; vertical-align: -0.1em;
          border: 1px solid var(--table-rule); }
#voidcube-scene { border: 1px solid var(--table-rule); }
</style>"""

# The page's own script: layers, the section slider, a body's row (see the module notes).
_SCENE_SCRIPT = """<script>
function voidcubeScene(gd, sections) {
  var boxes = Array.prototype.slice.call(document.querySelectorAll('input[data-layer]'));
  var ticked = function () {
    var on = {};
    boxes.forEach(function (b) { on[b.dataset.layer] = b.checked; });
    return on;
  };
  var sectionIndex = gd.data.length - 1;
  var applyLayers = function () {
    var on = ticked();
    var visible = gd.data.map(function (t) {
      return t.meta.layers.every(function (layer) { return on[layer]; });
    });
    return Plotly.restyle(gd, {visible: visible});
  };
  var axisSelect = document.getElementById('scene-section-axis');
  var quantitySelect = document.getElementById('scene-section-quantity');
  var slider = document.getElementById('scene-section-position');
  var label = document.getElementById('scene-section-label');
  var drawSection = function () {
    if (!axisSelect) { return Promise.resolve(); }
    var q = sections[+quantitySelect.value], axis = axisSelect.value, s = q[axis];
    var k = Math.min(+slider.value, s.positions.length - 1);
    var at = s.positions[k], grid = s.values[k], xs = [], ys = [], zs = [];
    grid.forEach(function (row, r) {
      var xr = [], yr = [], zr = [];
      row.forEach(function (v, c) {
        var a = s.columns[c], b = s.rows[r], p = (v === null) ? null : 1;
        var xyz = axis === 'z' ? [a, b, at] : (axis === 'y' ? [a, at, b] : [at, a, b]);
        xr.push(p && xyz[0]); yr.push(p && xyz[1]); zr.push(p && xyz[2]);
      });
      xs.push(xr); ys.push(yr); zs.push(zr);
    });
    label.textContent = axis + ' = ' + at.toFixed(1) + ' m';
    return Plotly.restyle(gd, {x: [xs], y: [ys], z: [zs], surfacecolor: [grid], colorscale: [q.colorscale],
                               cmin: q.cmin, cmax: q.cmax, 'colorbar.title.text': q.label.split(':')[0],
                               hovertemplate: q.label.split(':')[0] + ': %{surfacecolor}<extra></extra>'},
                          [sectionIndex]);
  };
  var onAxis = function () {
    slider.max = sections[+quantitySelect.value][axisSelect.value].positions.length - 1;
    slider.value = Math.floor(slider.max / 2);
    return drawSection();
  };
  var choice = document.getElementById('scene-body-choice');
  var showBody = function (id) {
    document.querySelectorAll('.scene-body-row').forEach(function (r) { r.hidden = (r.dataset.body !== String(id)); });
    choice.value = (id === null) ? '' : String(id);
  };
  boxes.forEach(function (b) { b.addEventListener('change', applyLayers); });
  if (axisSelect) {
    axisSelect.addEventListener('change', onAxis);
    quantitySelect.addEventListener('change', drawSection);
    slider.addEventListener('input', drawSection);
  }
  choice.addEventListener('change', function () { showBody(choice.value === '' ? null : choice.value); });
  gd.on('plotly_click', function (event) {
    var hit = (event.points || []).filter(function (p) { return p.data.meta && p.data.meta.body !== null
                                                                 && p.data.meta.body !== undefined; });
    if (hit.length) { showBody(hit[0].data.meta.body); }
  });
  return (axisSelect ? onAxis() : Promise.resolve()).then(applyLayers).then(function () {
    gd.dataset.sceneReady = 'yes';
  });
}
</script>"""


def scene_html(folder, voids: dict, *, body_table: Callable[[dict], str]) -> str:
    """The 3D view as an HTML fragment for the void report (plotly.js embedded: no network).

    Parameters
    ----------
    folder : path-like
        The output folder.
    voids : dict
        The content of ``voids.json``.
    body_table : callable
        Turns a body's row of ``voids.json`` into the HTML table shown when
        the body is clicked or chosen (escaped by the caller).

    Returns
    -------
    str
        The view with its controls, or a paragraph saying why it is left out.
    """
    try:
        import plotly.io
    except ImportError:  # a dependency, but an environment may predate it
        return ("<p>The 3D view is left out: the Python package plotly is not installed here; "
                "install it (pip install plotly) and write the report again.</p>")
    try:
        data = read_scene_data(folder, voids)
    except InputError as error:
        return f"<p>The 3D view is left out: {escape(error)}.</p>"
    figure = scene_figure(data)
    body_ids = [body_id for body_id, *_ in data.bodies]
    # plotly draws before the parser reaches the controls below the view: start once the page is read
    post = (f"var start = function () {{ voidcubeScene(document.getElementById('{_DIV_ID}'), "
            f"{_json_for_script(data.sections)}); }}; if (document.readyState === 'loading') "
            "{ document.addEventListener('DOMContentLoaded', start); } else { start(); }")
    plot = plotly.io.to_html(figure, include_plotlyjs=True, full_html=False, div_id=_DIV_ID,
                             default_height="620px", default_width="100%", post_script=post,
                             config={"displaylogo": False, "responsive": True})
    notes = "".join(f"<li>{escape(note)}</li>" for note in data.notes)
    above, below = _controls_html(data, body_ids)
    return (_STYLE + _SCENE_SCRIPT
            + "<p>Drag to turn the scene, scroll to zoom, right-drag to move it; drawn to true scale "
              "(no vertical exaggeration). Tick or untick a layer to show or hide it. A section of the "
              "velocity or of the slowness anomaly shows only ground cells crossed by rays: cells in the air "
              "and cells no ray crosses are left blank, because the velocity there says nothing; the section "
              "of the ray count shows every ground cell.</p>"
            + above + plot + below + _rows_html(data, voids, body_table)
            + (f"<ul>{notes}</ul>" if notes else ""))
