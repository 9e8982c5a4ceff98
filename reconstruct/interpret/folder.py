"""From an inversion folder to the void screening: load the folder, find bodies, screen them.

``voidcube reconstruct voids DIR`` reads the folder written by ``voidcube reconstruct invert``
(``velocity.vti``, ``summary.json``, ``residuals.csv``, ``nodes_used.csv``,
``manifest.json``) and the site description, then writes into the same
folder:

============================  ==================================================
``voids.csv``, ``voids.json``  the void table (``voids.json`` also holds the
                               threshold and resolution per depth, the
                               screening, the cautions, the rendering note,
                               the weak indications, the ``detectability``
                               of each planned work and the
                               ``threshold_override`` record)
``weak_indications.csv``       anomalies past the noise floor but short of
                               the detection threshold
                               (:mod:`reconstruct.interpret.detectability`)
``screening.csv``              the ranked screening list with reasons
``interpretation.vti``         the cube with petrophysics, background, anomaly
                               and body ids
``voids.vtp``, ``ground.vtp``  isosurfaces of the bodies (cell array
                               ``body_id``) and the ground surface
``pictures/*.png``             oblique 3D view (when off-screen rendering
                               works) and plan and section slices per body
                               and weak indication (``body_N_slices.png``,
                               ``indication_N_slices.png``)
``voids.dxf``, ``voids.obj``,  for mine-planning software: the bodies as DXF
``voids.stl``,                 3D faces, OBJ and STL, and the cube as a block
``block_model.csv``            model (see ``reconstruct.report.exchange``)
============================  ==================================================

and appends the run to ``manifest.json``. Inputs are never modified; pictures
of an earlier run that this run did not draw again are removed, so that no
picture outlives its body.

Bad input
---------
Every problem below raises :class:`~reconstruct.errors.InputError` naming
the file and the fix (docs/reviewing.md lists the same decisions): FOLDER missing;
``velocity.vti``, ``summary.json`` or ``residuals.csv`` missing, damaged or
lacking a needed array or key; ground cells with NaN, infinite or
non-positive velocity; the site not found, changed since the inversion, or
with a grid other than the cube's. A ``--site`` that differs from the file
recorded in the manifest is used and noted in ``voids.json``.

Finding the site
----------------
``--site`` wins. Otherwise the path recorded under ``inputs.site`` in
``manifest.json`` is tried as written, then relative to the folder and to its
parent; a file is used only if its SHA-256 equals the recorded one.
"""

from __future__ import annotations

import csv
import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reconstruct.errors import InputError
from reconstruct.model.grid import Grid
from reconstruct.interpret.screening import ScreeningOptions, screen_voids
from reconstruct.io.outputs import (
    read_cell_arrays_vti,
    sha256_of_file,
)
from reconstruct.io.site import Site, load_site
from reconstruct.interpret.bodies import (
    VoidOptions,
    find_voids,
)
from reconstruct.interpret.refine import pick_times_from_run, read_pick_times

__all__ = ["InversionFolder", "load_inversion_folder", "inversion_from_run", "screen_folder", "find_folder_bodies", "read_json_object"]

_CUBE_ARRAYS = ("velocity_m_per_ns", "ray_length_m", "ray_count", "ground")


@dataclass(frozen=True)
class InversionFolder:
    """The pieces of an inversion that the void screening needs: read from a folder
    (:func:`load_inversion_folder`) or taken from a result in memory (:func:`inversion_from_run`)."""

    path: Path
    grid: Grid
    velocity_m_per_ns: np.ndarray
    ray_count: np.ndarray
    ray_length_m: np.ndarray
    ground: np.ndarray
    surface_m: np.ndarray  # (nx, ny) ground elevation at the column centres
    summary: dict
    site: Site
    site_path: Path
    path_length_m: float
    rms_ns: float
    nodes_xyz_m: np.ndarray | None
    notes: tuple
    pick_times: object = None  # reconstruct.interpret.refine.PickTimes of the picks inverted, for the refinement


def read_json_object(path: Path, hint: str) -> dict:
    """A JSON object from a file of an output folder; ``hint`` tells the user how to fix a problem."""
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputError(f"{path}: file not found; {hint}") from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        raise InputError(f"{path}: cannot be read as JSON ({error}); {hint}") from None
    if not isinstance(data, dict):
        raise InputError(f"{path}: expected a JSON object; {hint}")
    return data


