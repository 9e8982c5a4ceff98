"""The void report: one self-contained HTML page for the safety officer.

``voidcube reconstruct report DIR`` reads the outputs of ``voidcube reconstruct invert`` and
``voidcube reconstruct voids`` in DIR and writes ``DIR/report.html``. The page
opens with how well the model explains the picks (the fit, the forward model,
the ray coverage; a warning in words when the fit falls short) and any change
the user made to the detection threshold; then the cautions; then every body
and indication in one ranked table, how small a void each planned work's
zone could hide, the bodies' fitted sizes with their bounds, and (demo only)
the check against the invented truth; then the void table, an interactive 3D
view (:mod:`reconstruct.report.scene_3d`; its script embedded), the pictures
(embedded as PNG, so the page opens with no network and no software of
ours), the data-quality and resolution figures, and a short provenance table
with a link to ``manifest.json``. Every piece of text that comes from an
input (site name, planned-work names, paths) is escaped by
:mod:`reconstruct.report.html`.

Keys that the screening, detectability and refinement steps add to
``voids.json`` are shown from the keys present: known keys with their words
(:data:`LABELS`), others as words made from the key.
"""

from __future__ import annotations

import csv
import math
import statistics
from pathlib import Path

from reconstruct.errors import InputError
from reconstruct.interpret.bodies import FILL_AIR, FILL_WATER_OR_CLAY, STATUS_RESOLVED
from reconstruct.interpret.folder import read_json_object
from reconstruct.io.outputs import extend_manifest, utc_now_iso, write_text_atomic
from reconstruct.report.html import escape, hole_deviation_html, html_document, png_img_html, table_html
from reconstruct.report.run_record import provenance_html
from reconstruct.report.scene_3d import scene_html
from reconstruct.report.truth_check import TRUTH_CHECK_FILE, truth_check_html

__all__ = ["build_report_html", "write_report", "LABELS", "label_for", "cell_value"]

#: Words for the fill classes (column ``fill``) on the page.
FILL_WORDS = {FILL_AIR: "air-filled (faster than the rock)",
              FILL_WATER_OR_CLAY: "water- or clay-filled (slower than the rock)"}

#: Words for the tiers (column ``status``) in the ranked table.
STATUS_WORDS = {STATUS_RESOLVED: "void", "unresolved": "indication (below the resolution)",
                "weak": "weak indication (below the threshold)"}

#: Words for the keys the page shows; a key not here is shown as words made from it (:func:`label_for`).
LABELS = {
    "rank": "rank", "body_id": "body", "status": "status", "fill": "likely fill", "confidence": "confidence",
    "nearest_work": "nearest planned work", "standoff_m": "stand-off (m)",
    "thinnest_roof_m": "thinnest roof (m)", "roof_thickness_m": "roof thickness to the ground (m)",
    "roof_below_work_m": "roof below the planned work above (m)", "roof_depth_m": "roof depth (m)",
    "span_m": "span (m)", "width_m": "width (m)", "length_m": "length (m)",
    "thinnest_roof_to_width": "thinnest roof over width", "scaled_span_m": "scaled span (m)",
    "critical_span_m": "critical span (m)", "concerns": "concerns", "reasons": "reasons",
    "volume_m3": "volume (m³)", "centroid_x_m": "centre x (m)", "centroid_y_m": "centre y (m)",
    "centroid_z_m": "centre z (m)", "extreme_velocity_m_per_ns": "extreme velocity (m/ns)",
    "ray_covered_fraction": "its cells crossed by rays (%)", "confidence_reason": "why",
    "cautious_roof_m": "roof, thinnest plausible (m)", "cautious_span_m": "span, widest plausible (m)",
    "crown_fos": "crown FoS", "crown_class": "class (Carter 2014)",
    "cautious_standoff_m": "stand-off, least plausible (m)", "nearest_hole_m": "nearest blast hole (m)",
    "indication_id": "indication",
    "holes_met": "blast holes near it", "strength": "strength",
    "covered_fraction": "zone crossed by rays (%)", "not_covered_fraction": "zone not crossed by rays (%)",
    "work": "planned work", "smallest_air_void_m3": "smallest air-filled void it would show (m³)",
    "smallest_slow_body_m3": "smallest slow body it would show (m³)", "velocity_m_per_ns": "velocity (m/ns)",
    "semi_axes_m": "semi-axes (m)", "centre_m": "centre (m)", "chi2_per_pick": "chi-square per pick",
}

