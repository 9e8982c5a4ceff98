"""Export for mine planning: void bodies as DXF 3D faces, OBJ and STL, the cube as a block model.

Written by ``voidcube reconstruct voids`` next to ``voids.vtp``, all in site
coordinates (x east, y north, z elevation, metres), each file atomically:

``voids.dxf``
    Every body's surface as ``3DFACE`` triangles on its own layer
    ``body_<body_id>`` (written by ezdxf; ``$INSUNITS`` = metres).
``voids.obj``
    Wavefront OBJ: the triangles of every body as its own object and group
    ``body_<body_id>``, vertices to the millimetre.
``voids.stl``
    Binary STL (written by VTK through pyvista): the triangles of all bodies
    together; STL cannot tell bodies apart and stores 32-bit floats, so
    coordinates above about 100 km lose millimetres: use the DXF or OBJ there.
``block_model.csv``
    One row per ground cell: indices, centre, size, every array of
    ``interpretation.vti`` and the cell's class in words
    (:data:`BLOCK_CLASSES`).

The surfaces are those of ``voids.vtp`` (the isosurfaces of
:func:`reconstruct.report.pictures.void_surfaces`); no envelope is added.

References
----------
Wavefront Technologies (1992). Object Files (.obj), Advanced Visualizer manual, appendix B1.
3D Systems (1989). Stereolithography Interface Specification (STL).
"""

from __future__ import annotations

import numpy as np

from reconstruct.interpret.bodies import FILL_AIR, STATUS_RESOLVED
from reconstruct.io.dxf import write_faces_dxf
from reconstruct.io.outputs import atomic_path, write_text_atomic

__all__ = [
    "BLOCK_CLASSES",
    "EXCHANGE_FILES",
    "body_triangles",
    "stl_precision_m",
    "block_model_table",
    "write_block_model_csv",
    "write_void_exchange",
]

#: The words of the ``class`` column of ``block_model.csv``, and what each means.
BLOCK_CLASSES = {
    "rock": "ground cell crossed by rays and outside every body",
    "no rays": "ground cell that no ray crossed: the velocity there is not measured",
    "air-filled void": "cell of a resolved body faster than the rock (fill air)",
    "water- or clay-filled void": "cell of a resolved body slower than the rock (fill water_or_clay)",
    "air-filled indication": "cell of an unresolved body faster than the rock: an indication only",
    "water- or clay-filled indication": "cell of an unresolved body slower than the rock: an indication only",
}

#: The files :func:`write_void_exchange` and :func:`write_block_model_csv` write.
EXCHANGE_FILES = ("voids.dxf", "voids.obj", "voids.stl", "block_model.csv")

_FIRST_COLUMNS = ("ix", "iy", "iz", "x_m", "y_m", "z_m", "dx_m", "dy_m", "dz_m", "velocity_m_per_ns")


def body_triangles(voids_mesh) -> dict:
    """The triangles of each body of a voids mesh.

    Parameters
    ----------
    voids_mesh : pyvista.PolyData
        Triangles with the cell array ``body_id`` (as :func:`void_surfaces` makes).

    Returns
    -------
    dict of int -> ndarray of shape (n, 3, 3)
        Corner coordinates in metres (float64) for each body id, in increasing order.
    """
    if voids_mesh.n_cells == 0:
        return {}
    mesh = voids_mesh.triangulate()
    corners = np.asarray(mesh.points, dtype=float)[np.asarray(mesh.regular_faces)]
    ids = np.asarray(mesh.cell_data["body_id"])
    return {int(b): corners[ids == b] for b in np.unique(ids)}


def _obj_text(triangles: dict, title: str) -> str:
    lines = [f"# voidcube void bodies{': ' + title if title else ''}",
             "# site coordinates in metres: x east, y north, z elevation"]
    first = 1
    for body_id, faces in triangles.items():
        vertices = faces.reshape(-1, 3)
        lines.append(f"o body_{body_id}")
        lines.append(f"g body_{body_id}")
        lines.extend(f"v {x:.3f} {y:.3f} {z:.3f}" for x, y, z in vertices)
        index = first + np.arange(len(vertices)).reshape(-1, 3)
        lines.extend(f"f {a} {b} {c}" for a, b, c in index)
        first += len(vertices)
    return "\n".join(lines) + "\n"


def _write_stl(path, voids_mesh) -> None:
    with atomic_path(path, suffix=".stl") as tmp:
        if voids_mesh.n_cells:
            voids_mesh.triangulate().save(str(tmp), binary=True)
        else:  # VTK refuses an empty mesh; a binary STL of no triangles is a header and a zero count
            tmp.write_bytes(b"voidcube: no void bodies".ljust(80, b" ") + np.uint32(0).tobytes())


