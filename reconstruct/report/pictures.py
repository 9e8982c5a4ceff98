"""Geometry and pictures of the void bodies: isosurfaces, ground surface, off-screen renders.

pyvista is imported in this module only (and in the VTK readers and writers of
:mod:`reconstruct.io.outputs`); the numerical core never needs it.

Rendering without a display
---------------------------
VTK draws through OpenGL. On a machine without a display it can use EGL
(Debian packages ``libegl1 libegl-mesa0 libgl1-mesa-dri``) or OSMesa
(``libosmesa6``). With no working backend VTK's screenshot call crashes the
process instead of raising, so :func:`probe_offscreen_backend` first renders a
tiny scene in a *subprocess*, trying the backends in turn; only when one works
does this process render, with that backend selected through the environment
variable ``VTK_DEFAULT_OPENGL_WINDOW``. Otherwise the meshes are written
without the 3D picture and the caller is told why.

The plan and section slices are drawn with matplotlib's Agg canvas, which
needs no OpenGL, so they are always made.

Colours
-------
Every colour and colour map comes from :mod:`reconstruct.report.colours`
(Okabe-Ito categories, ``cividis`` for velocity; the choices and their
sources are stated there): bodies in the colour of their fill (orange for
air, blue for water or clay), planned works reddish purple, nodes black;
cells crossed by no ray veiled and hatched.
"""

from __future__ import annotations

import functools
import os
import subprocess
import sys

import numpy as np

from reconstruct.model.grid import Grid
from reconstruct.report import colours, map_marks

__all__ = [
    "FAST_COLOUR",
    "SLOW_COLOUR",
    "probe_offscreen_backend",
    "start_offscreen_probe",
    "void_surfaces",
    "ground_surface",
    "render_oblique_view",
    "slice_pictures",
    "slice_figure",
    "save_mesh",
    "write_png_atomic",
]

FAST_COLOUR = colours.FILL_COLOURS["air"]
SLOW_COLOUR = colours.FILL_COLOURS["water_or_clay"]
WORK_COLOUR = colours.PLANNED_WORK_COLOUR
NODE_COLOUR = colours.NODE_COLOUR

_PROBE = f"""
import pyvista
plotter = pyvista.Plotter(off_screen=True, window_size=(32, 24))
plotter.add_mesh(pyvista.Sphere(), color={FAST_COLOUR!r})
image = plotter.screenshot(return_img=True)
plotter.close()
assert image.shape[:2] == (24, 32) and image.reshape(-1, image.shape[-1]).std(axis=0).max() > 0
print("ok")
"""

_BACKENDS = ("vtkEGLRenderWindow", "vtkOSOpenGLRenderWindow", "vtkXOpenGLRenderWindow")


_started_probes: dict = {}


def _candidate_backends() -> list:
    preset = os.environ.get("VTK_DEFAULT_OPENGL_WINDOW")
    candidates = ([preset] if preset else []) + [b for b in _BACKENDS if b != preset]
    if not os.environ.get("DISPLAY"):
        candidates = [b for b in candidates if b != "vtkXOpenGLRenderWindow" or b == preset]
    return candidates


def _launch_probe(backend: str):
    env = dict(os.environ, VTK_DEFAULT_OPENGL_WINDOW=backend)
    return subprocess.Popen([sys.executable, "-c", _PROBE], env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, stdin=subprocess.DEVNULL, text=True)


def start_offscreen_probe() -> None:
    """Start probing the first candidate backend in the background; returns at once.

    Lets the probe (a few seconds, mostly waiting for the OpenGL driver) run
    while the caller computes; :func:`probe_offscreen_backend` collects it.
    """
    if probe_offscreen_backend.cache_info().currsize:
        return
    candidates = _candidate_backends()
    if candidates and candidates[0] not in _started_probes:
        _started_probes[candidates[0]] = _launch_probe(candidates[0])