#: Units of the key endings (longest first), for labels made from keys and for estimates.
_UNITS = (("_m_per_ns", "m/ns"), ("_ns_per_m", "ns/m"), ("_m3", "m³"), ("_deg", "°"), ("_ns", "ns"),
          ("_db", "dB"), ("_m", "m"), ("_fraction", "%"))

_VOID_COLUMNS = ("body_id", "fill", "volume_m3", "centroid_x_m", "centroid_y_m", "centroid_z_m", "roof_depth_m",
                 "roof_thickness_m", "roof_below_work_m", "nearest_work", "standoff_m", "span_m",
                 "extreme_velocity_m_per_ns", "ray_covered_fraction", "confidence", "confidence_reason")

#: Floating-point noise: figures smaller than this print as 0 (lengths in m, volumes in m^3).
_NOISE = 1e-9

#: Keys of ``screening.ranked`` left out of the page's table (all are in screening.csv): the two
#: roofs whose thinner is ``thinnest_roof_m``, the plan length, and the tallies behind the order.
_RANKED_ONLY_IN_CSV = ("roof_thickness_m", "roof_below_work_m", "length_m", "thinnest_roof_to_width", "concerns",
                       "tier", "standoff_m", "thinnest_roof_m", "width_m", "cautious_width_m", "cautious_length_m",
                       "extent_at_least", "bounds", "crown_assessment", "nearest_hole_m", "critical_span_m",
                       "holes_met")

#: Shown first, in this order, in the ranked table; other keys follow in their own order, reasons last.
_RANKED_FIRST = ("rank", "body_id", "indication_id", "status", "fill", "confidence", "nearest_work",
                 "cautious_standoff_m", "cautious_roof_m", "span_m", "cautious_span_m", "scaled_span_m",
                 "crown_fos", "crown_class")


def label_for(key: str) -> str:
    """Words for a key: :data:`LABELS`, else the key in words with its unit ("roof_gap_m" -> "roof gap (m)")."""
    if key in LABELS:
        return LABELS[key]
    for ending, unit in _UNITS:
        if key.endswith(ending) and len(key) > len(ending):
            return f"{key[:-len(ending)].replace('_', ' ')} ({unit})"
    return key.replace("_", " ")


def _is_estimate(value) -> bool:
    return isinstance(value, dict) and "value" in value and ("low95" in value or "high95" in value)


def _bound(value, default: float) -> float:
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else default


#: Key words of the sizes that a slow body's lower bound makes "at least" (extents) or "at most" (roofs).
_EXTENT_WORDS = ("volume", "span", "width", "length", "diameter", "semi_ax", "radius", "extent")


def _digits(unit: str, centre: float) -> int:
    if unit == "m³":
        return 0 if abs(centre) >= 100 else 1
    return {"m/ns": 3, "%": 0, "": 2}.get(unit, 1)


def estimate_words(value: dict, unit: str, *, key: str = "", lower_bound: bool = False) -> str:
    """An estimate of ``voids.json`` (:meth:`reconstruct.interpret.estimates.Estimate.as_dict`: None for a non-finite figure) in words,
    as :meth:`~reconstruct.interpret.estimates.Estimate.words` writes it: "12.3 m (95 %: 10.1-14.6 m)"; "at least 12.3 m" for an open
    upper end or, with ``lower_bound`` (a slow body seen only in part), for an extent; "at most" for
    an open lower end or, with ``lower_bound``, for a roof (the body may reach higher)."""
    centre = _bound(value.get("value"), math.nan)
    if not math.isfinite(centre):
        return "-"
    low, high = _bound(value.get("low95"), -math.inf), _bound(value.get("high95"), math.inf)
    form = f"{{:.{_digits(unit, centre)}f}}"
    suffix = f" {unit}" if unit else ""
    extent = any(word in key for word in _EXTENT_WORDS)
    if (lower_bound and extent) or (math.isfinite(low) and not math.isfinite(high)):
        return f"at least {form.format(min(low, centre) if math.isfinite(low) else centre)}{suffix}"
    if (lower_bound and "roof" in key) or (math.isfinite(high) and not math.isfinite(low)):
        return f"at most {form.format(max(high, centre) if math.isfinite(high) else centre)}{suffix}"
    if not (math.isfinite(low) and math.isfinite(high)):
        return f"{form.format(centre)}{suffix} (no bounds)"
    return f"{form.format(centre)}{suffix} (95 %: {form.format(low)}-{form.format(high)}{suffix})"


