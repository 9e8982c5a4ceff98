"""Tests for ``reconstruct.report.void_report`` and the ``reconstruct report`` command.

Checks against the HTML standard through Python's own parser
(``html.parser``): text from inputs is escaped (no element injected), the
page is self-contained (no external source), pictures are embedded PNG.
"""

from __future__ import annotations

import base64
import csv
import hashlib
import json
import math
import re
import statistics
from html.parser import HTMLParser
from pathlib import Path

import pytest

from reconstruct.cli import main
from reconstruct.report.html import CAUTIONS
from reconstruct.report.void_report import build_report_html
from tests.reconstruct.report.test_scene_3d import browser  # noqa: F401 (the headless Chromium, a fixture)


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
    # every source is an embedded PNG, but the link to the manifest beside the page: no network needed
    assert parser.sources.count("manifest.json") == 1
    pngs = [s for s in parser.sources if s != "manifest.json"]
    assert pngs and all(s.startswith("data:image/png;base64,") for s in pngs)
    for source in pngs:
        assert base64.b64decode(source.split(",", 1)[1])[:8] == b"\x89PNG\r\n\x1a\n"
    pictures = json.loads((folder / "voids.json").read_text(encoding="utf-8"))["pictures"]
    assert len(pngs) == len(pictures) >= 2  # the 3D view and the slices of the void
    # cautions first, before any table
    first_table = page.index("<table")
    for caution in CAUTIONS:
        assert 0 < page.index(caution.split(";")[0].replace("'", "&#x27;")) < first_table
    assert "probe drilling" in page[:first_table] and "not a design" in page[:first_table]
    assert "Void table" in page and "Data quality and resolution" in page and "Provenance" in page
    # void table row: body 1, its fill in words (docs/glossary.md: fill air, shown as words)
    assert re.search(r"<td>1</td><td class=\"text\">air-filled \(faster than the rock\)</td>", page)
    text = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "", page.split("<h2>Provenance</h2>")[0])
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



class _Tables(HTMLParser):
    """Every table of a page as lists of rows of cell texts (head row first), by the standard library's parser."""

    def __init__(self):
        super().__init__()
        self.tables, self._cell = [], None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append([])
        elif tag == "tr" and self.tables:
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)


def _tables(page: str) -> list:
    parser = _Tables()
    parser.feed(page)
    return parser.tables


def _caution_positions(page: str) -> list[int]:
    return [page.index(c.split(";")[0].replace("'", "&#x27;")) for c in CAUTIONS]


@pytest.fixture
def void_folder(make_inversion_folder):
    folder, _ = make_inversion_folder(name="fit check", work="road")
    assert main(["voids", str(folder), "--quiet", "--no-pictures"]) == 0
    return folder


def _read(folder, name):
    return json.loads((folder / name).read_text(encoding="utf-8"))


def test_page_opens_with_the_fit_and_warns_before_the_cautions_when_the_target_is_not_reached(void_folder):
    # the discrepancy principle's target chi^2 = N (Constable, Parker and Constable, 1987, Geophysics
    # 52(3), 289-300); the figures come from the summary's fit block, the pick uncertainties from
    # residuals.csv read back with the standard library (csv, statistics.median)
    summary = _read(void_folder, "summary.json")
    n = 272
    summary.update(rays="bent", bent_rays={"iterations": 6, "stop_reason": "iteration limit reached (6)"},
                   fit=dict(n_picks=n, rms_ns=3.4, chi2=45.6 * n, chi2_per_pick=45.6, target_reached=False,
                            words=f"Warning: the model does not explain the picks: chi^2/N 45.6 for N = {n}"))
    page = build_report_html(void_folder, summary=summary)
    with open(void_folder / "residuals.csv", newline="", encoding="utf-8") as handle:
        sigma = statistics.median(float(r["sigma_ns"]) for r in csv.DictReader(handle))
    warning = page.index("Warning: the model does not explain the data")
    assert page.index("<h1>") < page.index("How well the model explains the picks") < warning
    assert warning < min(_caution_positions(page))
    assert max(_caution_positions(page)) < page.index("Bodies and indications, ranked")
    top = page[:min(_caution_positions(page))]
    assert "chi^2/N 45.6" in top and "45.6 (target 1)" in top
    assert f"3.4 ns against a median pick uncertainty of {sigma:.3g} ns ({3.4 / sigma:.2g} times)" in top
    assert "bent rays, 6 iteration(s)" in top and "iteration limit reached (6)" in top
    summary["fit"] = dict(summary["fit"], chi2=0.9 * n, chi2_per_pick=0.9, target_reached=True,
                          words="The model explains the picks to their uncertainties.")
    summary["clipping"] = dict(summary.get("clipping", {}), warning=False)
    summary["rays"] = "straight"
    page = build_report_html(void_folder, summary=summary)
    assert "Warning: the model does not explain" not in page
    top = page[:min(_caution_positions(page))]
    assert "The model explains the picks to their uncertainties." in top and "straight rays" in top