@functools.lru_cache(maxsize=1)
def probe_offscreen_backend(timeout_s: float = 120.0):
    """Find an OpenGL backend that renders off-screen here, testing each in a subprocess.

    Returns
    -------
    backend : str or None
        The value set for ``VTK_DEFAULT_OPENGL_WINDOW`` in this process, or
        None when no backend works.
    message : str
        What was found, for the user.
    """
    failures = []
    for backend in _candidate_backends():
        process = _started_probes.pop(backend, None) or _launch_probe(backend)
        try:
            stdout, _ = process.communicate(timeout=timeout_s)
        except subprocess.TimeoutExpired:
            process.kill()
            process.communicate()
            failures.append(f"{backend}: no answer within {timeout_s:.0f} s")
            continue
        if process.returncode == 0 and stdout.strip().endswith("ok"):
            os.environ["VTK_DEFAULT_OPENGL_WINDOW"] = backend
            return backend, "3D picture drawn off-screen (no display needed)"
        failures.append(f"{backend}: exit code {process.returncode}")
    return None, (
        "no off-screen OpenGL backend works on this machine (" + "; ".join(failures) + "); "
        "the meshes are written but the 3D picture is not. On Debian or Ubuntu install "
        "'libegl1 libegl-mesa0 libgl1-mesa-dri' (or 'libosmesa6') and run again")


def _image(grid: Grid, cell_arrays: dict):
    import pyvista

    image = pyvista.ImageData(dimensions=tuple(n + 1 for n in grid.shape), spacing=grid.cell_m,
                              origin=grid.origin_m)
    for name, values in cell_arrays.items():
        image.cell_data[name] = np.asarray(values).ravel(order="F")
    return image


def void_surfaces(grid: Grid, labels, anomaly_ns_per_m, bodies):
    """Isosurface of every body as one mesh, with cell arrays ``body_id`` and ``fill_is_air``
    (1 for fill ``air``, 0 for ``water_or_clay``).

    Each body's surface is the contour, at the body's cut level (half its peak
    anomaly), of its anomaly field interpolated to the cell corners; cells of
    other bodies are zeroed first so that neighbours do not merge. The work
    is done on the body's bounding box plus one cell.

    Parameters
    ----------
    grid : Grid
    labels : ndarray (nx, ny, nz) of int
    anomaly_ns_per_m : ndarray (nx, ny, nz), NaN outside ground
    bodies : sequence of reconstruct.interpret.bodies.VoidBody

    Returns
    -------
    pyvista.PolyData
    """
    import pyvista

    from reconstruct.interpret.bodies import FILL_AIR

    anomaly = np.nan_to_num(np.asarray(anomaly_ns_per_m, dtype=float))
    pieces = []
    boxes = {i + 1: box for i, box in enumerate(_find_objects(labels))}
    for body in bodies:
        box = boxes.get(body.body_id)
        if box is None:
            continue
        padded = tuple(slice(max(s.start - 1, 0), min(s.stop + 1, n)) for s, n in zip(box, grid.shape))
        sub_labels = labels[padded]
        sign = -1.0 if body.fill == FILL_AIR else 1.0
        field = np.where((sub_labels == 0) | (sub_labels == body.body_id), sign * anomaly[padded], 0.0)
        level = 0.5 * abs(body.peak_anomaly_ns_per_m)
        # a band of zeros around the box keeps the surface closed where the body touches the edge
        field = np.pad(np.where(field > 0, field, 0.0), 1)
        # contoured in a frame at the grid's origin: VTK's contour points are 32-bit floats, which keep
        # only about 0.5 m at site coordinates of 6e6 m; shifted back below in 64-bit floats
        origin = (np.array([s.start for s in padded]) - 1) * np.asarray(grid.cell_m)
        sub_grid = Grid(tuple(origin), grid.cell_m, field.shape)
        image = _image(sub_grid, {"anomaly": field}).cell_data_to_point_data()
        surface = image.contour([level], scalars="anomaly")
        if surface.n_cells == 0:
            continue
        surface = surface.extract_surface(algorithm=None).triangulate()
        surface.points = np.asarray(surface.points, dtype=np.float64) + np.asarray(grid.origin_m, dtype=np.float64)
        surface.clear_data()
        surface.cell_data["body_id"] = np.full(surface.n_cells, body.body_id, dtype=np.int32)
        surface.cell_data["fill_is_air"] = np.full(surface.n_cells, int(body.fill == FILL_AIR), dtype=np.uint8)
        pieces.append(surface)
    if not pieces:
        mesh = pyvista.PolyData()
        mesh.cell_data["body_id"] = np.zeros(0, dtype=np.int32)
        mesh.cell_data["fill_is_air"] = np.zeros(0, dtype=np.uint8)
        return mesh
    return pyvista.merge(pieces, merge_points=False)


def _find_objects(labels):
    from scipy import ndimage

    return ndimage.find_objects(np.asarray(labels))


