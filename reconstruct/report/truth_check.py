"""The demo's check against its invented truth, as a section of the void report.

``voidcube demo`` simulates its picks through an invented truth model and,
after the processing, compares every truth body with the bodies found
(:mod:`plan.synthetic.truth_match`). It writes that comparison into the model
folder as :data:`TRUTH_CHECK_FILE`; the void report shows it, framed and
headed as a check against invented bodies, only when that file is there. No
other command writes the file, so a report on field data never carries the
section. (The report reads a file rather than calling the comparison:
``reconstruct`` never imports ``plan``.)

The file holds ``{"truth_file", "match_rule", "bodies": [...]}``, one entry
per truth body, found or not, with the keys of
:meth:`plan.synthetic.truth_match.TruthMatch.as_dict`.
"""

from __future__ import annotations

import math
from pathlib import Path

from reconstruct.interpret.folder import read_json_object
from reconstruct.report.html import escape, table_html

__all__ = ["TRUTH_CHECK_FILE", "truth_check_html", "truth_check_rows", "refined_against_truth_rows"]

#: The file the demo alone writes into its model folder.
TRUTH_CHECK_FILE = "truth_check.json"

_OUTCOME_WORDS = {"found": "found as a void", "indication": "only an indication (below the resolution)",
                  "not found": "not found"}

_COLUMNS = ("truth body", "outcome", "found as body", "centre off by (m)", "volume, truth (m³)",
            "volume, found (m³)", "volume error (%)", "roof depth, truth (m)", "roof depth, found (m)",
            "roof error (m; below 0: found roof shallower)", "note")


def _number(value):
    return float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) \
        and math.isfinite(value) else None


def _difference(found, truth):
    found, truth = _number(found), _number(truth)
    return None if found is None or truth is None else found - truth


def truth_check_rows(check: dict) -> list[list]:
    """One table row per truth body (see :data:`_COLUMNS`); "-" where a figure does not apply."""
    rows = []
    for body in check.get("bodies", []):
        if not isinstance(body, dict):
            continue
        truth_volume, found_volume = _number(body.get("truth_volume_m3")), _number(body.get("found_volume_m3"))
        volume_error = (None if truth_volume in (None, 0.0) or found_volume is None
                        else 100.0 * (found_volume - truth_volume) / truth_volume)
        figures = [body.get("body_id"), _number(body.get("offset_m")), truth_volume, found_volume, volume_error,
                   _number(body.get("truth_roof_depth_m")), _number(body.get("found_roof_depth_m")),
                   _difference(body.get("found_roof_depth_m"), body.get("truth_roof_depth_m"))]
        outcome = str(body.get("outcome", "-"))
        rows.append([str(body.get("name", "-")), _OUTCOME_WORDS.get(outcome, outcome)]
                    + ["-" if v is None else v for v in figures] + [str(body.get("note") or "")])
    return rows


#: Sizes of a body's ``refined`` block set against the truth, when the demo's bodies were refined.
_REFINED_SIZES = (("volume_m3", "truth_volume_m3", "volume", "m³"), ("roof_depth_m", "truth_roof_depth_m",
                                                                     "roof depth", "m"))


def refined_against_truth_rows(check: dict, bodies) -> list[list]:
    """Per matched truth body and refined size (volume, roof depth): the truth, the fitted value and its
    cautious 95 % interval, and whether the interval holds the truth. Empty when no body was refined."""
    refined = {b.get("body_id"): b["refined"] for b in bodies or []
               if isinstance(b, dict) and isinstance(b.get("refined"), dict)}
    rows = []
    for entry in check.get("bodies", []):
        fit = refined.get(entry.get("body_id")) if isinstance(entry, dict) else None
        for key, truth_key, words, unit in _REFINED_SIZES if fit else ():
            estimate, truth = fit.get(key), _number(entry.get(truth_key))
            if not isinstance(estimate, dict) or truth is None or _number(estimate.get("value")) is None:
                continue
            low = _number(estimate.get("low95"))
            high = None if fit.get("lower_bound") else _number(estimate.get("high95"))
            inside = (low is None or low <= truth) and (high is None or truth <= high)
            rows.append([str(entry.get("name", "-")), f"{words} ({unit})", truth, _number(estimate["value"]),
                         "-" if low is None else low, "open" if high is None else high, "yes" if inside else "no"])
    return rows


def _refined_table(check: dict, bodies) -> str:
    rows = refined_against_truth_rows(check, bodies)
    if not rows:
        return ""
    return table_html(["truth body", "size", "truth", "fitted", "95 % low", "95 % high", "truth inside the interval"],
                      rows, float_format=".3g", caption="Sizes fitted against the picks, against the invented truth")


def truth_check_html(folder, bodies=None) -> str:
    """The framed section when ``folder`` holds :data:`TRUTH_CHECK_FILE`, else empty.

    ``bodies`` are those of ``voids.json``; their ``refined`` blocks, when there, are set against the
    truth too.
    """
    path = Path(folder) / TRUTH_CHECK_FILE
    if not path.is_file():
        return ""
    check = read_json_object(path, "run 'voidcube demo' again to write it")
    rows = truth_check_rows(check)
    found = sum(1 for body in check.get("bodies", []) if isinstance(body, dict) and body.get("outcome") == "found")
    return (
        '<section class="invented"><h2>Check against the invented truth (demo only)</h2>'
        "<p><b>This section is not about real ground.</b> The picks of this demo were simulated through an "
        f"invented truth model ({escape(check.get('truth_file', 'truth.yaml'))}); here every invented body, "
        f"found or not, is set against what the processing found ({found} of {len(rows)} found as voids). "
        "It shows how far the figures above can be off on a known case; a report on field data has no such "
        "section, because there is no truth to compare with.</p>"
        f"<p>Rule: {escape(check.get('match_rule', '-'))}</p>"
        + table_html(_COLUMNS, rows, float_format=".3g", caption="Invented bodies against the bodies found")
        + _refined_table(check, bodies) + "</section>")
