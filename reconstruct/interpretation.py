"""From an inversion folder to the void screening: load, find bodies, screen, write.

``reconstruct voids DIR`` reads the folder written by ``reconstruct invert``
(``velocity.vti``, ``summary.json``, ``residuals.csv``, ``nodes_used.csv``,
``manifest.json``) and the site description, then writes into the same
folder:

============================  ==================================================
``voids.csv``, ``voids.json``  the void table (``voids.json`` also holds the
                               threshold and resolution per depth, the hazard
                               ranking, the cautions and the rendering note)
``hazard.csv``                 the ranked screening list with reasons
``interpretation.vti``         the cube with petrophysics, background, anomaly
                               and body ids
``voids.vtp``, ``ground.vtp``  isosurfaces of the bodies (cell array
                               ``body_id``) and the ground surface
``pictures/*.png``             oblique 3D view (when off-screen rendering
                               works) and plan and section slices per void
============================  ==================================================

and appends the run to ``manifest.json``. Inputs are never modified; pictures
of an earlier run that this run did not draw again are removed, so that no
picture outlives its body.

Bad input
---------
Every problem below raises :class:`~reconstruct.errors.InputError` naming
the file and the fix (the README lists the same decisions): FOLDER missing;
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
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import InputError
from .grid import Grid
from .hazard import HAZARD_COLUMNS, SCREENING_NOTE, HazardOptions, screen_voids
from .html_page import CAUTIONS
from .outputs import (
    extend_manifest,
    read_cell_arrays_vti,
    sha256_of_file,
    write_cell_arrays_vti,
    write_csv_atomic,
    write_json_atomic,
)
from .petrophysics import SOIL_FIT_CAUTION, petrophysics_arrays
from .site import Site, load_site
from .voids import STATUS_VOID, VOID_TABLE_COLUMNS, VoidOptions, find_voids, void_table_rows

__all__ = ["InversionFolder", "load_inversion_folder", "screen_folder", "write_void_outputs",
           "read_json_object"]

_CUBE_ARRAYS = ("velocity_m_per_ns", "ray_length_m", "ray_count", "ground")


@dataclass(frozen=True)
class InversionFolder:
    """The pieces of an inversion folder that the void screening needs."""

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


def _find_site(folder: Path, manifest: dict | None) -> Path:
    record = (manifest or {}).get("inputs", {}).get("site") if isinstance(manifest, dict) else None
    if not isinstance(record, dict) or not record.get("path"):
        raise InputError(f"{folder / 'manifest.json'}: no site file recorded; give the site "
                         "description with --site")
    recorded = Path(record["path"])
    candidates = [recorded] if recorded.is_absolute() else [recorded, folder / recorded,
                                                             folder.parent / recorded]
    changed = []
    for candidate in candidates:
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
                                 "'reconstruct invert'")
            lengths = []
            for line, row in enumerate(rows, start=2):
                try:
                    lengths.append(float(row["distance_m"]))
                except (TypeError, ValueError):
                    raise InputError(f"{path}: line {line}: distance_m {row['distance_m']!r} is not a "
                                     "number; write the folder again with 'reconstruct invert'") from None
    except FileNotFoundError:
        raise InputError(f"{path}: file not found; give the folder written by 'reconstruct invert'") from None
    lengths = np.asarray(lengths)
    lengths = lengths[np.isfinite(lengths) & (lengths > 0)]
    if lengths.size == 0:
        raise InputError(f"{path}: no pick with a positive distance; the void screening needs the "
                         "residuals of an inversion")
    return float(np.median(lengths))


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
        raise InputError(f"{folder}: not a folder; give the output folder of 'reconstruct invert'")
    hint = "give the output folder of 'reconstruct invert'"
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
                         "non-positive velocities; write the cube again with 'reconstruct invert'")
    rms = (summary.get("misfit") or {}).get("rms_ns")
    if not isinstance(rms, (int, float)) or not math.isfinite(rms) or rms <= 0:
        raise InputError(f"{folder / 'summary.json'}: misfit.rms_ns missing or not > 0; the threshold "
                         "needs the RMS misfit of the inversion; write the folder again")
    x, y = np.meshgrid(grid.centres_m(0), grid.centres_m(1), indexing="ij")
    surface = np.broadcast_to(np.asarray(site.ground.elevation_m(x, y), dtype=float), x.shape).copy()
    return InversionFolder(
        path=folder, grid=grid, velocity_m_per_ns=velocity, ray_count=arrays["ray_count"],
        ray_length_m=arrays["ray_length_m"], ground=ground, surface_m=surface, summary=summary,
        site=site, site_path=site_file, path_length_m=_median_path_length_m(folder / "residuals.csv"),
        rms_ns=float(rms), nodes_xyz_m=_read_nodes_used(folder / "nodes_used.csv"), notes=tuple(notes))


def screen_folder(data: InversionFolder, void_options=VoidOptions(), hazard_options=HazardOptions()):
    """Find the bodies and rank them (no files written). Returns (analysis, hazard entries)."""
    analysis = find_voids(
        data.grid, data.velocity_m_per_ns, data.ground, data.ray_count, data.surface_m,
        frequency_mhz=data.site.rock.antenna_frequency_mhz, path_length_m=data.path_length_m,
        rms_ns=data.rms_ns, planned_works=data.site.planned_works, options=void_options)
    return analysis, screen_voids(analysis.bodies, hazard_options)


def _csv_value(value):
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.4g}" if abs(value) < 1e-3 else f"{value:.4f}"
    return value


def _remove_stale_pictures(folder: Path, keep) -> None:
    """Remove pictures an earlier run wrote that this run did not, so none outlives its body."""
    if not folder.is_dir():
        return
    for path in folder.glob("*.png"):
        if path not in keep and re.fullmatch(r"view_3d\.png|void_\d+_slices\.png", path.name):
            path.unlink()


def write_void_outputs(data: InversionFolder, analysis, hazard, *, pictures: bool = True,
                       max_pictures: int = 20, parameters: dict, started: str, progress=None) -> dict:
    """Write the void outputs into the inversion folder; returns the content of ``voids.json``."""
    from . import render

    def say(message):
        if progress is not None:
            progress(message)

    out = data.path
    written = []
    rows = void_table_rows(analysis.bodies)
    written.append(write_csv_atomic(out / "voids.csv", VOID_TABLE_COLUMNS,
                                    ([_csv_value(r[c]) for c in VOID_TABLE_COLUMNS] for r in rows)))
    hazard_rows = [{c: getattr(h, c) for c in HAZARD_COLUMNS} for h in hazard]
    written.append(write_csv_atomic(out / "hazard.csv", HAZARD_COLUMNS,
                                    ([_csv_value(r[c]) for c in HAZARD_COLUMNS] for r in hazard_rows)))
    petro = petrophysics_arrays(data.velocity_m_per_ns, data.ground)
    written.append(write_cell_arrays_vti(out / "interpretation.vti", data.grid, {
        "velocity_m_per_ns": data.velocity_m_per_ns,
        **petro,
        "background_velocity_m_per_ns": 1.0 / analysis.background_slowness_ns_per_m,
        "slowness_anomaly_ns_per_m": analysis.anomaly_ns_per_m,
        "body_id": analysis.labels,
        "ray_count": data.ray_count.astype(np.int32),
        "ground": data.ground,
    }))
    say(f"{len(analysis.bodies)} bodies; writing isosurfaces")
    voids_mesh = render.void_surfaces(data.grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)
    ground_mesh = render.ground_surface(data.grid, data.surface_m)
    written.append(render.save_mesh(out / "voids.vtp", voids_mesh))
    written.append(render.save_mesh(out / "ground.vtp", ground_mesh))

    picture_list = []
    rendering = "pictures not requested (--no-pictures)"
    if pictures:
        backend, rendering = render.probe_offscreen_backend()
        say(rendering)
        if backend is not None:
            path = out / "pictures" / "view_3d.png"
            render.render_oblique_view(path, ground_mesh, voids_mesh, nodes_xyz_m=data.nodes_xyz_m,
                                       works=data.site.planned_works, title=data.site.name)
            written.append(path)
            picture_list.append({"file": "pictures/view_3d.png", "body_id": None,
                                 "caption": "Oblique view from above: ground surface (grey), bodies "
                                            "(orange fast, blue slow), nodes (black), planned works "
                                            "(purple)"})
        voids_only = [b for b in analysis.bodies if b.status == STATUS_VOID]
        for body in voids_only[:max_pictures]:
            say(f"slices through body {body.id}")
            png = render.slice_pictures(data.grid, data.velocity_m_per_ns, data.ground, data.ray_count,
                                        analysis.labels, data.surface_m, body)
            name = f"pictures/void_{body.id}_slices.png"
            written.append(render.write_png_atomic(out / name, png))
            picture_list.append({"file": name, "body_id": body.id,
                                 "caption": f"Body {body.id}: plan (top) and east-west section (bottom) "
                                            "through its centroid; velocity (cividis), body outline "
                                            "(vermilion), cells without rays shaded grey"})
        if len(voids_only) > max_pictures:
            rendering += f"; slices drawn for the first {max_pictures} of {len(voids_only)} voids"
    _remove_stale_pictures(out / "pictures", {out / p["file"] for p in picture_list})

    ground_k = petro["relative_permittivity"][data.ground]
    theta = petro["water_content_topp"][data.ground]
    content = {
        "site": data.site.name,
        "inversion_folder": str(data.path),
        "site_file": str(data.site_path),
        "cautions": list(CAUTIONS) + [SCREENING_NOTE, SOIL_FIT_CAUTION],
        "counts": {
            "voids": sum(b.status == STATUS_VOID for b in analysis.bodies),
            "unresolved_indications": sum(b.status != STATUS_VOID for b in analysis.bodies),
        },
        "method": analysis.parameters,
        "depth_slabs": analysis.slabs,
        "bodies": rows,
        "hazard": {"note": SCREENING_NOTE, "options": parameters.get("hazard", {}), "ranked": hazard_rows},
        "petrophysics": {
            "relation": "K = (c/v)^2 (low-loss); theta by Topp et al. (1980)",
            "caution": SOIL_FIT_CAUTION,
            "ground_permittivity_min_median_max": [float(ground_k.min()), float(np.median(ground_k)),
                                                   float(ground_k.max())],
            "ground_cells_with_water_content": int(np.isfinite(theta).sum()),
        },
        "rendering": rendering,
        "pictures": picture_list,
        "notes": list(data.notes) + list(analysis.notes),
    }
    written.append(write_json_atomic(out / "voids.json", content))
    extend_manifest(out, command="reconstruct voids", inputs={
        "site": data.site_path, "velocity": out / "velocity.vti", "summary": out / "summary.json",
        "residuals": out / "residuals.csv"}, parameters=parameters,
        outputs=[str(Path(p).relative_to(out)) for p in written], started=started)
    return content