def ground_surface(grid: Grid, surface_m):
    """The ground surface as a mesh over the column centres, with ``elevation_m`` point data."""
    import pyvista

    xs, ys = grid.centres_m(0), grid.centres_m(1)
    x, y = np.meshgrid(xs, ys, indexing="ij")
    z = np.asarray(surface_m, dtype=float)
    mesh = pyvista.StructuredGrid(x, y, z).extract_surface(algorithm=None)
    mesh.point_data["elevation_m"] = mesh.points[:, 2].copy()
    return mesh


def _north_arrow_mesh(bounds, ground_z_m):
    """An arrow pointing to +y (north) from the south-west corner of ``bounds`` at the height
    ``ground_z_m``, and the position of its letter N. A tenth of the plan extent long."""
    import pyvista

    x0, x1, y0, y1 = bounds[:4]
    size = 0.1 * max(x1 - x0, y1 - y0)
    base = np.array([x0, y0, ground_z_m])
    arrow = pyvista.Arrow(start=base, direction=(0.0, 1.0, 0.0), scale=size, tip_length=0.35, tip_radius=0.12,
                          shaft_radius=0.04)
    return arrow, base + np.array([0.0, 1.25 * size, 0.0])


def _round_bounds(bounds):
    """Bounds widened to round values, each axis spanning an even number of round steps, so that
    three labels per axis (ends and middle) are round numbers."""
    out = []
    for lo, hi in zip(bounds[::2], bounds[1::2]):
        step = map_marks.scale_bar_length_m(max(hi - lo, 1e-6))
        lo_r, hi_r = np.floor(lo / step) * step, np.ceil(hi / step) * step
        if round((hi_r - lo_r) / step) % 2:
            hi_r += step
        out += [float(lo_r), float(hi_r)]
    return out


def _draw_works_and_zones(plotter, works, zones, ground_z_m):
    """Planned works as thick lines; exclusion zones as thin outlines at ground level. Returns the
    key entries for what was drawn."""
    import pyvista

    key = []
    for work in works:
        points = np.asarray(work.points_m, dtype=float)
        if work.geometry == "polygon":
            points = np.vstack([points, points[:1]])
        plotter.add_mesh(pyvista.lines_from_points(points), color=WORK_COLOUR, line_width=4)
    if works:
        key.append((WORK_COLOUR, "planned works"))
    for zone in zones:
        xy = np.asarray(zone.polygon_xy_m, dtype=float)
        xy = np.vstack([xy, xy[:1]])
        points = np.column_stack([xy, np.full(len(xy), ground_z_m)])
        plotter.add_mesh(pyvista.lines_from_points(points), color=colours.EXCLUSION_ZONE_COLOUR, line_width=2)
    if zones:
        key.append((colours.EXCLUSION_ZONE_COLOUR, "exclusion zones (no nodes)"))
    return key