def recorded_file_candidates(folder: Path, recorded) -> list[Path]:
    """Where a file recorded in an output folder may be: as written if absolute; else as written,
    relative to the folder, or to its parent (a relative path was written relative to where the
    command ran, usually the folder's parent or the working directory)."""
    path = Path(recorded)
    return [path] if path.is_absolute() else [path, folder / path, folder.parent / path]


def _find_site(folder: Path, manifest: dict | None) -> Path:
    record = (manifest or {}).get("inputs", {}).get("site") if isinstance(manifest, dict) else None
    if not isinstance(record, dict) or not record.get("path"):
        raise InputError(f"{folder / 'manifest.json'}: no site file recorded; give the site "
                         "description with --site")
    changed = []
    for candidate in recorded_file_candidates(folder, record["path"]):
        if candidate.is_file():
            if sha256_of_file(candidate) == record.get("sha256"):
                return candidate
            changed.append(str(candidate))
    if changed:
        raise InputError(f"{changed[0]}: the site file has changed since the inversion (SHA-256 differs "
                         "from manifest.json); give the site used for the inversion with --site")
    raise InputError(f"{folder / 'manifest.json'}: the site file {record['path']} recorded there is not "
                     "found from here; give it with --site")


def _median_path_length_m(path: Path) -> float:
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            rows = csv.DictReader(handle)
            if rows.fieldnames is None or "distance_m" not in rows.fieldnames:
                raise InputError(f"{path}: no distance_m column; write the folder again with "
                                 "'voidcube reconstruct invert'")
            lengths = []
            for line, row in enumerate(rows, start=2):
                try:
                    lengths.append(float(row["distance_m"]))
                except (TypeError, ValueError):
                    raise InputError(f"{path}: line {line}: distance_m {row['distance_m']!r} is not a "
                                     "number; write the folder again with 'voidcube reconstruct invert'") from None
    except FileNotFoundError:
        raise InputError(f"{path}: file not found; give the folder written by 'voidcube reconstruct invert'") from None
    lengths = np.asarray(lengths)
    lengths = lengths[np.isfinite(lengths) & (lengths > 0)]
    if lengths.size == 0:
        raise InputError(f"{path}: no pick with a positive distance; the void screening needs the "
                         "residuals of an inversion")
    return float(np.median(lengths))


def _surface_m(grid: Grid, site: Site) -> np.ndarray:
    """Ground elevation (m) at the centres of the grid's columns, shape (nx, ny)."""
    x, y = np.meshgrid(grid.centres_m(0), grid.centres_m(1), indexing="ij")
    return np.broadcast_to(np.asarray(site.ground.elevation_m(x, y), dtype=float), x.shape).copy()


def inversion_from_run(run, *, path=None, site_path=None) -> InversionFolder:
    """The pieces the void screening needs, from an inversion in memory (no file read).

    Parameters
    ----------
    run : reconstruct.inverse.straight.TomographyRun
        A finished inversion.
    path : path-like, optional
        The folder the outputs will go to (default: the current folder).
    site_path : path-like, optional
        The site file, for the records (default: the site's ``source_path``).

    Notes
    -----
    The median transmitter-receiver distance is taken to the millimetre, as
    ``residuals.csv`` holds it, so that a result in memory and its folder
    give the same detection threshold.
    """
    from reconstruct.inverse.straight import run_summary

    xyz = run.placement.xyz_m
    tx, rx = run.picks.tx[run.used], run.picks.rx[run.used]
    lengths = np.round(np.linalg.norm(xyz[rx] - xyz[tx], axis=1), 3)
    lengths = lengths[lengths > 0]
    if lengths.size == 0:
        raise InputError(f"{run.picks.source}: no pick with a positive distance; the void screening needs "
                         "the residuals of an inversion")
    grid, site = run.grid, run.site
    surface = _surface_m(grid, site)
    velocity = (1.0 / run.result.slowness_ns_per_m).reshape(grid.shape)
    return InversionFolder(
        path=Path(path or "."), grid=grid, velocity_m_per_ns=velocity, ray_count=run.ray_count,
        ray_length_m=run.ray_length_m, ground=run.ground, surface_m=surface, summary=run_summary(run),
        site=site, site_path=Path(site_path or site.source_path or "site"),
        path_length_m=float(np.median(lengths)), rms_ns=float(run.result.rms_ns), nodes_xyz_m=xyz, notes=(),
        pick_times=pick_times_from_run(run))


