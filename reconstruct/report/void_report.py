"""The void report: one self-contained HTML page for the safety officer.

``voidcube reconstruct report DIR`` reads the outputs of ``voidcube reconstruct invert`` and
``voidcube reconstruct voids`` in DIR and writes ``DIR/report.html``: the cautions at
the top, the ranked screening list, the void table, an interactive 3D view
(:mod:`reconstruct.report.scene_3d`; its script embedded), the pictures
(embedded as PNG, so the page opens with no network and no software of ours), the
data-quality and resolution summary, and the run manifest. Every piece of
text that comes from an input (site name, planned-work names, paths) is
escaped by :mod:`reconstruct.report.html`.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from reconstruct.errors import InputError
from reconstruct.report.html import escape, hole_deviation_html, html_document, png_img_html, table_html
from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, STATUS_RESOLVED
from reconstruct.interpret.folder import read_json_object
from reconstruct.io.outputs import extend_manifest, utc_now_iso, write_text_atomic
from reconstruct.report.scene_3d import scene_html

__all__ = ["build_report_html", "write_report"]

#: Words for the fill classes (column ``fill``) on the page.
FILL_WORDS = {FILL_AIR: "air-filled (faster than the rock)",
              FILL_WATER_OR_CLAY: "water- or clay-filled (slower than the rock)"}

_VOID_COLUMNS = (
    ("body_id", "body"), ("fill", "likely fill"), ("volume_m3", "volume (m³)"),
    ("centroid_x_m", "centre x (m)"), ("centroid_y_m", "centre y (m)"), ("centroid_z_m", "centre z (m)"),
    ("roof_depth_m", "roof depth (m)"), ("roof_thickness_m", "roof thickness to the ground (m)"),
    ("roof_below_work_m", "roof below the planned work above (m)"), ("nearest_work", "nearest planned work"),
    ("standoff_m", "stand-off from it (m)"), ("span_m", "span (m)"),
    ("extreme_velocity_m_per_ns", "extreme velocity (m/ns)"),
    ("ray_covered_fraction", "its cells crossed by rays (%)"),
    ("confidence", "confidence"), ("confidence_reason", "why"),
)

#: Fractions (0..1) shown as percentages.
_PERCENT_KEYS = ("ray_covered_fraction", "fraction_of_ground_with_rays")

_SCREENING_COLUMNS = (
    ("rank", "rank"), ("body_id", "body"), ("fill", "likely fill"), ("confidence", "confidence"),
    ("thinnest_roof_m", "thinnest roof (m)"), ("width_m", "width (m)"), ("span_m", "span (m)"),
    ("standoff_m", "stand-off (m)"), ("scaled_span_m", "scaled span (m)"),
    ("critical_span_m", "critical span (m)"), ("reasons", "reasons"),
)


def _value(row: dict, key: str):
    value = row.get(key)
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    if key == "fill":
        return FILL_WORDS.get(value, value)
    if key in _PERCENT_KEYS and isinstance(value, (int, float)):
        return 100.0 * value
    return value


def _text(value) -> str:
    """A value for a text cell: numbers with four significant digits."""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _rows(records, columns):
    return [[_value(r, key) for key, _ in columns] for r in records]


def _table_or_none(columns, records, caption):
    """The table of ``records``, or a line saying there are none."""
    if not records:
        return f"<p><b>{escape(caption)}:</b> none.</p>"
    return table_html([label for _, label in columns], _rows(records, columns), float_format=".3g",
                      caption=caption)


def _body_table(row: dict) -> str:
    """One body's row of the void table, with its status (shown when the body is chosen in the 3D view)."""
    columns = (_VOID_COLUMNS[0], ("status", "status")) + _VOID_COLUMNS[1:]
    return _table_or_none(columns, [row], f"Body {row.get('body_id')}")


