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
        self.tags, self.sources = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.sources += [value for name, value in attrs if name in ("src", "href")]


def test_report_is_self_contained_escaped_and_cautious(make_inversion_folder, capsys):
    name = "Quarry <script>alert('x')</script> & Co"
    folder, _ = make_inversion_folder(name=name, work="road <b>A</b>")
    assert main(["voids", str(folder), "--quiet"]) == 0
    assert main(["report", str(folder)]) == 0
    assert "report.html" in capsys.readouterr().out
    page = (folder / "report.html").read_text(encoding="utf-8")
    parser = _Elements()
    parser.feed(page)
    assert "script" not in parser.tags and "b" in parser.tags  # <b> only from our own markup
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
    assert re.search(r"<td>1</td><td class=\"text\">air-filled \(fast\)</td>", page)  # void table row
    manifest = json.loads((folder / "manifest.json").read_text(encoding="utf-8"))
    assert [r["command"] for r in manifest["later_runs"]] == ["voidcube reconstruct voids", "voidcube reconstruct report"]


def test_report_needs_the_void_run_first(make_inversion_folder, capsys):
    folder, _ = make_inversion_folder()
    assert main(["report", str(folder)]) == 2
    err = capsys.readouterr().err
    assert "voids.json: file not found" in err and "run 'voidcube reconstruct voids" in err
    assert not (folder / "report.html").exists()
