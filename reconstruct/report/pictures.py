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
Velocity slices use matplotlib's ``cividis`` map, designed to read the same
for viewers with red-green colour-vision deficiency (Nunez, Anderton and
Renslow 2018, Optimizing colormaps with consideration for color vision
deficiency, PLOS ONE 13(7), e0199239). Bodies use the Okabe-Ito palette
(Okabe and Ito 2008, Color Universal Design): orange for fill ``air``
(faster than the rock), blue for fill ``water_or_clay`` (slower).
"""

from __future__ import annotations

import functools
import os
import subprocess
import sys

import numpy as np

from reconstruct.model.grid import Grid

__all__ = [
    "FAST_COLOUR",
    "SLOW_COLOUR",
    "probe_offscreen_backend",
    "start_offscreen_probe",
    "void_surfaces",
    "ground_surface",
    "render_oblique_view",
    "slice_pictures",
    "save_mesh",
    "write_png_atomic",
]

FAST_COLOUR = "#E69F00"  # Okabe-Ito orange
SLOW_COLOUR = "#0072B2"  # Okabe-Ito blue
WORK_COLOUR = "#CC79A7"  # Okabe-Ito reddish purple
NODE_COLOUR = "#000000"

_PROBE = """
import pyvista
plotter = pyvista.Plotter(off_screen=True, window_size=(32, 24))
plotter.add_mesh(pyvista.Sphere(), color="orange")
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
            return backend, f"off-screen rendering through {backend}"
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
        origin = np.asarray(grid.origin_m) + (np.array([s.start for s in padded]) - 1) * np.asarray(grid.cell_m)
        sub_grid = Grid(tuple(origin), grid.cell_m, field.shape)
        image = _image(sub_grid, {"anomaly": field}).cell_data_to_point_data()
        surface = image.contour([level], scalars="anomaly")
        if surface.n_cells == 0:
            continue
        surface = surface.extract_surface(algorithm=None).triangulate()
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


def render_oblique_view(path, ground_mesh, voids_mesh, *, nodes_xyz_m=None, works=(),
                        window_size=(1200, 800), title=""):
    """Render an oblique 3D view off-screen to a PNG file (atomically).

    Call :func:`probe_offscreen_backend` first; this function assumes a
    working backend. Returns the path.
    """
    import pyvista

    from reconstruct.io.outputs import atomic_path

    plotter = pyvista.Plotter(off_screen=True, window_size=tuple(int(v) for v in window_size))
    try:
        plotter.set_background("white")
        plotter.add_mesh(ground_mesh, color="#BBBBBB", opacity=0.35, show_edges=False)
        if voids_mesh.n_cells:
            fast = np.asarray(voids_mesh.cell_data["fill_is_air"]).astype(bool)
            for mask, colour in ((fast, FAST_COLOUR), (~fast, SLOW_COLOUR)):
                if mask.any():
                    plotter.add_mesh(voids_mesh.extract_cells(np.flatnonzero(mask)), color=colour,
                                     smooth_shading=True)
        if nodes_xyz_m is not None and len(nodes_xyz_m):
            plotter.add_mesh(pyvista.PolyData(np.asarray(nodes_xyz_m, dtype=float)), color=NODE_COLOUR,
                             point_size=6, render_points_as_spheres=True)
        for work in works:
            points = np.asarray(work.points_m, dtype=float)
            if work.geometry == "polygon":
                points = np.vstack([points, points[:1]])
            plotter.add_mesh(pyvista.lines_from_points(points), color=WORK_COLOUR, line_width=4)
        plotter.show_bounds(xtitle="x east (m)", ytitle="y north (m)", ztitle="z elevation (m)",
                            color="black", font_size=10, location="outer")
        if title:
            plotter.add_text(title, font_size=10, color="black")
        plotter.add_text("orange: air-filled bodies   blue: water- or clay-filled bodies   "
                         "purple: planned works   black: nodes", position="lower_left", font_size=8, color="black")
        plotter.camera_position = "iso"
        plotter.camera.azimuth = -20
        plotter.camera.elevation = -10
        with atomic_path(path, suffix=".png") as tmp:
            plotter.screenshot(str(tmp))
    finally:
        plotter.close()
    return path


def _scale_bar_length(extent_m: float) -> float:
    """A round length near a fifth of the extent (1, 2 or 5 times a power of ten)."""
    target = max(extent_m / 5.0, 1e-9)
    power = 10 ** np.floor(np.log10(target))
    for step in (5, 2, 1):
        if step * power <= target:
            return float(step * power)
    return float(power)


