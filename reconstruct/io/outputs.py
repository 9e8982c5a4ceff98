"""Writing results: atomic files, CSV and JSON, VTK image data, the run manifest.

Every file is first written to a temporary name in the destination folder and
then moved into place with :func:`os.replace`, which is atomic on one file
system: an interrupted run leaves either the old file, or no file, or the new
complete file, never half a file under the final name.
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import os
import platform
import secrets
import sys
import warnings
from contextlib import contextmanager
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import numpy as np

__all__ = [
    "atomic_path",
    "write_text_atomic",
    "write_json_atomic",
    "write_csv_atomic",
    "write_cell_arrays_vti",
    "read_cell_arrays_vti",
    "write_rays_vtp",
    "sha256_of_file",
    "package_versions",
    "build_manifest",
    "extend_manifest",
    "utc_now_iso",
    "make_output_folder",
]


@contextmanager
def atomic_path(path, suffix: str | None = None):
    """Yield a temporary path beside ``path``; move it into place on success.

    The temporary name keeps the file's extension (``suffix``) so that writers
    that choose a format by extension still work. On an exception the
    temporary file is removed and ``path`` is left untouched.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    suffix = path.suffix if suffix is None else suffix
    # not tempfile.mkstemp: it creates mode 0600, and os.replace would keep that,
    # leaving results unreadable to colleagues; os.open with 0o666 honours the umask
    tmp = path.parent / f".{path.name}.{secrets.token_hex(8)}.partial{suffix}"
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
    os.close(fd)
    try:
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def make_output_folder(out_dir) -> Path:
    """Create the output folder (and its parents) if missing; a clear InputError if that fails."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        from reconstruct.errors import InputError

        raise InputError(f"{out}: cannot create the output folder ({error.strerror}); "
                         "choose a folder you can write to") from None
    return out


def write_bytes_atomic(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically (flushed to disk before the move)."""
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
    return Path(path)


def write_text_atomic(path, text: str) -> Path:
    """Write ``text`` (UTF-8, line ends as given) to ``path`` atomically."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def _json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"cannot write {type(value).__name__} to JSON")


def write_json_atomic(path, data) -> Path:
    """Write ``data`` as indented JSON atomically (NaN written as null)."""

    def clean(obj):
        # arrays and numpy scalars first, so NaN inside them also becomes null
        # (json.dumps with allow_nan=False would raise on them otherwise)
        if isinstance(obj, np.ndarray):
            return clean(obj.tolist())
        if isinstance(obj, np.generic):
            obj = obj.item()
        if isinstance(obj, float) and not np.isfinite(obj):
            return None
        if isinstance(obj, np.floating) and not np.isfinite(obj):
            return None
        if isinstance(obj, dict):
            return {str(k): clean(v) for k, v in obj.items()}
        if isinstance(obj, (list, tuple)):
            return [clean(v) for v in obj]
        return obj

    text = json.dumps(clean(data), indent=2, default=_json_default, allow_nan=False)
    return write_text_atomic(path, text + "\n")


def write_csv_atomic(path, header, rows) -> Path:
    """Write a CSV file atomically. ``rows`` is an iterable of sequences."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow(row)
    return write_text_atomic(path, buffer.getvalue())


def write_cell_arrays_vti(path, grid, cell_arrays: dict) -> Path:
    """Write cell arrays over a grid as VTK XML image data (``.vti``), atomically.

    Parameters
    ----------
    path : path-like
    grid : reconstruct.model.grid.Grid
    cell_arrays : dict of str -> ndarray of shape grid.shape (indexed [ix, iy, iz])
        Boolean arrays are written as uint8.
    """
    import pyvista  # imported here only: the numerical core never needs it

    image = pyvista.ImageData(
        dimensions=tuple(n + 1 for n in grid.shape),
        spacing=grid.cell_m,
        origin=grid.origin_m,
    )
    for name, values in cell_arrays.items():
        values = np.asarray(values)
        if values.shape != grid.shape:
            raise ValueError(f"cell array {name!r} has shape {values.shape}, expected {grid.shape}")
        if values.dtype == bool:
            values = values.astype(np.uint8)
        image.cell_data[name] = values.ravel(order="F")  # VTK: x varies fastest
    with atomic_path(path, suffix=".vti") as tmp:
        image.save(str(tmp), binary=True)
    return Path(path)