def render_oblique_view(path, ground_mesh, voids_mesh, *, nodes_xyz_m=None, works=(), zones=(),
                        window_size=(1200, 800), title=""):
    """Render an oblique 3D view off-screen to a PNG file (atomically).

    The ground surface, the bodies in the colour of their fill, the nodes,
    the planned works and the exclusion zones, with axes in metres, a north
    arrow and a key that lists only what is drawn. Call
    :func:`probe_offscreen_backend` first; this function assumes a working
    backend.

    Returns
    -------
    list of str
        The key in words, one entry per thing drawn ("orange: air-filled
        bodies ..."), for the picture's caption.
    """
    import pyvista

    from reconstruct.io.outputs import atomic_path

    plotter = pyvista.Plotter(off_screen=True, window_size=tuple(int(v) for v in window_size))
    key = [(colours.GROUND_SURFACE_COLOUR, "ground surface (translucent)")]
    try:
        plotter.set_background(colours.BACKGROUND_COLOUR)
        plotter.add_mesh(ground_mesh, color=colours.GROUND_SURFACE_COLOUR, opacity=0.35, show_edges=False)
        if voids_mesh.n_cells:
            fast = np.asarray(voids_mesh.cell_data["fill_is_air"]).astype(bool)
            for mask, colour, words in ((fast, FAST_COLOUR, "air-filled bodies (faster than the rock)"),
                                        (~fast, SLOW_COLOUR, "water- or clay-filled bodies (slower)")):
                if mask.any():
                    plotter.add_mesh(voids_mesh.extract_cells(np.flatnonzero(mask)), color=colour,
                                     smooth_shading=True)
                    key.append((colour, words))
        if nodes_xyz_m is not None and len(nodes_xyz_m):
            plotter.add_mesh(pyvista.PolyData(np.asarray(nodes_xyz_m, dtype=float)), color=NODE_COLOUR,
                             point_size=6, render_points_as_spheres=True)
            key.append((NODE_COLOUR, "nodes"))
        ground_z = float(np.max(ground_mesh.points[:, 2])) if ground_mesh.n_points else 0.0
        key += _draw_works_and_zones(plotter, works, zones, ground_z)
        box = _round_bounds(plotter.bounds)
        arrow, letter_at = _north_arrow_mesh(box, ground_z)
        plotter.add_mesh(arrow, color=colours.TEXT_COLOUR)
        plotter.add_point_labels([letter_at], ["N (north)"], font_size=16, text_color=colours.TEXT_COLOUR,
                                 shape=None, show_points=False, always_visible=True)
        plotter.show_bounds(bounds=box, xtitle="x east (m)", ytitle="y north (m)",
                            ztitle="z elevation (m)", color=colours.TEXT_COLOUR, font_size=14,
                            location="outer", n_xlabels=3, n_ylabels=3, n_zlabels=3, fmt="%.0f")
        if title:
            plotter.add_text(title, font_size=12, color=colours.TEXT_COLOUR)
        words = [f"{colours.COLOUR_NAMES[colour]}: {meaning}" for colour, meaning in key]
        plotter.add_text("\n".join(words), position="lower_left", font_size=10, color=colours.TEXT_COLOUR)
        plotter.camera_position = "iso"
        plotter.camera.azimuth = -20
        plotter.camera.elevation = -10
        with atomic_path(path, suffix=".png") as tmp:
            plotter.screenshot(str(tmp))
    finally:
        plotter.close()
    return words


def _step_coordinates(edges):
    """Cell edges as the coordinates of a stepped grid: each inner edge twice, a hair apart, so that a
    contour of cell values at level 0.5 runs along the cell edges."""
    edges = np.asarray(edges, dtype=float)
    hair = 1e-6 * float(np.min(np.diff(edges)))
    inner = np.repeat(edges[1:-1], 2) + np.tile([-hair, hair], len(edges) - 2)
    return np.r_[edges[0], inner, edges[-1]]


def _stepped(mask, extent):
    """``(x, y, values)`` for contouring a (ny, nx) cell mask along its cell edges."""
    ny, nx = mask.shape
    xs = _step_coordinates(np.linspace(extent[0], extent[1], nx + 1))
    ys = _step_coordinates(np.linspace(extent[2], extent[3], ny + 1))
    return xs, ys, np.repeat(np.repeat(mask.astype(float), 2, axis=0), 2, axis=1)


def _draw_no_rays(axes, no_rays, extent):
    """Veil and hatch the cells crossed by no ray (the choice is explained in reconstruct.report.colours)."""
    import matplotlib

    if not no_rays.any():
        return
    xs, ys, stepped = _stepped(no_rays, extent)
    axes.contourf(xs, ys, stepped, levels=[0.5, 1.5], colors=[colours.NO_RAYS_VEIL_COLOUR],
                  alpha=colours.NO_RAYS_VEIL_ALPHA)
    with matplotlib.rc_context({"hatch.color": colours.NO_RAYS_HATCH_COLOUR, "hatch.linewidth": 0.6}):
        axes.contourf(xs, ys, stepped, levels=[0.5, 1.5], colors="none", hatches=[colours.NO_RAYS_HATCH])


