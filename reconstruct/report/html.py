"""Self-contained HTML pages: the safety cautions, tables and embedded pictures.

Every report voidcube writes (data quality, plan, voids) is one HTML file that
opens in a browser with no network and no software of ours: styles inline,
pictures embedded as base64 PNG. Text that comes from inputs (site names, node
ids, file names) is always escaped here, never by the caller.

Figures are made with :class:`matplotlib.figure.Figure` directly (never
``pyplot``), which draws with the Agg canvas and needs no display.
"""

from __future__ import annotations

import base64
import html
import io
from collections.abc import Iterable, Sequence

from reconstruct.report.colours import PAGE_COLOURS

__all__ = [
    "CAUTIONS",
    "escape",
    "cautions_html",
    "table_html",
    "png_img_html",
    "hole_deviation_html",
    "figure_png",
    "html_document",
]

#: The cautions every report carries at its top (and the README repeats).
CAUTIONS = (
    "This is an interpretation aid, not a guarantee. Radar tomography images "
    "velocity, not voids; every indication depends on the data, the layout and "
    "the processing choices recorded in the manifest.",
    "Confirm every void indication by probe drilling before anyone relies on it.",
    "A null result does not prove that there is no void: voids smaller than the "
    "resolution, slow (water- or clay-filled) voids that first arrivals avoid, "
    "and voids outside the ray coverage can go unseen.",
    "Defer to local regulations, the site's geotechnical engineer and licensed "
    "practice; this output is a screening aid, not a design.",
    "Radar transmitters fall under local radio-spectrum rules; check the licence "
    "conditions before fieldwork.",
    # the standard and the guide are cited from memory (titles not checked)
    "Radio-frequency energy can fire electric detonators: keep nodes, radios and gateways at "
    "least the separation distances of the applicable standard (for example BS 6657, Assessment "
    "of inadvertent initiation of bridge wire electro-explosive devices by radio-frequency "
    "radiation, or the explosives industry's guide to radio-frequency risks with commercial "
    "electric detonators; both cited from memory) from charged or primed holes, never place a "
    "node in one, and defer to the site's explosives rules.",
)

# the page colours are CSS custom properties set from reconstruct.report.colours
_STYLE = ":root { " + " ".join(f"--{name}: {value};" for name, value in PAGE_COLOURS.items()) + " }" + """
body { font-family: sans-serif; margin: 1.5em auto; max-width: 70em; color: var(--text);
       line-height: 1.4; padding: 0 1em; }
h1 { font-size: 1.5em; } h2 { font-size: 1.2em; margin-top: 1.2em; }
.cautions { border: 2px solid var(--caution-border); background: var(--caution-background); padding: 0.6em 1em; }
.cautions h2 { margin-top: 0.2em; }
table { border-collapse: collapse; margin: 0.6em 0; font-size: 0.9em; }
th, td { border: 1px solid var(--table-rule); padding: 0.2em 0.5em; text-align: right; }
th { background: var(--table-head); } td.text { text-align: left; }
figure { margin: 1em 0; } figcaption { font-size: 0.9em; color: var(--muted-text); }
img { max-width: 100%; }
.meta { font-size: 0.85em; color: var(--muted-text); }
.warning { border: 3px solid var(--caution-border); padding: 0.4em 1em; margin: 0.6em 0; }
.wide { overflow-x: auto; } .fit td, .fit th { padding: 0.1em 0.5em; }
.invented { border: 3px dashed var(--muted-text); padding: 0.4em 1em; margin: 1.2em 0; }
"""


def escape(value) -> str:
    """Text of ``value`` made safe to place in HTML (quotes included)."""
    return html.escape(str(value), quote=True)


def cautions_html() -> str:
    """The cautions block that goes at the top of every report."""
    items = "".join(f"<li>{escape(text)}</li>" for text in CAUTIONS)
    return (
        '<section class="cautions"><h2>Read this first</h2>'
        f"<ul>{items}</ul></section>"
    )