def _draw_slice(figure, axes, values, covered, outline, extent, labels, v_range, ground_line=None):
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    xlabel, ylabel, title = labels
    shown = np.ma.masked_invalid(values.T)
    image = axes.imshow(shown, origin="lower", extent=extent, cmap="cividis", vmin=v_range[0],
                        vmax=v_range[1], interpolation="nearest", aspect="equal")
    no_rays = np.ma.masked_where(covered.T | ~np.isfinite(values.T), np.ones_like(values.T))
    axes.imshow(no_rays, origin="lower", extent=extent, cmap="Greys", vmin=0, vmax=2, alpha=0.45,
                interpolation="nearest", aspect="equal")
    if outline.any():
        ny, nx = outline.T.shape
        xs = np.linspace(extent[0], extent[1], nx + 1)
        ys = np.linspace(extent[2], extent[3], ny + 1)
        axes.contour(0.5 * (xs[:-1] + xs[1:]), 0.5 * (ys[:-1] + ys[1:]), outline.T.astype(float),
                     levels=[0.5], colors="#D55E00", linewidths=1.8)
    if ground_line is not None:
        axes.plot(*ground_line, color="black", linewidth=1.2)
    bar = _scale_bar_length(extent[1] - extent[0])
    axes.add_artist(AnchoredSizeBar(axes.transData, bar, f"{bar:g} m", loc="lower right", pad=0.4,
                                    color="black", frameon=True, size_vertical=0))
    axes.set_xlabel(xlabel)
    axes.set_ylabel(ylabel)
    axes.set_title(title, fontsize=10)
    figure.colorbar(image, ax=axes, shrink=0.85).set_label("velocity (m/ns)")


def slice_pictures(grid: Grid, velocity_m_per_ns, ground, ray_count, labels, surface_m, body) -> bytes:
    """PNG bytes of a plan slice and an east-west section through a body's centroid.

    One picture, plan above section. Velocity in ``cividis``; the body's
    outline in vermilion; cells crossed by no ray shaded grey; air left
    blank; the ground surface as a black line on the section; a scale bar in
    metres on each.
    """
    from matplotlib.figure import Figure

    from reconstruct.report.html import figure_png

    velocity = np.where(ground, np.asarray(velocity_m_per_ns, dtype=float), np.nan)
    covered = np.asarray(ray_count) > 0
    ix, iy, iz = (int(v) for v in grid.cell_index(np.asarray(body.centroid_m))[0])
    ground_v = velocity[np.isfinite(velocity)]
    v_range = (float(ground_v.min()), float(ground_v.max())) if ground_v.size else (0.0, 0.3)
    edges = [grid.edges_m(a) for a in range(3)]
    inside = labels == body.body_id
    figure = Figure(figsize=(7.5, 7.5), layout="constrained")
    plan_axes, section_axes = figure.subplots(2, 1)
    _draw_slice(figure, plan_axes, velocity[:, :, iz], covered[:, :, iz], inside[:, :, iz],
                (edges[0][0], edges[0][-1], edges[1][0], edges[1][-1]),
                ("x east (m)", "y north (m)", f"Body {body.body_id}: plan at z = {grid.centres_m(2)[iz]:.1f} m"),
                v_range)
    _draw_slice(figure, section_axes, velocity[:, iy, :], covered[:, iy, :], inside[:, iy, :],
                (edges[0][0], edges[0][-1], edges[2][0], edges[2][-1]),
                ("x east (m)", "z elevation (m)",
                 f"Body {body.body_id}: section along x at y = {grid.centres_m(1)[iy]:.1f} m"),
                v_range, ground_line=(grid.centres_m(0), np.asarray(surface_m)[:, iy]))
    return figure_png(figure)

def save_mesh(path, mesh):
    """Write a mesh as VTK XML poly data (``.vtp``), binary, atomically. Returns the path."""
    from reconstruct.io.outputs import atomic_path

    with atomic_path(path, suffix=".vtp") as tmp:
        mesh.save(str(tmp), binary=True)
    return path


def write_png_atomic(path, png_bytes: bytes):
    """Write PNG bytes to ``path`` atomically. Returns the path."""
    from reconstruct.io.outputs import atomic_path

    with atomic_path(path, suffix=".png") as tmp:
        with open(tmp, "wb") as handle:
            handle.write(png_bytes)
    return path