def _key_entries(outline_shown, outline_colour, fill_words, no_rays_shown, ground_shown, works_shown, what="body"):
    """Key entries for only the things a slice shows; ``what`` names the outlined thing."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    entries = []
    if outline_shown:
        entries.append((Line2D([], [], color=outline_colour, lw=1.8), f"outline of the {what} ({fill_words})"))
    if no_rays_shown:
        entries.append((Patch(facecolor=colours.NO_RAYS_VEIL_COLOUR, edgecolor=colours.NO_RAYS_HATCH_COLOUR,
                              hatch=colours.NO_RAYS_HATCH), "no ray crossed these cells"))
    if ground_shown:
        entries.append((Line2D([], [], color=colours.GROUND_LINE_COLOUR, lw=1.2), "ground surface"))
    if works_shown:
        entries.append((Line2D([], [], color=WORK_COLOUR, lw=1.6), "planned works"))
    return entries


def _draw_slice(axes, view: dict, v_range, outline_colour):
    """One slice: velocity, the no-ray veil, the body outline, the ground line, planned works,
    a scale bar and the axis labels. ``view`` holds ``values``, ``covered``, ``outline`` (cell
    arrays of the window, first axis horizontal), ``extent``, ``labels`` and optionally
    ``ground_line`` and ``works`` (lists of (x, y) arrays). Returns the velocity image and
    what was drawn, as flags for the key."""
    values, extent = view["values"], view["extent"]
    xlabel, ylabel, title = view["labels"]
    image = axes.imshow(np.ma.masked_invalid(values.T), origin="lower", extent=extent, cmap=colours.VELOCITY_MAP,
                        vmin=v_range[0], vmax=v_range[1], interpolation="nearest", aspect="equal")
    no_rays = ~view["covered"].T & np.isfinite(values.T)
    _draw_no_rays(axes, no_rays, extent)
    outline = view["outline"]
    if outline.any():
        # along the cell edges, in the colour of the body's fill, on a light halo that keeps it
        # legible on both ends of the velocity map
        stepped = _stepped(outline.T, extent)
        axes.contour(*stepped, levels=[0.5], colors=[colours.BODY_OUTLINE_HALO], linewidths=3.6)
        axes.contour(*stepped, levels=[0.5], colors=[outline_colour], linewidths=1.8)
    ground_line = view.get("ground_line")
    if ground_line is not None:
        axes.plot(*ground_line, color=colours.GROUND_LINE_COLOUR, linewidth=1.2)
    works = view.get("works", [])
    for line in works:
        axes.plot(line[:, 0], line[:, 1], color=WORK_COLOUR, linewidth=1.6)
    axes.set_xlim(extent[0], extent[1])
    axes.set_ylim(extent[2], extent[3])
    map_marks.draw_scale_bar(axes, extent[1] - extent[0])
    axes.set_xlabel(xlabel)
    axes.set_ylabel(ylabel)
    axes.set_title(title, fontsize=10)
    return image, dict(outline_shown=bool(outline.any()), no_rays_shown=bool(no_rays.any()),
                       ground_shown=ground_line is not None, works_shown=bool(works))


def _window(grid: Grid, body, margin_m: float = 12.0):
    """Cell slices of a window around a body: its bounding box plus a margin of at least
    ``margin_m`` or the body's own largest size, whichever is larger, clipped to the grid."""
    lo = np.asarray(body.bbox_min_m, dtype=float)
    hi = np.asarray(body.bbox_max_m, dtype=float)
    pad = max(margin_m, float(np.max(hi - lo)))
    first = grid.cell_index(np.maximum(lo - pad, grid.origin_m))[0]
    last = grid.cell_index(np.minimum(hi + pad, np.asarray(grid.end_m) - 1e-9))[0]
    return tuple(slice(int(a), int(b) + 1) for a, b in zip(first, last))


def _work_lines(works, window_xy):
    """Plan lines (x, y) of the planned works that come into a plan window."""
    x0, x1, y0, y1 = window_xy
    lines = []
    for work in works:
        points = np.asarray(work.points_m, dtype=float)[:, :2]
        if work.geometry == "polygon":
            points = np.vstack([points, points[:1]])
        if (points[:, 0].max() >= x0 and points[:, 0].min() <= x1 and points[:, 1].max() >= y0
                and points[:, 1].min() <= y1):
            lines.append(points)
    return lines


def slice_pictures(grid: Grid, velocity_m_per_ns, ground, ray_count, labels, surface_m, body, works=(),
                   *, what: str = "body", label: int | None = None) -> bytes:
    """PNG bytes of :func:`slice_figure`."""
    from reconstruct.report.html import figure_png

    return figure_png(slice_figure(grid, velocity_m_per_ns, ground, ray_count, labels, surface_m, body, works,
                                   what=what, label=label))


