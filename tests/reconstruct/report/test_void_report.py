"""Tests for ``reconstruct.report.void_report`` and the ``reconstruct report`` command.

Checks against the HTML standard through Python's own parser
(``html.parser``): text from inputs is escaped (no element injected), the
page is self-contained (no external source), pictures are embedded PNG.
"""

from __future__ import annotations

import base64
import json
import re
from html.parser import HTMLParser

from reconstruct.cli import main
from reconstruct.report.html import CAUTIONS


class _Elements(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags, self.sources, self.scripts = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.sources += [value for name, value in attrs if name in ("src", "href")]

    def handle_data(self, data):
        if self.tags and self.tags[-1] == "script":
            self.scripts.append(data)


def test_report_is_self_contained_escaped_and_cautious(make_inversion_folder, capsys):
    name = "Quarry <script>alert('x')</script> & Co"
    folder, _ = make_inversion_folder(name=name, work="road <b>A</b>")
    assert main(["voids", str(folder), "--quiet"]) == 0
    assert main(["report", str(folder)]) == 0
    assert "report.html" in capsys.readouterr().out
    page = (folder / "report.html").read_text(encoding="utf-8")
    parser = _Elements()
    parser.feed(page)
    assert "b" in parser.tags  # <b> only from our own markup
    # the only scripts are the 3D view's (plotly.js and ours), none from the inputs
    assert parser.scripts and not any("alert(" in script or "<b>A" in script for script in parser.scripts)
    assert "&lt;script&gt;" in page and "road &lt;b&gt;A&lt;/b&gt;" in page
    # every source is an embedded PNG: no network needed
    assert parser.sources and all(s.startswith("data:image/png;base64,") for s in parser.sources)
    for source in parser.sources:
        assert base64.b64decode(source.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    pictures = json.loads((folder / "voids.json").read_text(encoding="utf-8"))["pictures"]
    assert len(parser.sources) == len(pictures) >= 2  # the 3D view and the slices of the void
    # cautions first, before any table
    first_table = page.index("<table")
    for caution in CAUTIONS:
        assert 0 < page.index(caution.split(";")[0].replace("'", "&#x27;")) < first_table
    assert "probe drilling" in page[:first_table] and "not a design" in page[:first_table]
    assert "Void table" in page and "Data quality and resolution" in page and "Manifest" in page
    # void table row: body 1, its fill in words (docs/glossary.md: fill air, shown as words)
    assert re.search(r"<td>1</td><td class=\"text\">air-filled \(faster than the rock\)</td>", page)
    text = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", page.split("<h2>Manifest</h2>")[0])
    text = re.sub(r"<script[^>]*>.*?</script>", "", text, flags=re.S)  # the 3D view's code and data
    for identifier in ("roof_thickness_m", "standoff_m", "span_m", "body_id", "water_or_clay", "hazard"):
        assert identifier not in text, identifier  # words, not code identifiers, before the manifest
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    assert [r["command"] for r in manifest["later_runs"]] == ["voidcube reconstruct voids", "voidcube reconstruct report"]


def test_report_needs_the_void_run_first(make_inversion_folder, capsys):
    folder, _ = make_inversion_folder()
    assert main(["report", str(folder)]) == 2
    err = capsys.readouterr().err
    assert "voids.json: file not found" in err and "run 'voidcube reconstruct voids" in err
    assert not (folder / "report.html").exists()


def test_report_warns_after_the_cautions_when_the_target_misfit_is_not_reached(make_inversion_folder):
    # the discrepancy principle's target chi^2 = N (Constable, Parker and Constable, 1987,
    # Geophysics 52(3), 289-300); the figures come from the summary's fit block
    from reconstruct.report.void_report import build_report_html

    folder, _ = make_inversion_folder(name="fit check", work="road")
    assert main(["voids", str(folder), "--quiet"]) == 0
    summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    n = 272
    summary["fit"] = dict(n_picks=n, rms_ns=3.4, chi2=45.6 * n, chi2_per_pick=45.6, target_reached=False,
                          words=f"Warning: the model does not explain the picks: chi^2/N 45.6 for N = {n}")
    page = build_report_html(folder, summary=summary)
    warning = page.index("Warning: the fit")
    last_caution = max(page.index(c.split(";")[0].replace("'", "&#x27;")) for c in CAUTIONS)
    assert last_caution < warning < page.index("<h2>Summary</h2>")
    assert "chi^2/N 45.6" in page
    summary["fit"] = dict(summary["fit"], chi2=0.9 * n, chi2_per_pick=0.9, target_reached=True)
    summary["clipping"] = dict(summary.get("clipping", {}), warning=False)
    assert "Warning: the fit" not in build_report_html(folder, summary=summary)