def _unit_of(key: str) -> str:
    return next((unit for ending, unit in _UNITS if key.endswith(ending)), "")


def cell_value(key: str, value):
    """A value of ``voids.json`` for a table cell: numbers stay numbers (formatted by the table),
    fractions become percentages, estimates and lists become words, missing figures "-"."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    if isinstance(value, float) and abs(value) < _NOISE:
        return 0.0
    if key == "fill":
        return FILL_WORDS.get(value, value)
    if isinstance(value, bool):
        return "yes" if value else "no"
    if _is_estimate(value):
        return estimate_words(value, _unit_of(key), key=key)
    if (key.endswith("_fraction") or key == "ray_covered_fraction") and isinstance(value, (int, float)):
        return 100.0 * value
    if isinstance(value, (list, tuple)):
        return ", ".join(_text(cell_value(key, v)) for v in value) or "none"
    if isinstance(value, dict):
        return "; ".join(f"{label_for(k)}: {_text(cell_value(k, v))}" for k, v in value.items())
    return value


def _text(value) -> str:
    """A value for a text cell: numbers with four significant digits."""
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def _generic_table(records, keys, caption: str | None = None) -> str:
    """A table of ``records`` with a column per key (words from :func:`label_for`)."""
    rows = [[cell_value(k, r.get(k)) for k in keys] for r in records]
    return '<div class="wide">' + table_html([label_for(k) for k in keys], rows, float_format=".3g",
                                              caption=caption) + "</div>"


def _cell_html(value) -> str:
    """One cell as :func:`reconstruct.report.html.table_html` writes it: numbers right, text left."""
    if isinstance(value, float):
        return f"<td>{escape(format(value, '.3g'))}</td>"
    if isinstance(value, int) and not isinstance(value, bool):
        return f"<td>{value}</td>"
    return f'<td class="text">{escape(value)}</td>'


def _ranked_table(ranked, keys) -> str:
    """The ranked table: one row of figures per body or indication, and below it, across the whole
    table, its reasons in words (so that the figures stay narrow on a laptop screen)."""
    head = "".join(f"<th>{escape('tier' if k == 'status' else label_for(k))}</th>" for k in keys)
    body = []
    for record in ranked:
        body.append("<tr>" + "".join(_cell_html(_in_short(k, cell_value(k, record.get(k)))) for k in keys)
                    + "</tr>")
        if record.get("reasons"):
            body.append(f'<tr><td class="text" colspan="{len(keys)}"><b>Why:</b> '
                        f"{escape(record['reasons'])}</td></tr>")
    return (f'<div class="wide"><table><thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def _in_short(key: str, value):
    """The ranked table's words: the tier (void or indication) for the status, the fill without
    its explanation (the reasons below say faster or slower)."""
    if key == "status":
        return STATUS_WORDS.get(value, str(value).replace("_", " "))
    return value.split(" (")[0] if key == "fill" and isinstance(value, str) else value


def _keys_in_order(records, first=(), last=(), skip=()) -> list[str]:
    """Keys present in any record: ``first`` ones in that order, then the others as met, ``last`` at the end."""
    present: list[str] = []
    for record in records:
        present += [k for k in record if k not in present]
    middle = [k for k in present if k not in first and k not in last and k not in skip]
    return [k for k in first if k in present] + middle + [k for k in last if k in present]


def _pick_sigma_ns(folder: Path) -> float | None:
    """Median pick uncertainty (``sigma_ns`` of ``residuals.csv``), ns; None when not there."""
    try:
        with open(folder / "residuals.csv", newline="", encoding="utf-8") as handle:
            values = [float(row["sigma_ns"]) for row in csv.DictReader(handle) if row.get("sigma_ns") not in (None, "")]
    except (OSError, KeyError, ValueError):
        return None
    values = [v for v in values if math.isfinite(v) and v > 0]
    return statistics.median(values) if values else None


def _forward_model_words(summary: dict) -> str:
    rays = summary.get("rays")
    if rays == "bent":
        bent = summary.get("bent_rays") or {}
        return (f"bent rays, {bent.get('iterations', '-')} iteration(s) after a straight-ray start; "
                f"stopped: {bent.get('stop_reason', '-')}")
    if rays == "straight":
        return "straight rays (a first look: waves bend around fast and slow bodies)"
    return "not recorded in summary.json"


def _fit_rows(summary: dict, pick_sigma_ns: float | None) -> list[list]:
    """The fit's figures, as (words, value) pairs."""
    fit = summary.get("fit") or summary.get("misfit") or {}
    chi, rms = fit.get("chi2_per_pick"), fit.get("rms_ns")
    picks = summary.get("picks", {})
    if isinstance(rms, (int, float)) and pick_sigma_ns:
        rms_words = (f"{rms:.3g} ns against a median pick uncertainty of {pick_sigma_ns:.3g} ns "
                     f"({rms / pick_sigma_ns:.2g} times)")
    else:
        rms_words = "-" if rms is None else f"{rms:.3g} ns (the picks carry no uncertainties)"
    covered = (summary.get("coverage") or {}).get("fraction_of_ground_with_rays")
    clipping = summary.get("clipping") or {}
    return [
        ["chi-square per pick", "not judged: the picks carry no uncertainties" if chi is None
         else f"{chi:.3g} (target 1)"],
        ["RMS misfit", rms_words],
        ["picks inverted / rows read", f"{picks.get('inverted', '-')} / {picks.get('rows_read', '-')}"],
        ["forward model", _forward_model_words(summary)],
        ["ground cells crossed by rays", "-" if covered is None else f"{100 * covered:.1f} %"],
        ["cells clipped into the velocity band", str(clipping.get("cells_clipped", "-"))],
    ]