def test_ranked_table_shows_voids_and_indications_together_from_the_keys_present(void_folder):
    # the rows are read back with the standard library's HTML parser and set against voids.json
    voids = _read(void_folder, "voids.json")
    ranked = voids["screening"]["ranked"]
    indication = dict(ranked[0], rank=2, body_id=7, status="unresolved", fill="water_or_clay",
                      reasons="a slow indication 3 m from the road")
    voids["screening"]["ranked"] = [dict(r, cautious_roof_m=2.5, crown_fos=1.3, hole_clearance_m=4.0)
                                    for r in ranked + [indication]]
    voids["screening"]["rule"] = "by distance to planned works, then cautious roof, then factor of safety"
    page = build_report_html(void_folder, voids=voids)
    assert "<b>Ranking rule:</b> by distance to planned works, then cautious roof" in page
    table = next(t for t in _tables(page) if t and "tier" in t[0])
    head = table[0]
    # known keys in words, an unknown key in words made from it, the unit from its ending
    for label in ("rank", "body", "likely fill", "roof, thinnest plausible (m)", "crown FoS",
                  "hole clearance (m)", "stand-off, least plausible (m)"):
        assert label in head, label
    rows = [r for r in table[1:] if len(r) == len(head)]
    assert [r[head.index("body")] for r in rows] == [str(r["body_id"]) for r in voids["screening"]["ranked"]]
    assert [r[head.index("tier")] for r in rows] == ["void", "indication (below the resolution)"]
    assert rows[1][head.index("likely fill")] == "water- or clay-filled"
    assert rows[0][head.index("roof, thinnest plausible (m)")] == "2.5"
    why = [r[0] for r in table[1:] if len(r) == 1]  # the reasons, each on a row across the table
    assert why == ["Why: " + r["reasons"] for r in voids["screening"]["ranked"]]
    text = page.split("<h2>Provenance</h2>")[0]
    assert "cautious_roof_m" not in text and "hole_clearance_m" not in text


def test_an_empty_ranking_says_it_is_no_proof_and_never_gives_a_verdict(void_folder):
    voids = _read(void_folder, "voids.json")
    voids["screening"]["ranked"], voids["bodies"] = [], []
    voids["counts"] = {"resolved": 0, "unresolved": 0}
    voids["detectability"] = [{"work": "road", "words": "no void larger than 40 m^3 found in the covered 62 % of "
                               "this zone; 38 % not covered", "covered_fraction": 0.62,
                               "smallest_air_void_m3": 40.0}]
    page = build_report_html(void_folder, voids=voids)
    assert "No body passed the detection threshold" in page and "not proof" in page
    assert "No void larger than 40 m^3 found in the covered 62 % of this zone; 38 % not covered" in page
    table = next(t for t in _tables(page) if t and "planned work" in t[0])
    assert table[1][table[0].index("zone crossed by rays (%)")] == "62"
    # the page never gives the ground a verdict (issue 15: the words "safe" or "clear" never appear)
    words = re.sub(r"<[^>]+>", " ", re.sub(r"<script[^>]*>.*?</script>", "", page, flags=re.S)).lower()
    assert not re.search(r"\b(safe|clear)\b", words)