def read_cell_arrays_vti(path, names):
    """Read cell arrays written by :func:`write_cell_arrays_vti`.

    Parameters
    ----------
    path : path-like
        A ``.vti`` file.
    names : sequence of str
        Cell arrays to return.

    Returns
    -------
    grid : reconstruct.model.grid.Grid
    arrays : dict of str -> ndarray of shape grid.shape, indexed [ix, iy, iz]

    Raises
    ------
    InputError
        The file is missing or unreadable, or lacks one of the arrays.
    """
    import pyvista  # imported here only: the numerical core never needs it

    from reconstruct.errors import InputError
    from reconstruct.model.grid import Grid

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: file not found; run 'voidcube reconstruct invert' to write it, "
                         "or give the folder that holds it")
    from vtkmodules.vtkCommonCore import vtkObject

    # a damaged file makes VTK log pages of errors and return an empty image;
    # silence them here: the checks below give the user one clear line
    shown = vtkObject.GetGlobalWarningDisplay()
    vtkObject.GlobalWarningDisplayOff()
    try:
        with pyvista.vtk_verbosity("off"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            image = pyvista.read(str(path))
    except Exception as error:  # VTK raises assorted types for damaged files
        raise InputError(f"{path}: cannot be read as VTK image data ({error}); "
                         "write it again with 'voidcube reconstruct invert'") from None
    finally:
        vtkObject.SetGlobalWarningDisplay(shown)
    if not isinstance(image, pyvista.ImageData):
        raise InputError(f"{path}: holds {type(image).__name__}, not VTK image data; "
                         "give the velocity.vti written by 'voidcube reconstruct invert'")
    shape = tuple(int(n) - 1 for n in image.dimensions)
    if min(shape) < 1:
        raise InputError(f"{path}: damaged or not VTK image data (no cells could be read); "
                         "write it again with 'voidcube reconstruct invert'")
    missing = [n for n in names if n not in image.cell_data]
    if missing:
        raise InputError(f"{path}: cell array(s) {', '.join(missing)} missing; this is not a cube "
                         "written by 'voidcube reconstruct invert', write it again")
    grid = Grid(tuple(image.origin), tuple(image.spacing), shape)
    arrays = {n: np.asarray(image.cell_data[n]).reshape(shape, order="F").copy() for n in names}
    return grid, arrays


def _string_array(name, values):
    """A VTK string array (UTF-8), built directly: pyvista's own conversion
    refuses non-ASCII text, and node ids may be any UTF-8 text."""
    from vtkmodules.vtkCommonCore import vtkStringArray

    array = vtkStringArray()
    array.SetName(name)
    array.SetNumberOfValues(len(values))
    for i, value in enumerate(values):
        array.SetValue(i, str(value))
    return array


def write_rays_vtp(path, polylines, *, tx_ids, rx_ids, time_ns=None, predicted_time_ns=None,
                   input_lines=None) -> Path:
    """Write ray paths as VTK XML poly data (``.vtp``), one polyline per ray, atomically.

    Parameters
    ----------
    path : path-like
    polylines : list of ndarray, each of shape (k_i, 3), k_i >= 2
        Points of each ray from transmitter to receiver, metres, columns x, y, z.
    tx_ids, rx_ids : sequence of str, length n_rays
        Transmitter and receiver node ids, written as the string cell arrays
        ``tx`` and ``rx`` (UTF-8).
    time_ns, predicted_time_ns : sequence of float, length n_rays, optional
        Pick times and the times the model predicts, ns (NaN allowed),
        written as cell arrays of the same names.
    input_lines : sequence of int, length n_rays, optional
        Line of each pick in the pick table, written as cell array ``input_line``.

    Notes
    -----
    Cell ``i`` is ray ``i``; the cell array ``pair_index`` holds ``i`` so that
    a selection made in a viewer can be traced back to the input order.
    """
    import pyvista  # imported here only: the numerical core never needs it

    n_rays = len(polylines)
    points = []
    for i, polyline in enumerate(polylines):
        polyline = np.asarray(polyline, dtype=float)
        if polyline.ndim != 2 or polyline.shape[1] != 3 or polyline.shape[0] < 2:
            raise ValueError(f"polylines[{i}] has shape {polyline.shape}; expected (k, 3) with k >= 2")
        if not np.all(np.isfinite(polyline)):
            raise ValueError(f"polylines[{i}] has non-finite coordinates")
        points.append(polyline)
    for name, values in (("tx_ids", tx_ids), ("rx_ids", rx_ids)):
        if len(values) != n_rays:
            raise ValueError(f"{name} has {len(values)} entries, expected one per polyline ({n_rays})")
    numbers = {}
    for name, values, dtype in (
        ("time_ns", time_ns, np.float64),
        ("predicted_time_ns", predicted_time_ns, np.float64),
        ("input_line", input_lines, np.int64),
    ):
        if values is None:
            continue
        values = np.asarray(values, dtype=dtype)
        if values.shape != (n_rays,):
            argument = "input_lines" if name == "input_line" else name
            raise ValueError(f"{argument} has shape {values.shape}, expected ({n_rays},)")
        numbers[name] = values

    if n_rays:
        counts = np.array([p.shape[0] for p in points], dtype=np.int64)
        starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
        # VTK legacy cell layout: for each cell its point count, then its point numbers
        cells = np.concatenate([np.concatenate(([k], s + np.arange(k))) for k, s in zip(counts, starts)])
        rays = pyvista.PolyData(np.vstack(points), lines=cells)
    else:
        rays = pyvista.PolyData()
    rays.cell_data["pair_index"] = np.arange(n_rays, dtype=np.int64)
    rays.GetCellData().AddArray(_string_array("tx", tx_ids))
    rays.GetCellData().AddArray(_string_array("rx", rx_ids))
    for name, values in numbers.items():
        rays.cell_data[name] = values
    with atomic_path(path, suffix=".vtp") as tmp:
        rays.save(str(tmp), binary=True)
    return Path(path)


def sha256_of_file(path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def package_versions(names=("voidcube", "numpy", "scipy", "networkx", "pyvista", "vtk", "pyyaml", "ezdxf")):
    versions = {"python": sys.version.split()[0], "platform": platform.platform()}
    for name in names:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = None
    return versions


def utc_now_iso() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="seconds")


def build_manifest(*, command, inputs: dict, parameters: dict, outputs, started: str, finished: str):
    """The run manifest: inputs with sha256, parameters, versions, times, outputs."""
    return {
        "command": command,
        "started_utc": started,
        "finished_utc": finished,
        "inputs": {
            role: {"path": str(p), "sha256": sha256_of_file(p), "bytes": os.path.getsize(p)}
            for role, p in inputs.items()
            if p is not None
        },
        "parameters": parameters,
        "versions": package_versions(),
        "outputs": sorted(str(o) for o in outputs),
    }


def extend_manifest(folder, *, command, inputs: dict, parameters: dict, outputs, started: str) -> Path:
    """Record a later run on an existing output folder in its ``manifest.json``.

    The manifest of the run that made the folder is kept as it is; this run
    is appended to its ``later_runs`` list (inputs with SHA-256, parameters,
    versions, times, outputs) and its outputs are added to ``outputs``. A
    folder without a readable manifest gets a new one for this run alone.
    Written atomically.
    """
    folder = Path(folder)
    path = folder / "manifest.json"
    entry = build_manifest(command=command, inputs=inputs, parameters=parameters, outputs=outputs,
                           started=started, finished=utc_now_iso())
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
        if not isinstance(manifest, dict):
            raise ValueError("not an object")
    except (OSError, ValueError):
        manifest = dict(entry, outputs=sorted(set(entry["outputs"]) | {"manifest.json"}))
        write_json_atomic(path, manifest)
        return path
    runs = [run for run in manifest.get("later_runs", []) if isinstance(run, dict)]
    manifest["later_runs"] = runs + [entry]
    manifest["outputs"] = sorted(set(manifest.get("outputs", [])) | set(entry["outputs"]))
    write_json_atomic(path, manifest)
    return path
