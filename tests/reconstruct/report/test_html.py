"""Tests for reconstruct.report.html: escaping, cautions, tables, embedded pictures."""

import html
import struct

import pytest
from matplotlib.figure import Figure

from reconstruct.report.html import CAUTIONS, escape, figure_png, html_document, png_img_html, table_html


def test_escape_agrees_with_the_standard_library():
    # reference: Python's html.escape (quote=True), a general-purpose library
    text = '<script>alert("x")</script> & \'quarry\''
    assert escape(text) == html.escape(text, quote=True)
    assert "<script>" not in escape(text)


def test_document_puts_the_cautions_before_the_body_and_escapes_the_title():
    page = html_document("Site <b>A</b> & co", "<p>body</p>")
    assert "<b>A</b>" not in page and "Site &lt;b&gt;A&lt;/b&gt; &amp; co" in page
    first_caution = page.index(escape(CAUTIONS[0]))
    assert first_caution < page.index("<p>body</p>")
    # the cautions the house rules ask for: probe drilling, regulations, radio rules; and
    # radio energy near electric detonators (common practice, no published source quoted here)
    joined = " ".join(CAUTIONS).lower()
    for phrase in ("probe drilling", "not a guarantee", "geotechnical engineer",
                   "radio-spectrum", "null result", "electric detonators", "primed hole"):
        assert phrase in joined


def test_table_formats_numbers_and_escapes_text():
    out = table_html(["id", "volume m^3", "fill"], [[1, 12.3456, "<air>"]])
    assert "<td>1</td>" in out and "<td>12.3</td>" in out
    assert "&lt;air&gt;" in out
    with pytest.raises(ValueError, match="expected 3"):
        table_html(["a", "b", "c"], [[1, 2]])


def test_figure_png_is_a_real_png_of_the_figure_size():
    fig = Figure(figsize=(2, 1))
    ax = fig.add_subplot()
    ax.plot([0, 1], [0, 1])
    png = figure_png(fig, dpi=50)
    # PNG signature and IHDR layout: PNG specification (W3C, 2003), section 11.2.2
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", png[16:24])
    assert 0 < width <= 200 and 0 < height <= 100  # tight bounding box: near 2 x 1 in at 50 dpi
    tag = png_img_html(png, alt="a <line>")
    assert tag.startswith("<figure><img src=\"data:image/png;base64,")
    assert 'alt="a &lt;line&gt;"' in tag
    with pytest.raises(ValueError, match="PNG"):
        png_img_html(b"GIF89a", alt="x")


def test_lead_goes_between_the_title_and_the_cautions():
    page = html_document("Report", "<p>body</p>", lead_html="<p>fit first</p>")
    assert page.index("<h1>Report</h1>") < page.index("<p>fit first</p>") < page.index(escape(CAUTIONS[0]))
    assert page.index(escape(CAUTIONS[-1])) < page.index("<p>body</p>")