def test_a_threshold_override_shows_before_the_cautions(void_folder):
    voids = _read(void_folder, "voids.json")
    voids["threshold_override"] = {"words": "threshold set to 2 robust standard deviations; a default run "
                                            "would have reported 1 void and 0 indications"}
    page = build_report_html(void_folder, voids=voids)
    assert "The detection threshold was changed by the user." in page
    assert page.index("a default run would have reported 1 void") < min(_caution_positions(page))
    assert "changed by the user" not in build_report_html(void_folder)


def test_refined_sizes_with_their_95_percent_bounds_and_lower_bounds_for_slow_bodies(void_folder):
    # the normal 95 % quantile from scipy.stats (a library outside the project)
    from scipy.stats import norm

    z = norm.ppf(0.975)
    voids = _read(void_folder, "voids.json")
    value, sigma = 65.0, 3.0
    refined = {"volume_m3": {"value": value, "sigma": sigma, "low95": value - z * sigma, "high95": value + z * sigma},
               "roof_thickness_m": {"value": 11.7, "sigma": 0.2, "low95": 11.7 - z * 0.2, "high95": 11.7 + z * 0.2},
               "lower_bound": False}
    slow = {"volume_m3": {"value": 200.0, "sigma": 20.0, "low95": 160.0, "high95": None},
            "span_m": {"value": 7.0, "sigma": 0.5, "low95": 6.0, "high95": 8.0}, "lower_bound": True}
    voids["bodies"] = [dict(voids["bodies"][0], refined=refined), dict(voids["bodies"][0], body_id=2, refined=slow)]
    page = build_report_html(void_folder, voids=voids)
    assert f"65.0 m³ (95 %: {value - z * sigma:.1f}-{value + z * sigma:.1f} m³)" in page
    assert f"11.7 m (95 %: {11.7 - z * 0.2:.1f}-{11.7 + z * 0.2:.1f} m)" in page
    # a slow body's extent is a lower bound: "at least" its cautious low end
    assert "at least 160 m³" in page and "at least 6.0 m" in page
    assert "Sizes fitted against the picks" in page and "lower bound" in page
    unrefined = [{k: v for k, v in b.items() if k != "refined"} for b in voids["bodies"]]
    assert "Sizes fitted against the picks" not in build_report_html(void_folder, voids=dict(voids, bodies=unrefined))
    # a fit that did not converge shows its reason, not a row of empty figures
    failed = dict(voids["bodies"][0], refined={"converged": False, "message": "too few picks near the body",
                                               "volume_m3": {"value": None, "sigma": None, "low95": None,
                                                             "high95": None}})
    page = build_report_html(void_folder, voids=dict(voids, bodies=[failed]))
    assert "too few picks near the body; the figures cut from the cube stand" in page


def test_provenance_is_a_short_table_with_short_hashes_and_a_link_to_the_manifest(void_folder):
    # digests recomputed with hashlib, versions read with importlib.metadata (standard library)
    from importlib import metadata

    page = build_report_html(void_folder)
    manifest = _read(void_folder, "manifest.json")
    section = page[page.index("<h2>Provenance</h2>"):]
    assert '<a href="manifest.json">manifest.json</a>' in section
    site = Path(manifest["inputs"]["site"]["path"])
    digest = hashlib.sha256(site.read_bytes()).hexdigest()
    assert f"<td class=\"text\">{digest[:12]}</td>" in section and digest not in section
    assert f"numpy {metadata.version('numpy')}" in section
    table = next(t for t in _tables(section) if t and t[0][0] == "command")
    assert [r[0] for r in table[1:]] == ["voidcube reconstruct invert", "voidcube reconstruct voids"]
    assert '"sha256"' not in page and "<pre>" not in page  # no raw JSON listing any more