def stl_precision_m(voids_mesh) -> float:
    """Spacing, in metres, of 32-bit floats at the mesh's largest coordinate: what STL can keep.

    0 for an empty mesh.
    """
    if voids_mesh.n_points == 0:
        return 0.0
    largest = float(np.abs(np.asarray(voids_mesh.points, dtype=float)).max())
    return float(np.spacing(np.float32(largest)))


def write_void_exchange(folder, voids_mesh, *, title: str = "") -> list:
    """Write ``voids.dxf``, ``voids.obj`` and ``voids.stl`` into ``folder``; returns their paths.

    Parameters
    ----------
    folder : pathlib.Path
    voids_mesh : pyvista.PolyData
        The body surfaces with cell array ``body_id``, site coordinates in m.
    title : str
        The site's name, stored in the DXF header and the OBJ comment.
    """
    triangles = body_triangles(voids_mesh)
    written = [write_faces_dxf(folder / "voids.dxf", {f"body_{b}": t for b, t in triangles.items()},
                               title=title)]
    written.append(write_text_atomic(folder / "voids.obj", _obj_text(triangles, title)))
    _write_stl(folder / "voids.stl", voids_mesh)
    written.append(folder / "voids.stl")
    return written


def _cell_classes(cube: dict, bodies) -> np.ndarray:
    """Class words (:data:`BLOCK_CLASSES`) of every cell of the cube."""
    labels = np.asarray(cube["body_id"])
    classes = np.where(np.asarray(cube["ray_count"]) > 0, "rock", "no rays").astype(object)
    for body in bodies:
        fill = "air-filled" if body.fill == FILL_AIR else "water- or clay-filled"
        kind = "void" if body.status == STATUS_RESOLVED else "indication"
        classes[labels == body.body_id] = f"{fill} {kind}"
    return classes


def block_model_table(grid, cube: dict, bodies):
    """The block model: one row per ground cell, in the order x fastest, then y, then z.

    Parameters
    ----------
    grid : reconstruct.model.grid.Grid
    cube : dict of str -> ndarray of shape grid.shape
        The arrays of ``interpretation.vti``; must hold ``velocity_m_per_ns``,
        ``body_id``, ``ray_count`` and ``ground`` (which selects the rows and
        is not a column).
    bodies : sequence of reconstruct.interpret.bodies.VoidBody

    Returns
    -------
    header : list of str
        ``ix, iy, iz, x_m, y_m, z_m, dx_m, dy_m, dz_m, velocity_m_per_ns``,
        the other arrays in the order given, then ``class``.
    values : ndarray of shape (n_rows, len(header) - 1), float
        Every column but ``class``; NaN where a value does not apply.
    classes : ndarray of shape (n_rows,) of str
    """
    ground = np.asarray(cube["ground"], dtype=bool)
    index = np.argwhere(ground.transpose(2, 1, 0))[:, ::-1]  # rows with x fastest, as in VTK files
    centres = np.asarray(grid.origin_m) + (index + 0.5) * np.asarray(grid.cell_m)
    sizes = np.broadcast_to(np.asarray(grid.cell_m, dtype=float), centres.shape)
    others = [name for name in cube if name not in ("velocity_m_per_ns", "ground")]
    cells = tuple(index.T)
    values = np.column_stack([index, centres, sizes, np.asarray(cube["velocity_m_per_ns"], float)[cells]]
                             + [np.asarray(cube[name], dtype=float)[cells] for name in others])
    classes = _cell_classes(cube, bodies)[cells]
    return list(_FIRST_COLUMNS) + others + ["class"], values, classes


def write_block_model_csv(path, grid, cube: dict, bodies):
    """Write :func:`block_model_table` as CSV atomically; returns the path.

    Indices and whole-number arrays are written as integers, positions and
    sizes to the millimetre, other values with 7 significant digits; NaN as a
    blank field.
    """
    header, values, classes = block_model_table(grid, cube, bodies)
    whole = {"ix", "iy", "iz"} | {name for name, a in cube.items() if np.asarray(a).dtype.kind in "iub"}
    formats = ["%d" if name in whole else "%.3f" if name in _FIRST_COLUMNS[3:9] else "%.7g"
               for name in header[:-1]]
    row_format = ",".join(formats)
    lines = [",".join(header)]
    for row, word in zip(values, classes):
        lines.append(f"{row_format % tuple(row)},{word}")
    text = "\n".join(lines) + "\n"
    # NaN fields (not applicable) become blank; "nan" only ever stands alone in a field
    text = text.replace(",nan,", ",,").replace(",nan,", ",,")
    return write_text_atomic(path, text)