def _quality_section(summary: dict, voids: dict) -> str:
    misfit = summary.get("misfit", {})
    picks = summary.get("picks", {})
    coverage = summary.get("coverage", {})
    lam = summary.get("lambda", {})
    velocity = summary.get("velocity_m_per_ns", {})
    method = voids.get("method", {})
    chi = misfit.get("chi2_per_pick")
    rows = [
        ["picks inverted / rows read", f"{picks.get('inverted', '-')} / {picks.get('rows_read', '-')}"],
        ["picks excluded", _value(picks, "excluded")],
        ["RMS misfit (ns)", _value(misfit, "rms_ns")],
        ["chi-square per pick (near 1 when sigmas are right)", "-" if chi is None else chi],
        ["smoothing lambda and how it was chosen", f"{_text(_value(lam, 'smoothing'))} ({_value(lam, 'method')})"],
        ["ground cells crossed by rays (%)", _value(coverage, "fraction_of_ground_with_rays")],
        ["ground velocity min / median / max (m/ns)",
         " / ".join(_text(_value(velocity, k)) for k in ("ground_min", "ground_median", "ground_max"))],
        ["cells clipped at the velocity band", f"{_value(velocity, 'cells_clipped_at_min')} slow, "
                                               f"{_value(velocity, 'cells_clipped_at_max')} fast"],
        ["detection threshold rule", _value(method, "threshold_rule")],
        ["robust spread of the anomaly (ns/m)", _value(method, "sigma_model_ns_per_m")],
        ["detection threshold in robust standard deviations", _value(method, "threshold_sigmas")],
        ["median transmitter-receiver distance (m)", _value(method, "path_length_m")],
        ["antenna frequency (MHz)", _value(method, "frequency_mhz")],
        ["resolution rule", _value(method, "resolution_rule")],
        ["body extent rule", _value(method, "extent_rule")],
    ]
    slabs = voids.get("depth_slabs", [])
    slab_rows = [[s.get("depth_from_m"), s.get("depth_to_m"), s.get("background_velocity_m_per_ns"),
                  s.get("resolution_m"), s.get("threshold_ns_per_m"), s.get("cells_in_median")]
                 for s in slabs[::max(1, len(slabs) // 12)]]
    return (
        "<h2>Data quality and resolution</h2>"
        + table_html(["quantity", "value"], rows, float_format=".4g")
        + "<p>Background, resolution and threshold by depth below the ground surface "
          "(every few slabs; all slabs in voids.json):</p>"
        + table_html(["depth from (m)", "depth to (m)", "background v (m/ns)", "resolution (m)",
                      "threshold (ns/m)", "cells in median"], slab_rows, float_format=".4g")
    )


def _fit_warning_html(summary: dict) -> str:
    """A visible warning when the model does not explain the picks to their
    uncertainties, or when clipping into the velocity band raised the misfit."""
    words = []
    fit = summary.get("fit") or {}
    if fit.get("target_reached") is False:
        words.append(str(fit.get("words", "")))
    clipping = summary.get("clipping") or {}
    if clipping.get("warning"):
        words.append(str(clipping.get("words", "")))
    if not words:
        return ""
    # framed like the cautions (the page's own style, reconstruct.report.colours)
    return ('<div class="cautions"><h2>Warning: the fit</h2>'
            + "".join(f"<p>{escape(w)}</p>" for w in words) + "</div>")


def build_report_html(folder, *, summary: dict | None = None, voids: dict | None = None,
                      manifest: dict | None = None) -> str:
    """The report page for an output folder (nothing written).

    ``summary``, ``voids`` and ``manifest`` may be given in memory (as
    :func:`reconstruct.pipeline.write_processing` returns them); those not
    given are read from ``summary.json``, ``voids.json`` and ``manifest.json``
    in ``folder``. The pictures are read from ``folder``.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder; give the output folder of 'voidcube reconstruct invert'")
    hint = "give the output folder of 'voidcube reconstruct invert'"
    summary = summary if summary is not None else read_json_object(folder / "summary.json", hint)
    voids = voids if voids is not None else read_json_object(
        folder / "voids.json", f"run 'voidcube reconstruct voids {folder}' first")
    manifest = manifest if manifest is not None else read_json_object(folder / "manifest.json", hint)
    counts = voids.get("counts", {})
    parts = [_fit_warning_html(summary)] + [
        f"<p><b>Site:</b> {escape(voids.get('site', summary.get('site', '-')))}<br>"
        f"<b>Folder:</b> {escape(folder)}<br><b>Written:</b> {escape(utc_now_iso())}</p>",
        f"<h2>Summary</h2><p>{int(counts.get('resolved', 0))} void(s) (resolved bodies) and "
        f"{int(counts.get('unresolved', 0))} indication(s) (unresolved bodies: smaller than the "
        "resolution at their depth). A body is a group of cells whose velocity departs from the "
        "background by more than the detection threshold; a void is a place to drill, not a proven "
        "cavity.</p>",
    ]
    screening = voids.get("screening", {})
    ranked = screening.get("ranked", [])
    resolved = [r for r in ranked if r.get("status") == STATUS_RESOLVED]
    unresolved = [r for r in ranked if r.get("status") != STATUS_RESOLVED]
    parts.append("<h2>Screening: which to check first</h2>"
                 f"<p>{escape(screening.get('note', ''))}</p>"
                 "<p>Thinnest roof: the rock above the body to the ground surface or to a planned work "
                 "over it, whichever is thinner. Width: across the body in plan; span: its largest "
                 "horizontal width; stand-off: its distance to the nearest planned work.</p>"
                 + _table_or_none(_SCREENING_COLUMNS, resolved, "Voids (resolved bodies)")
                 + "<p>Indications (unresolved bodies): smaller than the resolution at their depth, so their "
                   "size and contrast are not known; those near planned works still deserve a probe hole.</p>"
                 + _table_or_none(_SCREENING_COLUMNS, unresolved, "Indications (unresolved bodies)"))
    parts.append("<h2>Void table</h2><p>Voids (resolved bodies) only; every body, with bounding boxes and "
                 "more columns, is in voids.csv.</p>"
                 + _table_or_none(_VOID_COLUMNS, [b for b in voids.get("bodies", [])
                                                  if b.get("status") == STATUS_RESOLVED], "Voids"))
    parts.append("<h2>3D view</h2>" + scene_html(folder, voids, body_table=_body_table))
    pictures = []
    for picture in voids.get("pictures", []):
        path = folder / str(picture.get("file", ""))
        try:
            png = path.read_bytes()
        except OSError:
            pictures.append(f"<p>Picture {escape(picture.get('file'))} is missing; run "
                            f"'voidcube reconstruct voids' again.</p>")
            continue
        pictures.append(png_img_html(png, alt=str(picture.get("caption", "")),
                                     caption=str(picture.get("caption", ""))))
    parts.append(f"<h2>Pictures</h2><p>{escape(voids.get('rendering', ''))}</p>" + "".join(pictures))
    petro = voids.get("petrophysics", {})
    parts.append(f"<h2>Petrophysics</h2><p>{escape(petro.get('relation', ''))}. "
                 f"{escape(petro.get('caution', ''))} The cell arrays are in interpretation.vti.</p>")
    parts.append(_quality_section(summary, voids))
    positions = summary.get("node_positions") or {}
    parts.append(hole_deviation_html(positions.get("holes_with_survey", []), positions.get("nodes_from_surveys")))
    notes = voids.get("notes", [])
    if notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ul>")
    parts.append("<h2>Manifest</h2><p>Inputs with their SHA-256, parameters and versions of every run "
                 "on this folder.</p><pre>" + escape(json.dumps(manifest, indent=2)) + "</pre>")
    title = f"Void screening report: {voids.get('site', summary.get('site', ''))}"
    return html_document(title, "".join(parts), generated_by="voidcube reconstruct report")


def write_report(folder, *, started: str | None = None, summary: dict | None = None,
                 voids: dict | None = None) -> Path:
    """Write ``report.html`` into ``folder`` atomically and record the run in the manifest.

    ``summary`` and ``voids`` may be given in memory (see :func:`build_report_html`).
    """
    folder = Path(folder)
    started = started or utc_now_iso()
    page = build_report_html(folder, summary=summary, voids=voids)
    path = write_text_atomic(folder / "report.html", page)
    extend_manifest(folder, command="voidcube reconstruct report",
                    inputs={"summary": folder / "summary.json", "voids": folder / "voids.json"},
                    parameters={}, outputs=["report.html"], started=started)
    return path