def test_the_truth_check_shows_only_when_the_demo_wrote_it(void_folder):
    from reconstruct.report.truth_check import TRUTH_CHECK_FILE

    page = build_report_html(void_folder)
    assert "invented truth" not in page
    check = {"truth_file": "demo_site/truth.yaml", "match_rule": "nearest first, one to one",
             "bodies": [{"name": "cavity", "outcome": "found", "body_id": 1, "offset_m": 0.9, "truth_volume_m3": 147.0,
                         "found_volume_m3": 192.0, "truth_roof_depth_m": 8.5, "found_roof_depth_m": 7.0, "note": ""},
                        {"name": "clay pocket", "outcome": "not found", "truth_volume_m3": 198.0,
                         "truth_roof_depth_m": 12.0, "note": "no water- or clay-filled body within 8.5 m"}]}
    (void_folder / TRUTH_CHECK_FILE).write_text(json.dumps(check), encoding="utf-8")
    page = build_report_html(void_folder)
    section = page[page.index("Check against the invented truth"):]
    table = next(t for t in _tables(section) if t and t[0][0] == "truth body")
    head = table[0]
    assert [r[0] for r in table[1:]] == ["cavity", "clay pocket"]
    cavity, clay = table[1], table[2]
    assert cavity[head.index("volume error (%)")] == f"{100 * (192 - 147) / 147:.3g}"
    assert cavity[head.index("roof error (m; below 0: found roof shallower)")] == "-1.5"
    assert clay[head.index("outcome")] == "not found" and clay[head.index("volume error (%)")] == "-"
    assert "This section is not about real ground" in section


def test_first_screen_of_a_laptop_shows_the_fit_the_override_the_cautions_and_the_top_ranked_body(
        void_folder, browser):
    # what a reader sees before scrolling: the top 900 px of a 1366 px wide window (a common laptop
    # screen: common practice, no published source), as a real browser (headless Chromium) lays it out
    summary = _read(void_folder, "summary.json")
    summary["fit"] = dict(n_picks=100, rms_ns=3.4, chi2=4560.0, chi2_per_pick=45.6, target_reached=False,
                          words="Warning: the model does not explain the picks to their uncertainties: chi^2/N 45.6")
    voids = _read(void_folder, "voids.json")
    voids["threshold_override"] = {"words": "a default run would have reported 1 void"}
    path = void_folder / "report.html"
    path.write_text(build_report_html(void_folder, summary=summary, voids=voids), encoding="utf-8")
    page = browser.new_page(viewport={"width": 1366, "height": 900})
    try:
        page.goto(path.as_uri())
        for text in ("Warning: the model does not explain the data", "The detection threshold was changed",
                     "Read this first", "Bodies and indications, ranked"):
            box = page.get_by_text(text).first.bounding_box()
            assert box is not None and box["y"] + box["height"] <= 900, text
        first_row = page.locator("table").first.locator("tbody tr").first
        box = first_row.bounding_box()
        assert box["y"] + box["height"] <= 900 and "void" in first_row.inner_text()
    finally:
        page.close()


def test_the_truth_check_sets_refined_sizes_against_the_truth(void_folder):
    # the 95 % interval from scipy.stats' normal quantile; the truth volume of an ellipsoid, 4/3 pi abc
    from scipy.stats import norm

    from reconstruct.report.truth_check import TRUTH_CHECK_FILE

    z = norm.ppf(0.975)
    truth = 4 / 3 * math.pi * 4 * 3.5 * 2.5
    check = {"truth_file": "truth.yaml", "match_rule": "nearest first",
             "bodies": [{"name": "cavity", "outcome": "found", "body_id": 1, "truth_volume_m3": truth,
                         "found_volume_m3": 192.0, "truth_roof_depth_m": 7.5, "found_roof_depth_m": 8.0}]}
    (void_folder / TRUTH_CHECK_FILE).write_text(json.dumps(check), encoding="utf-8")
    voids = _read(void_folder, "voids.json")
    for fitted, sigma, inside in ((150.0, 5.0, "yes"), (190.0, 5.0, "no")):
        refined = {"volume_m3": {"value": fitted, "sigma": sigma, "low95": fitted - z * sigma,
                                 "high95": fitted + z * sigma}, "lower_bound": False}
        voids["bodies"] = [dict(voids["bodies"][0], body_id=1, refined=refined)]
        page = build_report_html(void_folder, voids=voids)
        table = next(t for t in _tables(page) if t and t[0][:2] == ["truth body", "size"])
        assert table[1][:4] == ["cavity", "volume (m³)", f"{truth:.3g}", f"{fitted:.3g}"]
        assert table[1][-1] == inside == ("yes" if fitted - z * sigma <= truth <= fitted + z * sigma else "no")