def _cell(value, float_format: str) -> str:
    if isinstance(value, float):
        return f"<td>{escape(format(value, float_format))}</td>"
    if isinstance(value, (int,)) and not isinstance(value, bool):
        return f"<td>{value}</td>"
    return f'<td class="text">{escape(value)}</td>'


def table_html(
    columns: Sequence[str],
    rows: Iterable[Sequence],
    *,
    float_format: str = ".3g",
    caption: str | None = None,
) -> str:
    """An HTML table; floats formatted with ``float_format``, text escaped."""
    head = "".join(f"<th>{escape(name)}</th>" for name in columns)
    body = []
    for row in rows:
        if len(row) != len(columns):
            raise ValueError(
                f"table row has {len(row)} values, expected {len(columns)} "
                f"({', '.join(columns)})"
            )
        body.append("<tr>" + "".join(_cell(v, float_format) for v in row) + "</tr>")
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return f"<table>{cap}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def png_img_html(png_bytes: bytes, alt: str, caption: str | None = None) -> str:
    """An embedded PNG picture (base64 data URI) with its alternative text."""
    if not png_bytes.startswith(b"\x89PNG\r\n\x1a\n"):
        raise ValueError("png_img_html expects the bytes of a PNG file")
    data = base64.b64encode(png_bytes).decode("ascii")
    img = f'<img src="data:image/png;base64,{data}" alt="{escape(alt)}">'
    if caption is None:
        return f"<figure>{img}</figure>"
    return f"<figure>{img}<figcaption>{escape(caption)}</figcaption></figure>"


def figure_png(figure, dpi: int = 110) -> bytes:
    """PNG bytes of a :class:`matplotlib.figure.Figure` (no pyplot, no display)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, bbox_inches="tight")
    return buffer.getvalue()


def html_document(title: str, body_html: str, *, generated_by: str = "voidcube", lead_html: str = "") -> str:
    """A complete page: title, ``lead_html``, the cautions, then ``body_html``.

    ``lead_html`` is what the reader must see before the cautions (the void
    report: how well the model explains the data); empty on most pages.
    Both must already be built from escaped parts (:func:`escape`,
    :func:`table_html`, :func:`png_img_html`).
    """
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<title>{escape(title)}</title><style>{_STYLE}</style></head><body>"
        f"<h1>{escape(title)}</h1>{lead_html}{cautions_html()}{body_html}"
        f'<p class="meta">Written by {escape(generated_by)}. '
        "Self-contained page: no network access is needed to view it.</p>"
        "</body></html>\n"
    )


def hole_deviation_html(rows, moved_nodes: int | None = None) -> str:
    """A section comparing each surveyed hole's planned line with its surveyed path.

    ``rows`` as :func:`reconstruct.io.surveys.hole_deviation_rows` gives them;
    ``moved_nodes`` the number of nodes placed on the surveyed paths, when known.
    Empty when no hole has a survey.
    """
    if not rows:
        return ""
    table = table_html(
        ["hole", "kind", "length (m)", "survey stations", "planned toe x, y, z (m)", "surveyed toe x, y, z (m)",
         "toe off the plan (m)", "largest offset (m)", "at depth along the hole (m)"],
        [[r["hole"], r["kind"], r["length_m"], r["survey_stations"],
          ", ".join(f"{v:.1f}" for v in r["planned_toe_m"]), ", ".join(f"{v:.1f}" for v in r["surveyed_toe_m"]),
          r["toe_offset_m"], r["largest_offset_m"], r["largest_offset_at_depth_m"]] for r in rows],
        float_format=".2f", caption="Planned straight line against the surveyed path (minimum curvature)")
    moved = ("" if moved_nodes is None else
             f" {moved_nodes} node(s) with a depth along their hole were placed on the surveyed path.")
    return ("<h2>Holes as drilled</h2><p>Holes with a deviation survey: the offset is the distance between "
            "the planned straight line and the surveyed path at the same length along the hole." + moved
            + "</p>" + table)
