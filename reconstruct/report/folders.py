"""Writing results to an output folder: the inversion's cube and tables, the void outputs.

Each file is written atomically (temporary file, then rename); the manifest
comes last, so a folder with a manifest is complete.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np

from reconstruct.interpret.bodies import STATUS_RESOLVED, VOID_TABLE_COLUMNS, void_table_rows
from reconstruct.interpret.detectability import (WEAK_INDICATION_COLUMNS, assess_detectability, detectability_rows,
                                                 weak_indication_rows)
from reconstruct.interpret.folder import InversionFolder
from reconstruct.interpret.refine import REFINED_COLUMNS, refined_table_values
from reconstruct.interpret.screening import RANKING_RULE, SCREENING_COLUMNS, SCREENING_NOTE
from reconstruct.inverse.straight import TomographyRun, run_summary
from reconstruct.io.outputs import (
    build_manifest,
    make_output_folder,
    utc_now_iso,
    write_cell_arrays_vti,
    write_csv_atomic,
    write_json_atomic,
    extend_manifest,
)
from reconstruct.model.petrophysics import SOIL_FIT_CAUTION, petrophysics_arrays
from reconstruct.report import pictures as render
from reconstruct.report.exchange import (BLOCK_CLASSES, stl_precision_m, write_block_model_csv,
                                         write_void_exchange)
from reconstruct.report.html import CAUTIONS

__all__ = ["write_tomography", "write_void_outputs"]


def write_tomography(run: TomographyRun, out_dir, *, inputs: dict, parameters: dict, started: str, command: str,
                     extra_summary: dict | None = None) -> dict:
    """Write the output folder of a run; returns the summary dictionary.

    Files: ``velocity.vti``, ``residuals.csv``, ``time_zero.csv``,
    ``nodes_used.csv``, ``excluded_picks.csv``, ``rejected_picks.csv`` (robust
    runs), ``rays.vtp`` (when the run kept its rays), ``summary.json`` (with
    ``extra_summary`` merged in) and, last, ``manifest.json``. Each is written
    atomically.
    """
    out = make_output_folder(out_dir)
    r = run.result
    grid = run.grid
    slowness = r.slowness_ns_per_m.reshape(grid.shape)
    written = []
    written.append(write_cell_arrays_vti(out / "velocity.vti", grid, {
        "velocity_m_per_ns": 1.0 / slowness,
        "slowness_ns_per_m": slowness,
        "ray_length_m": run.ray_length_m,
        "ray_count": run.ray_count.astype(np.int32),
        "ground": run.ground,
    }))
    ids = run.nodes.ids
    picks = run.picks
    u = run.used
    xyz = run.placement.xyz_m
    dist = np.linalg.norm(xyz[picks.rx[u]] - xyz[picks.tx[u]], axis=1)
    sigma = picks.sigma_ns[u] if picks.sigma_ns is not None else np.full(u.size, np.nan)
    robust = r.robust_weight is not None
    written.append(write_csv_atomic(
        out / "residuals.csv",
        ["input_line", "tx", "rx", "distance_m", "time_ns", "predicted_time_ns", "residual_ns", "sigma_ns"]
        + (["robust_weight"] if robust else []),
        (
            [int(picks.lines[k]), ids[picks.tx[k]], ids[picks.rx[k]], f"{dist[i]:.3f}",
             f"{picks.time_ns[k]:.4f}", f"{r.predicted_ns[i]:.4f}", f"{r.residual_ns[i]:.4f}",
             "" if not np.isfinite(sigma[i]) else f"{sigma[i]:.4f}"]
            + ([f"{r.robust_weight[i]:.4f}"] if robust else [])
            for i, k in enumerate(u)
        ),
    ))
    if robust:
        written.append(write_csv_atomic(
            out / "rejected_picks.csv",
            ["input_line", "tx", "rx", "time_ns", "residual_ns", "sigma_ns", "robust_weight", "reason"],
            ([int(picks.lines[k]), ids[picks.tx[k]], ids[picks.rx[k]], f"{picks.time_ns[k]:.4f}",
              f"{r.residual_ns[i]:.4f}", "" if not np.isfinite(sigma[i]) else f"{sigma[i]:.4f}",
              f"{r.robust_weight[i]:.4f}",
              f"robust {r.robust_loss} weight {r.robust_weight[i]:.3g} below {run.options.rejection_weight:g}: "
              f"residual {r.residual_ns[i]:.2f} ns" + (f" = {abs(r.residual_ns[i]) / sigma[i]:.1f} sigma"
                                                      if np.isfinite(sigma[i]) else "")]
             for i, k in enumerate(u) if r.rejected[i]),
        ))
    n_tx = np.bincount(picks.tx[u], minlength=len(ids))
    n_rx = np.bincount(picks.rx[u], minlength=len(ids))
    drift = r.time_zero_ns[len(ids):]  # the clock-drift model's second block, ns per hour
    written.append(write_csv_atomic(
        out / "time_zero.csv", ["node_id", "time_zero_ns", "picks_as_tx", "picks_as_rx"]
        + (["clock_drift_ns_per_h"] if drift.size else []),
        ([ids[k], f"{r.time_zero_ns[k]:.4f}", int(n_tx[k]), int(n_rx[k])]
         + ([f"{drift[k]:.4f}"] if drift.size else []) for k in range(len(ids))),
    ))
    shift = run.placement.shift_m
    written.append(write_csv_atomic(
        out / "nodes_used.csv",
        ["node_id", "x_m", "y_m", "z_m", "shift_x_m", "shift_y_m", "shift_z_m", "kind", "input_line"],
        ([ids[k], *(f"{v:.4f}" for v in xyz[k]), *(f"{v:.4f}" for v in shift[k]),
          run.nodes.kinds[k] or "", int(run.nodes.lines[k])] for k in range(len(ids))),
    ))
    written.append(write_csv_atomic(
        out / "excluded_picks.csv", ["input_line", "tx", "rx", "time_ns", "reason"],
        ([e.line, e.tx, e.rx, e.time_text, e.reason] for e in run.excluded),
    ))
    if run.polylines is not None:
        from reconstruct.io.outputs import write_rays_vtp

        written.append(write_rays_vtp(
            out / "rays.vtp", run.polylines, tx_ids=[ids[picks.tx[k]] for k in u],
            rx_ids=[ids[picks.rx[k]] for k in u], time_ns=picks.time_ns[u], predicted_time_ns=r.predicted_ns,
            input_lines=picks.lines[u]))
    summary = run_summary(run)
    if robust:
        summary["robust"] = {
            "loss": r.robust_loss, "rejected": int(r.rejected.sum()),
            "rejection_weight": run.options.rejection_weight, "scale_sigmas": r.robust_scale,
            "reweightings": r.robust_reweightings,
            "put_back": "rerun with --robust none to give every pick its full weight",
        }
    summary.update(extra_summary or {})
    written.append(write_json_atomic(out / "summary.json", summary))
    manifest = build_manifest(
        command=command, inputs=inputs, parameters=parameters,
        outputs=[p.name for p in written] + ["manifest.json"], started=started, finished=utc_now_iso(),
    )
    write_json_atomic(out / "manifest.json", manifest)
    return summary


def _csv_value(value):
    if value is None:
        return ""
    if isinstance(value, float):
        return "" if not math.isfinite(value) else f"{value:.4g}" if abs(value) < 1e-3 else f"{value:.4f}"
    return value


def _mine_planning_note(stl_precision: float) -> dict:
    """What ``voids.json`` says about the files for mine-planning software."""
    note = {
        "coordinates": "site coordinates in metres: x east, y north, z elevation",
        "files": {
            "voids.dxf": "each body's surface as 3DFACE triangles on layer body_<body_id>",
            "voids.obj": "each body's surface as object and group body_<body_id>",
            "voids.stl": "the surfaces of all bodies together (binary STL, 32-bit floats)",
            "block_model.csv": "one row per ground cell: centre, size, every array of interpretation.vti, class",
        },
        "block_model_classes": dict(BLOCK_CLASSES),
        "note": "the surfaces are the isosurfaces of voids.vtp, not cautious envelopes",
        "stl_precision_m": stl_precision,
    }
    if stl_precision > 1e-3:
        note["stl_caution"] = (f"voids.stl keeps coordinates this far from 0 only to about {stl_precision:.2g} m "
                               "(STL stores 32-bit floats); use voids.obj or voids.dxf, which keep millimetres")
    return note


def _remove_stale_pictures(folder: Path, keep) -> None:
    """Remove pictures an earlier run wrote that this run did not, so none outlives its body."""
    if not folder.is_dir():
        return
    for path in folder.glob("*.png"):
        if path not in keep and re.fullmatch(r"view_3d\.png|(body|indication)_\d+_slices\.png", path.name):
            path.unlink()


def _slices_caption(name: str, what: str) -> str:
    return (f"{name}: plan (top) and west-east section looking north (bottom) through its centroid, both to "
            f"the same scale. Colour: the velocity, from dark blue (slow) to yellow (fast); the line around the "
            f"{what} in the colour of its fill (orange: air, blue: water or clay); hatched and paled: cells that "
            "no ray crossed; blank: air above the ground.")


def _draw_slices(data: InversionFolder, analysis, detectability, max_pictures: int, written: list, say):
    """Plan and section slices through every body (voids first) and every weak indication, up to
    ``max_pictures`` in all; the files are appended to ``written``. Returns (picture entries, note)."""
    out = data.path
    subjects = [(b, "body", b.body_id, analysis.labels) for b in analysis.bodies]
    subjects += [(w, "weak indication", w.indication_id, detectability.labels) for w in detectability.weak_indications]
    entries = []
    for subject, what, number, labels in subjects[:max_pictures]:
        say(f"slices through {what} {number}")
        png = render.slice_pictures(data.grid, data.velocity_m_per_ns, data.ground, data.ray_count, labels,
                                    data.surface_m, subject, works=data.site.planned_works, what=what, label=number)
        name = f"pictures/{'body' if what == 'body' else 'indication'}_{number}_slices.png"
        written.append(render.write_png_atomic(out / name, png))
        entries.append({"file": name, "body_id": number if what == "body" else None,
                        "indication_id": number if what != "body" else None,
                        "caption": _slices_caption(f"{what[0].upper()}{what[1:]} {number}", what)})
    note = (f"; slices drawn for the first {max_pictures} of {len(subjects)} bodies and weak indications"
            if len(subjects) > max_pictures else "")
    return entries, note


def _draw_pictures(data: InversionFolder, analysis, detectability, ground_mesh, voids_mesh, max_pictures: int,
                   written: list, say):
    """The 3D view (when off-screen rendering works) and the slices through each body and weak
    indication (:func:`_draw_slices`); the files are appended to ``written``. Returns (the picture
    list of voids.json, the rendering note)."""
    out = data.path
    picture_list = []
    backend, rendering = render.probe_offscreen_backend()
    say(rendering)
    if backend is not None:
        path = out / "pictures" / "view_3d.png"
        key = render.render_oblique_view(path, ground_mesh, voids_mesh, nodes_xyz_m=data.nodes_xyz_m,
                                         works=data.site.planned_works, zones=data.site.exclusion_zones,
                                         title=data.site.name)
        written.append(path)
        picture_list.append({"file": "pictures/view_3d.png", "body_id": None, "indication_id": None,
                             "caption": "Oblique view from the south-west, from above: " + "; ".join(key)
                                        + ". Axes in metres; the arrow points north."})
    slices, note = _draw_slices(data, analysis, detectability, max_pictures, written, say)
    return picture_list + slices, rendering + note


def write_void_outputs(data: InversionFolder, analysis, screening, *, pictures: bool = True,
                       max_pictures: int = 20, parameters: dict, started: str, progress=None,
                       detectability=None) -> dict:
    """Write the void outputs into the inversion folder; returns the content of ``voids.json``.

    ``detectability`` is the :func:`reconstruct.interpret.detectability.assess_detectability`
    of ``analysis`` (computed here when not given): weak indications (``weak_indications.csv``
    and key ``weak_indications``), the ``detectability`` of each planned work, its
    ``detectability_method`` and the ``threshold_override`` record.
    """
    def say(message):
        if progress is not None:
            progress(message)

    out = data.path
    written = []
    rows = void_table_rows(analysis.bodies)
    csv_rows = [{**row, **refined_table_values(body)} for row, body in zip(rows, analysis.bodies)]
    columns = VOID_TABLE_COLUMNS + REFINED_COLUMNS
    written.append(write_csv_atomic(out / "voids.csv", columns,
                                    ([_csv_value(r[c]) for c in columns] for r in csv_rows)))
    if detectability is None:
        detectability = assess_detectability(data, analysis)
    weak_rows = weak_indication_rows(detectability.weak_indications)
    written.append(write_csv_atomic(out / "weak_indications.csv", WEAK_INDICATION_COLUMNS,
                                    ([_csv_value(r[c]) for c in WEAK_INDICATION_COLUMNS] for r in weak_rows)))
    screening_rows = [{c: getattr(e, c) for c in SCREENING_COLUMNS} for e in screening]
    written.append(write_csv_atomic(out / "screening.csv", SCREENING_COLUMNS,
                                    ([_csv_value(r[c]) for c in SCREENING_COLUMNS] for r in screening_rows)))
    petro = petrophysics_arrays(data.velocity_m_per_ns, data.ground)
    cube = {
        "velocity_m_per_ns": data.velocity_m_per_ns,
        **petro,
        "background_velocity_m_per_ns": 1.0 / analysis.background_slowness_ns_per_m,
        "slowness_anomaly_ns_per_m": analysis.anomaly_ns_per_m,
        "body_id": analysis.labels,
        "ray_count": data.ray_count.astype(np.int32),
        "ground": data.ground,
    }
    written.append(write_cell_arrays_vti(out / "interpretation.vti", data.grid, cube))
    say(f"{len(analysis.bodies)} bodies; writing isosurfaces")
    voids_mesh = render.void_surfaces(data.grid, analysis.labels, analysis.anomaly_ns_per_m, analysis.bodies)
    ground_mesh = render.ground_surface(data.grid, data.surface_m)
    written.append(render.save_mesh(out / "voids.vtp", voids_mesh))
    written.append(render.save_mesh(out / "ground.vtp", ground_mesh))
    say("writing the bodies and the block model for mine planning")
    written.extend(write_void_exchange(out, voids_mesh, title=data.site.name))
    written.append(write_block_model_csv(out / "block_model.csv", data.grid, cube, analysis.bodies))

    picture_list, rendering = [], "pictures not requested (--no-pictures)"
    if pictures:
        picture_list, rendering = _draw_pictures(data, analysis, detectability, ground_mesh, voids_mesh,
                                                 max_pictures, written, say)
    _remove_stale_pictures(out / "pictures", {out / p["file"] for p in picture_list})

    ground_k = petro["relative_permittivity"][data.ground]
    theta = petro["water_content_topp"][data.ground]
    content = {
        "site": data.site.name,
        "inversion_folder": str(data.path),
        "site_file": str(data.site_path),
        "cautions": list(CAUTIONS) + [SCREENING_NOTE, SOIL_FIT_CAUTION],
        "counts": {
            "resolved": sum(b.status == STATUS_RESOLVED for b in analysis.bodies),
            "unresolved": sum(b.status != STATUS_RESOLVED for b in analysis.bodies),
            "weak_indications": len(detectability.weak_indications),
        },
        "threshold_override": detectability.threshold_override.as_dict(),
        "method": analysis.parameters,
        "depth_slabs": analysis.slabs,
        "bodies": rows,
        "weak_indications": weak_rows,
        "detectability": detectability_rows(detectability),
        "detectability_method": detectability.method,
        "screening": {"note": SCREENING_NOTE, "rule": RANKING_RULE, "options": parameters.get("screening", {}),
                      "ranked": screening_rows},
        "petrophysics": {
            "relation": "K = (c/v)^2 (low-loss); theta by Topp et al. (1980)",
            "caution": SOIL_FIT_CAUTION,
            "ground_permittivity_min_median_max": [float(ground_k.min()), float(np.median(ground_k)),
                                                   float(ground_k.max())],
            "ground_cells_with_water_content": int(np.isfinite(theta).sum()),
        },
        "mine_planning": _mine_planning_note(stl_precision_m(voids_mesh)),
        "rendering": rendering,
        "pictures": picture_list,
        "notes": list(data.notes) + list(analysis.notes) + list(detectability.notes),
    }
    written.append(write_json_atomic(out / "voids.json", content))
    drawings = {f"planned_works_dxf[{i}]": d.path for i, d in enumerate(data.site.planned_works_dxf)}
    extend_manifest(out, command="voidcube reconstruct voids", inputs={
        "site": data.site_path, **drawings, "velocity": out / "velocity.vti", "summary": out / "summary.json",
        "residuals": out / "residuals.csv"}, parameters=parameters,
        outputs=[str(Path(p).relative_to(out)) for p in written], started=started)
    return content