def _read_nodes_used(path: Path):
    if not path.is_file():
        return None
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    try:
        return np.array([[float(r["x_m"]), float(r["y_m"]), float(r["z_m"])] for r in rows]).reshape(-1, 3)
    except (KeyError, TypeError, ValueError):
        return None  # node positions only decorate the 3D picture


def load_inversion_folder(folder, site_path=None) -> InversionFolder:
    """Read an inversion folder and its site; check that they belong together.

    Raises
    ------
    InputError
        Missing or damaged files, a site that cannot be found or has changed,
        or a site whose grid differs from the cube's.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder; give the output folder of 'voidcube reconstruct invert'")
    hint = "give the output folder of 'voidcube reconstruct invert'"
    summary = read_json_object(folder / "summary.json", hint)
    manifest_path = folder / "manifest.json"
    manifest = read_json_object(manifest_path, hint) if manifest_path.is_file() else None
    notes = []
    if site_path is None:
        site_file = _find_site(folder, manifest)
    else:
        site_file = Path(site_path)
        record = (manifest or {}).get("inputs", {}).get("site") if isinstance(manifest, dict) else None
        if site_file.is_file() and isinstance(record, dict) and record.get("sha256") not in (
                None, sha256_of_file(site_file)):
            notes.append(f"the site file {site_file} differs from the one recorded in manifest.json "
                         f"({record.get('path')}); used as given")
    site = load_site(site_file)
    notes.extend(site.notes)
    grid, arrays = read_cell_arrays_vti(folder / "velocity.vti", _CUBE_ARRAYS)
    site_grid = site.grid()
    if (site_grid.shape != grid.shape or not np.allclose(site_grid.origin_m, grid.origin_m, atol=1e-6)
            or not np.allclose(site_grid.cell_m, grid.cell_m, atol=1e-9)):
        raise InputError(f"{site_file}: its model grid {site_grid.shape} at {site_grid.origin_m} differs "
                         f"from the cube's {grid.shape} at {grid.origin_m} in {folder / 'velocity.vti'}; "
                         "give the site used for the inversion with --site")
    velocity = arrays["velocity_m_per_ns"].astype(float)
    ground = arrays["ground"].astype(bool)
    bad = ground & ~(np.isfinite(velocity) & (velocity > 0))
    if bad.any():
        raise InputError(f"{folder / 'velocity.vti'}: {int(bad.sum())} ground cells hold NaN, infinite or "
                         "non-positive velocities; write the cube again with 'voidcube reconstruct invert'")
    rms = (summary.get("misfit") or {}).get("rms_ns")
    if not isinstance(rms, (int, float)) or not math.isfinite(rms) or rms <= 0:
        raise InputError(f"{folder / 'summary.json'}: misfit.rms_ns missing or not > 0; the threshold "
                         "needs the RMS misfit of the inversion; write the folder again")
    surface = _surface_m(grid, site)
    picks = read_pick_times(folder, float(rms))  # reads nodes_used.csv too: its positions serve the pictures
    return InversionFolder(
        path=folder, grid=grid, velocity_m_per_ns=velocity, ray_count=arrays["ray_count"],
        ray_length_m=arrays["ray_length_m"], ground=ground, surface_m=surface, summary=summary,
        site=site, site_path=site_file, path_length_m=_median_path_length_m(folder / "residuals.csv"),
        rms_ns=float(rms), notes=tuple(notes), pick_times=picks,
        nodes_xyz_m=picks.nodes_xyz_m if picks is not None else _read_nodes_used(folder / "nodes_used.csv"))


def find_folder_bodies(data: InversionFolder, void_options=VoidOptions()):
    """The body search of :func:`reconstruct.interpret.bodies.find_voids` on an inversion (no files written)."""
    return find_voids(
        data.grid, data.velocity_m_per_ns, data.ground, data.ray_count, data.surface_m,
        frequency_mhz=data.site.rock.antenna_frequency_mhz, path_length_m=data.path_length_m,
        rms_ns=data.rms_ns, planned_works=data.site.planned_works, options=void_options)


def screen_folder(data: InversionFolder, void_options=VoidOptions(), screening_options=ScreeningOptions()):
    """Find the bodies and rank them (no files written). Returns (analysis, screening entries)."""
    analysis = find_folder_bodies(data, void_options)
    return analysis, screen_voids(analysis.bodies, screening_options, data.site.planned_works)