def _fit_html(folder: Path, summary: dict) -> str:
    """The top of the page: how well the model explains the picks, in figures and words, with a
    framed warning when it does not (discrepancy principle, target chi^2 = N) or when clipping
    into the velocity band raised the misfit."""
    fit = summary.get("fit") or {}
    warnings = []
    if fit.get("target_reached") is False:
        warnings.append(str(fit.get("words", "")).removeprefix("Warning: "))
    clipping = summary.get("clipping") or {}
    if clipping.get("warning"):
        warnings.append(str(clipping.get("words", "")).removeprefix("Warning: "))
    figures = " &middot; ".join(f"<b>{escape(words)}:</b> {escape(value)}"
                                for words, value in _fit_rows(summary, _pick_sigma_ns(folder)))
    if warnings:
        verdict = ('<div class="warning"><b>Warning: the model does not explain the data.</b> '
                   + " ".join(escape(w[:1].upper() + w[1:]) for w in warnings) + "</div>")
    else:
        verdict = f"<p>{escape(fit.get('words', 'The fit is not recorded in summary.json.'))}</p>"
    return f'<section class="fit"><h2>How well the model explains the picks</h2>{verdict}<p>{figures}</p></section>'


def _threshold_override_html(voids: dict) -> str:
    """Framed, on the first screen, when the user changed the detection threshold."""
    override = voids.get("threshold_override")
    if not override or (isinstance(override, dict) and override.get("overridden") is False):
        return ""
    words = str((override.get("words") if isinstance(override, dict) else override) or "")
    return ('<div class="warning"><b>The detection threshold was changed by the user.</b> '
            f"{escape(words[:1].upper() + words[1:])}</div>")


def _ranked_html(voids: dict) -> str:
    """Every body and indication in one table, in the screening's order, with the rule in words."""
    counts = voids.get("counts", {})
    screening = voids.get("screening", {})
    ranked = [r for r in screening.get("ranked", []) if isinstance(r, dict)]
    weak = (f", {int(counts['weak_indications'])} weak indication(s) (below the detection threshold)"
            if "weak_indications" in counts else "")
    parts = [f"<h2>Bodies and indications, ranked</h2><p>{int(counts.get('resolved', 0))} void(s), "
             f"{int(counts.get('unresolved', 0))} unresolved bod(ies) (below the resolution){weak}; most urgent "
             "first, by the rule under the table. A void is a place to drill, not a proven cavity.</p>"]
    if ranked:
        keys = _keys_in_order(ranked, first=_RANKED_FIRST, skip=_RANKED_ONLY_IN_CSV + ("reasons",))
        parts.append(_ranked_table(ranked, keys))
    else:
        parts.append("<p><b>No body passed the detection threshold.</b> This is not proof that the ground holds "
                     "no void: see how small a void each planned work's zone could hide, and which part of it "
                     "no ray crossed.</p>")
    if screening.get("rule"):
        parts.append(f"<p><b>Ranking rule:</b> {escape(screening['rule'])}</p>")
    if screening.get("note"):
        parts.append(f"<p>{escape(screening['note'])}</p>")
    parts.append("<p>A body is a group of cells whose velocity departs from the background by more than the "
                 "detection threshold. Thinnest roof: the rock above the body to the ground surface or to a "
                 "planned work over it, whichever is thinner. Width: across the body in plan; span: its largest "
                 "horizontal width; stand-off: its distance to the nearest planned work. Every column of the "
                 "ranking is in screening.csv.</p>")
    return "".join(parts)