def slice_figure(grid: Grid, velocity_m_per_ns, ground, ray_count, labels, surface_m, body, works=(),
                 *, what: str = "body", label: int | None = None):
    """A matplotlib figure of a plan slice and an east-west section through a body's centroid.

    ``body`` is a :class:`reconstruct.interpret.bodies.VoidBody` or any object
    with ``centroid_m``, ``bbox_min_m``, ``bbox_max_m`` and ``fill``, such as a
    :class:`reconstruct.interpret.detectability.WeakIndication`; its cells are
    those where ``labels == label`` (default ``body.body_id``) and ``what``
    names it in the titles and the key (default "body": "Body 3"; "weak
    indication": "Weak indication 2").

    One picture, plan above section, both around the body (:func:`_window`)
    and drawn to the same scale (the same horizontal extent, equal aspect and
    equal widths). Velocity on the project's velocity map with its colour bar
    in m/ns; the body's outline in the colour of its fill; cells crossed by no
    ray veiled and hatched; air left blank; the ground surface as a black line
    on the section; planned works on the plan; a north arrow on the plan, the
    viewing direction in words on the section, a scale bar in metres on each,
    and a key that lists only what is drawn (colours from
    :mod:`reconstruct.report.colours`).
    """
    from matplotlib.figure import Figure

    from reconstruct.interpret.bodies import FILL_AIR

    velocity = np.where(ground, np.asarray(velocity_m_per_ns, dtype=float), np.nan)
    covered = np.asarray(ray_count) > 0
    ix, iy, iz = (int(v) for v in grid.cell_index(np.asarray(body.centroid_m))[0])
    ground_v = velocity[np.isfinite(velocity)]
    v_range = (float(ground_v.min()), float(ground_v.max())) if ground_v.size else (0.0, 0.3)
    wx, wy, wz = _window(grid, body)
    edges = [grid.edges_m(a) for a in range(3)]
    ex, ey, ez = edges[0][wx.start:wx.stop + 1], edges[1][wy.start:wy.stop + 1], edges[2][wz.start:wz.stop + 1]
    label = body.body_id if label is None else label
    name = f"{what[0].upper()}{what[1:]} {label}"
    inside = labels == label
    air = body.fill == FILL_AIR
    outline_colour = FAST_COLOUR if air else SLOW_COLOUR
    fill_words = "air-filled: faster than the rock" if air else "water- or clay-filled: slower than the rock"
    plan_extent = (ex[0], ex[-1], ey[0], ey[-1])
    section_extent = (ex[0], ex[-1], ez[0], ez[-1])
    plan = dict(values=velocity[wx, wy, iz], covered=covered[wx, wy, iz], outline=inside[wx, wy, iz],
                extent=plan_extent, works=_work_lines(works, plan_extent),
                labels=("x east (m)", "y north (m)",
                        f"{name}: plan at z = {grid.centres_m(2)[iz]:.1f} m elevation"))
    section = dict(values=velocity[wx, iy, wz], covered=covered[wx, iy, wz], outline=inside[wx, iy, wz],
                   extent=section_extent,
                   ground_line=(grid.centres_m(0)[wx], np.asarray(surface_m)[wx, iy]),
                   labels=("x east (m)", "z elevation (m)",
                           f"{name}: section west-east at y = {grid.centres_m(1)[iy]:.1f} m, "
                           "looking north"))
    figure = Figure(figsize=(7.5, 8.0), layout="constrained")
    plan_axes, section_axes = figure.subplots(
        2, 1, sharex=True, gridspec_kw={"height_ratios": [ey[-1] - ey[0], ez[-1] - ez[0]]})
    shown = {}
    for axes, view in ((plan_axes, plan), (section_axes, section)):
        image, flags = _draw_slice(axes, view, v_range, outline_colour)
        shown = {k: shown.get(k, False) or v for k, v in flags.items()}
    plan_axes.tick_params(labelbottom=True)
    map_marks.draw_north_arrow(plan_axes)
    map_marks.draw_key(figure, _key_entries(outline_colour=outline_colour, fill_words=fill_words, what=what,
                                            **shown),
                       loc="outside lower center", fontsize=8)
    figure.colorbar(image, ax=[plan_axes, section_axes], shrink=0.6).set_label(
        "velocity (m/ns): dark blue slow, yellow fast")
    return figure


def save_mesh(path, mesh):
    """Write a mesh as VTK XML poly data (``.vtp``), binary, atomically. Returns the path."""
    from reconstruct.io.outputs import atomic_path

    with atomic_path(path, suffix=".vtp") as tmp:
        mesh.save(str(tmp), binary=True)
    return path


def write_png_atomic(path, png_bytes: bytes):
    """Write PNG bytes to ``path`` atomically. Returns the path."""
    from reconstruct.io.outputs import write_bytes_atomic

    write_bytes_atomic(path, png_bytes)
    return path