def _detectability_html(voids: dict) -> str:
    """What each planned work's zone could hide: the words, then the figures (when present)."""
    entries = [e for e in voids.get("detectability") or [] if isinstance(e, dict)]
    if not entries:
        return ""
    words = "".join(f"<li>{escape(str(e['words'])[:1].upper() + str(e['words'])[1:])}</li>"
                    for e in entries if e.get("words"))
    keys = _keys_in_order(entries, first=("work",), skip=("words",))
    return ("<h2>What each planned work's zone could hide</h2>"
            + (f"<ul>{words}</ul>" if words else "")
            + (_generic_table(entries, keys, caption="Detectability and ray coverage by planned work") if keys else ""))


#: Keys of a body's ``refined`` block left out of the page (all are in voids.json).
_REFINED_NOT_SHOWN = ("lower_bound", "shape", "semi_axes_sigma_m", "n_bootstrap", "seconds", "converged")


def _refined_rows(body: dict) -> list[list]:
    refined = body.get("refined")
    lower_bound = bool(refined.get("lower_bound"))
    if refined.get("converged") is False:  # no sizes: the reason in words, the cube's figures stand
        return [[body.get("body_id"), "not refined", _text(refined.get("message") or "the fit did not converge")
                 + "; the figures cut from the cube stand, without bounds", "-"]]
    rows = []
    for key, value in refined.items():
        if key in _REFINED_NOT_SHOWN:
            continue
        if _is_estimate(value):
            text = estimate_words(value, _unit_of(key), key=key, lower_bound=lower_bound)
            sigma = value.get("sigma")
        else:
            text, sigma = _text(cell_value(key, value)), None
        rows.append([body.get("body_id"), label_for(key), text, "-" if sigma is None else sigma])
    return rows


def _refined_html(voids: dict) -> str:
    """Each body's fit against the picks, its sizes with 1 sigma and cautious 95 % bounds (when present)."""
    bodies = [b for b in voids.get("bodies", []) if isinstance(b, dict) and isinstance(b.get("refined"), dict)]
    if not bodies:
        return ""
    rows = [row for b in bodies for row in _refined_rows(b)]
    lower = [str(b.get("body_id")) for b in bodies if b["refined"].get("lower_bound")]
    note = (f" Body {', '.join(lower)}: slower than the rock, so first arrivals go round it and its extent is "
            "a lower bound (shown as \"at least\")." if lower else "")
    return ("<h2>Sizes fitted against the picks</h2><p>Each body refined as a shape fitted directly to the picks: "
            "the fitted value with its cautious 95 % interval, and one standard deviation." + escape(note) + "</p>"
            + table_html(["body", "quantity", "fitted value (95 % interval)", "1 sigma"], rows, float_format=".3g"))


def _quality_section(summary: dict, voids: dict) -> str:
    lam = summary.get("lambda", {})
    velocity = summary.get("velocity_m_per_ns", {})
    method = voids.get("method", {})
    picks = summary.get("picks", {})
    rows = [
        ["picks excluded", cell_value("excluded", picks.get("excluded"))],
        ["smoothing lambda and how it was chosen",
         f"{_text(cell_value('smoothing', lam.get('smoothing')))} ({cell_value('method', lam.get('method'))})"],
        ["ground velocity min / median / max (m/ns)",
         " / ".join(_text(cell_value(k, velocity.get(k))) for k in ("ground_min", "ground_median", "ground_max"))],
        ["cells clipped at the velocity band", f"{cell_value('n', velocity.get('cells_clipped_at_min'))} slow, "
                                               f"{cell_value('n', velocity.get('cells_clipped_at_max'))} fast"],
    ] + [[words, cell_value(key, method.get(key))] for key, words in (
        ("threshold_rule", "detection threshold rule"), ("sigma_model_ns_per_m", "robust spread of the anomaly (ns/m)"),
        ("threshold_sigmas", "detection threshold in robust standard deviations"),
        ("path_length_m", "median transmitter-receiver distance (m)"), ("frequency_mhz", "antenna frequency (MHz)"),
        ("resolution_rule", "resolution rule"), ("extent_rule", "body extent rule"))]
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


def _body_table(row: dict) -> str:
    """One body's row of the void table, with its status (shown when the body is chosen in the 3D view)."""
    keys = (_VOID_COLUMNS[0], "status") + _VOID_COLUMNS[1:]
    return _generic_table([row], keys, caption=f"Body {row.get('body_id')}")


def _pictures_html(folder: Path, voids: dict) -> str:
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
    return f"<h2>Pictures</h2><p>{escape(voids.get('rendering', ''))}</p>" + "".join(pictures)


def _void_table_html(voids: dict) -> str:
    resolved = [b for b in voids.get("bodies", []) if b.get("status") == STATUS_RESOLVED]
    if not resolved:
        return "<h2>Void table</h2><p>No void (resolved body); every body is in voids.csv.</p>"
    return ("<h2>Void table</h2><p>Voids (resolved bodies) only, as cut from the velocity cube; every body, with "
            "bounding boxes and more columns, is in voids.csv.</p>"
            + _generic_table(resolved, _VOID_COLUMNS, caption="Voids"))


def build_report_html(folder, *, summary: dict | None = None, voids: dict | None = None,
                      manifest: dict | None = None) -> str:
    """The report page for an output folder (nothing written).

    ``summary``, ``voids`` and ``manifest`` may be given in memory (as
    :func:`reconstruct.pipeline.write_processing` returns them); those not
    given are read from ``summary.json``, ``voids.json`` and ``manifest.json``
    in ``folder``. The pictures, ``residuals.csv`` (the pick uncertainties) and,
    when there, the demo's ``truth_check.json`` are read from ``folder``.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: not a folder; give the output folder of 'voidcube reconstruct invert'")
    hint = "give the output folder of 'voidcube reconstruct invert'"
    summary = summary if summary is not None else read_json_object(folder / "summary.json", hint)
    voids = voids if voids is not None else read_json_object(
        folder / "voids.json", f"run 'voidcube reconstruct voids {folder}' first")
    manifest = manifest if manifest is not None else read_json_object(folder / "manifest.json", hint)
    site = voids.get("site", summary.get("site", "-"))
    lead = _fit_html(folder, summary) + _threshold_override_html(voids)
    parts = [_ranked_html(voids), _detectability_html(voids), _refined_html(voids), truth_check_html(folder, voids.get("bodies")),
             _void_table_html(voids), "<h2>3D view</h2>" + scene_html(folder, voids, body_table=_body_table),
             _pictures_html(folder, voids)]
    petro = voids.get("petrophysics", {})
    parts.append(f"<h2>Petrophysics</h2><p>{escape(petro.get('relation', ''))}. "
                 f"{escape(petro.get('caution', ''))} The cell arrays are in interpretation.vti.</p>")
    parts.append(_quality_section(summary, voids))
    positions = summary.get("node_positions") or {}
    parts.append(hole_deviation_html(positions.get("holes_with_survey", []), positions.get("nodes_from_surveys")))
    notes = voids.get("notes", [])
    if notes:
        parts.append("<h2>Notes</h2><ul>" + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ul>")
    parts.append(provenance_html(manifest))
    parts.append(f"<p class=\"meta\">Site: {escape(site)}. Folder: {escape(folder)}. "
                 f"Page written {escape(utc_now_iso())}.</p>")
    return html_document(f"Void screening report: {site}", "".join(parts), generated_by="voidcube reconstruct report",
                         lead_html=lead)


def write_report(folder, *, started: str | None = None, summary: dict | None = None,
                 voids: dict | None = None) -> Path:
    """Write ``report.html`` into ``folder`` atomically and record the run in the manifest.

    ``summary`` and ``voids`` may be given in memory (see :func:`build_report_html`).
    """
    folder = Path(folder)
    started = started or utc_now_iso()
    page = build_report_html(folder, summary=summary, voids=voids)
    path = write_text_atomic(folder / "report.html", page)
    inputs = {"summary": folder / "summary.json", "voids": folder / "voids.json"}
    if (folder / TRUTH_CHECK_FILE).is_file():
        inputs["truth_check"] = folder / TRUTH_CHECK_FILE
    extend_manifest(folder, command="voidcube reconstruct report", inputs=inputs, parameters={},
                    outputs=["report.html"], started=started)
    return path
