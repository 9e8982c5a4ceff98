"""The plan report: one self-contained HTML page about a survey layout.

It shows, with the cautions at the top: plan-view maps of the nodes (and the
radio-mesh links when ``mesh.graphml`` is in the plan folder), the coverage of
the target volume in horizontal slices and a vertical section, the coverage
figures, and whatever other planning results the folder holds: the recovery
tests (``recovery_summary.json``), the layout optimisation
(``optimise_summary.json``), the pair graph, radio mesh and shot schedule
summaries (``pairs_summary.json``, ``mesh_summary.json``,
``schedule_summary.json``, each figure labelled in words with its unit) and
the first rows of ``pairs.csv`` and ``schedule.csv`` (headed in words).

Pictures are :class:`matplotlib.figure.Figure` objects drawn with the Agg
canvas (no display, no pyplot); the page is built with
:mod:`reconstruct.report.html`, which escapes every text taken from inputs.
"""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import numpy as np

from reconstruct.model.grid import ground_top_m
from reconstruct.report import colours, map_marks
from reconstruct.io.surveys import hole_deviation_rows
from reconstruct.report.html import (escape, figure_png, hole_deviation_html, html_document, png_img_html,
                                   table_html)

from plan.assess.coverage import Coverage
from plan.layout.blast_holes import blast_hole_warning

__all__ = ["plan_report_html", "air_wave_warning", "AIR_WAVE_MOST", "flatten_summary", "summary_rows", "find_label", "unlabelled_keys", "read_mesh_links", "OTHER_SUMMARIES", "OTHER_TABLES",
           "PAIR_GRAPH_LABELS", "MESH_LABELS", "SCHEDULE_LABELS", "OPTIMISE_LABELS"]

_PERCENT = "percent"  # a fraction 0..1 shown as a percentage
_BY_KIND = "degree.by_kind.*"

#: Words, with units, for the figures of ``pairs_summary.json`` (key paths as
#: :func:`flatten_summary` gives them; ``*`` stands for any one key or list
#: position, ``{1}`` in the words for what it matched). A second item
#: ``"percent"`` shows a fraction as a percentage.
PAIR_GRAPH_LABELS = {
    "nodes": "nodes",
    "pairs.total": "pairs of nodes",
    "pairs.heard": "pairs heard (link margin at least 0 dB)",
    "pairs.heard_fraction": ("share of the pairs heard (%)", _PERCENT),
    "pairs.heard_air_flagged": "heard pairs whose first arrival may be the air wave",
    "pairs.heard_through_air": "heard pairs whose straight line runs partly through the air",
    "pairs.heard_air_wave_first": "heard pairs where the air wave along the ground surface arrives first",
    "pairs.margin_db_percentiles.5": "link margin of the heard pairs, 5th percentile (dB)",
    "pairs.margin_db_percentiles.50": "link margin of the heard pairs, median (dB)",
    "pairs.margin_db_percentiles.95": "link margin of the heard pairs, 95th percentile (dB)",
    "pairs.longest_heard_m": "longest heard pair (m)",
    "pairs.heard_length_m_percentiles.50": "length of the heard pairs, median (m)",
    "pairs.heard_length_m_percentiles.95": "length of the heard pairs, 95th percentile (m)",
    "degree.min": "fewest nodes heard by one node",
    "degree.mean": "nodes heard by one node, mean",
    "degree.median": "nodes heard by one node, median",
    "degree.max": "most nodes heard by one node",
    _BY_KIND + ".nodes": "{1} nodes",
    _BY_KIND + ".mean_degree": "nodes heard by one {1} node, mean",
    "deaf_nodes": "nodes that hear no other node",
    "components": "groups of nodes linked by heard pairs (1: all linked)",
    "link_budget.system_performance_db": "system performance (dB)",
    "link_budget.attenuation_db_per_m": "attenuation in the rock (dB/m)",
    "link_budget.attenuation_low_loss_db_per_m": "attenuation in the rock, low-loss form (dB/m)",
    "link_budget.wavelength_m": "wavelength in the rock (m)",
    "link_budget.interface_loss_db": "loss at each air-ground crossing (dB)",
    "link_budget.velocity_m_per_ns": "velocity in the rock (m/ns)",
    "link_budget.computed_range_m": "range by the link budget (m)",
    "link_budget.rule_of_thumb_range_m": "range by the rule of thumb, shortest and longest (m)",
    "link_budget.rule_of_thumb_note": "rule of thumb",
    "link_budget.near_surface_loss_db": "loss at each surface or face node (dB)",
    "link_budget.refractive_index": "refractive index of the rock (c / v)",
    "link_budget.conductivity_rule_range_m": "range by the rule of thumb 35 / conductivity (m)",
    "link_budget.antennas": "antennas",
    "range_check.rule_range_m": "range by the rule of thumb 35 / conductivity (m)",
    "range_check.heard_beyond_rule": "heard pairs longer than that range",
    "range_check.share_of_heard_beyond_rule": ("share of the heard pairs longer than that range (%)", _PERCENT),
    "range_check.warning": "warning",
    "range_check.note": "rule of thumb, 35 / conductivity",
}
#: Words, with units, for the figures of ``mesh_summary.json``.
MESH_LABELS = {
    "gateway.id": "gateway",
    "gateway.xyz_m": "gateway position x, y, z (m)",
    "range_m": "radio range (m)",
    "radios.node": "radios on survey nodes",
    "radios.collar": "radios at borehole collars",
    "radios.gateway": "gateways",
    "radio_links": "radio links",
    "cable_links": "cable links (borehole node to its collar radio)",
    "connected": "every node reaches the gateway",
    "disconnected_nodes": "nodes cut off from the gateway",
    "hops.max": "radio hops to the gateway, most",
    "hops.mean": "radio hops to the gateway, mean",
    "hops.per_node": "radio hops to the gateway, per node",
    "articulation_points": "single points of failure (radios whose loss cuts nodes off)",
    "articulation_points[*].radio": "single point of failure {1}: radio",
    "articulation_points[*].nodes_cut_off": "single point of failure {1}: nodes its loss cuts off",
    "suggested_relays": "suggested relays",
    "suggested_relays[*].id": "suggested relay {1}",
    "suggested_relays[*].xyz_m": "suggested relay {1}: position x, y, z (m)",
    "suggested_relays[*].joins": "suggested relay {1}: joins",
    "suggested_relays[*].exclusion_zone": "suggested relay {1}: exclusion zone it had to avoid",
    "note": "note",
}
#: Words, with units, for the figures of ``schedule_summary.json``.
SCHEDULE_LABELS = {
    "slots": "shot slots",
    "transmitters": "nodes that transmit (all, or only those the coverage needs)",
    "silent_nodes": "nodes that only listen",
    "pairs_recorded": "pairs recorded",
    "pairs_recorded_both_directions": "pairs recorded in both directions",
    "record_length_ns": "record length (ns)",
    "sample_interval_ns": "sample interval (ns)",
    "samples_per_trace": "samples per trace",
    "stacks": "stacks per trace",
    "pulse_repetition_khz": "pulse repetition frequency (kHz)",
    "sampling": "sampling (one sample per pulse, or a whole trace per pulse)",
    "command_overhead_s": "radio command time per slot (s)",
    "data_rate_kbps": "radio data rate (kbit/s)",
    "bytes_per_sample": "bytes per sample",
    "acquire_s_total": "acquisition, all slots (s)",
    "upload_s_total": "upload of the traces, all slots (s)",
    "radio_overhead_s_total": "radio commands, all slots (s)",
    "survey_s": "survey time (s)",
    "deploy_and_retrieve_s": "deployment and retrieval of the nodes (s)",
    "time_on_site_hours": "time on site (h)",
    "note": "note",
}
#: Words, with units, for the figures of ``optimise_summary.json``.
OPTIMISE_LABELS = {
    "budget": "nodes allowed",
    "start_nodes": "nodes in the start layout",
    "candidates": "candidate positions",
    "pool_positions": "positions considered (start layout and candidates)",
    "optimised_nodes": "nodes in the optimised layout",
    "score_start": "coverage score of the start layout, sampled cells (0..1)",
    "score_optimised": "coverage score of the optimised layout, sampled cells (0..1)",
    "gain": "gain in coverage score",
    "score_note": "how the score was sampled",
    "model_grid.score_start": "coverage score of the start layout, every cell (0..1)",
    "model_grid.score_optimised": "coverage score of the optimised layout, every cell (0..1)",
    "model_grid.covered_fraction_start": ("target volume covered to the standard, start layout (%)", _PERCENT),
    "model_grid.covered_fraction_optimised": ("target volume covered to the standard, optimised layout (%)",
                                              _PERCENT),
    "swaps": "swaps made",
    "adds": "nodes added",
    "stop_reason": "why the search stopped",
    "seconds": "computing time (s)",
    "candidate_pairs": "pairs examined",
    "standard.min_rays": "standard: rays per cell, at least",
    "standard.min_angular_coverage": "standard: angular coverage, at least (0..1)",
    "standard.max_resolution_m": "standard: resolution floor, at most (m)",
    "standard.depth_of_interest_m": "standard: depth of interest (m)",
    "standard.works_buffer_m": "standard: buffer around the planned works (m)",
    "standard.max_distance_m": "standard: longest pair counted (m)",
}

#: Summaries of other planning steps shown figure by figure, in words, when present.
OTHER_SUMMARIES = (
    ("pairs_summary.json", "Pair graph", PAIR_GRAPH_LABELS),
    ("mesh_summary.json", "Radio mesh", MESH_LABELS),
    ("schedule_summary.json", "Shot schedule", SCHEDULE_LABELS),
)
#: Column headings, in words, of the tables shown (first rows) when present.
PAIRS_CSV_WORDS = {
    "node_a": "node A", "node_b": "node B", "distance_m": "distance (m)", "margin_db": "link margin (dB)",
    "heard": "heard", "spreading_db": "spreading loss (dB)", "attenuation_db": "loss in the rock (dB)",
    "pattern_db": "antenna pattern loss (dB)", "near_surface_db": "near-surface loss (dB)",
    "crossing_db": "air-ground crossing loss (dB)",
    "air_length_m": "straight line in the air (m)", "crossings": "air-ground crossings",
    "air_wave_first": "air wave first", "air_flag": "first arrival may be the air wave",
    "azimuth_deg": "azimuth (degrees)", "inclination_deg": "inclination (degrees)",
}
SCHEDULE_CSV_WORDS = {
    "slot": "slot", "start_s": "start (s)", "duration_s": "duration (s)", "transmitter": "transmitter",
    "n_listeners": "receivers", "listeners": "receiving nodes", "stacks": "stacks",
    "record_length_ns": "record length (ns)", "samples_per_trace": "samples per trace",
    "acquire_s": "acquisition (s)", "upload_s": "upload (s)",
}
#: Tables of other planning steps shown (first rows) when present.
OTHER_TABLES = (("pairs.csv", "Pairs", PAIRS_CSV_WORDS), ("schedule.csv", "Shot schedule", SCHEDULE_CSV_WORDS))
#: Columns holding 0 or 1, shown as no or yes.
_YES_NO_COLUMNS = ("heard", "air_wave_first", "air_flag")
_TABLE_ROWS = 25
#: Smaller than this in size, a figure is floating-point noise and shown as 0.
_NOISE = 1e-9
#: Unit endings of key names and how the page writes them.
_UNITS = (("_m_per_ns", "m/ns"), ("_db_per_m", "dB/m"), ("_ns_per_m", "ns/m"), ("_m3", "m³"), ("_kbps", "kbit/s"),
          ("_khz", "kHz"), ("_mhz", "MHz"), ("_deg", "degrees"), ("_db", "dB"), ("_ns", "ns"),
          ("_hours", "h"), ("_s", "s"), ("_m", "m"))


def flatten_summary(data, prefix: str = "") -> list[tuple[str, object]]:
    """``(key path, value)`` rows of nested JSON: ``a.b[2].c``; lists of plain values joined."""
    rows: list[tuple[str, object]] = []
    if isinstance(data, dict):
        for key, value in data.items():
            rows.extend(flatten_summary(value, f"{prefix}.{key}" if prefix else str(key)))
    elif isinstance(data, list) and any(isinstance(v, (dict, list)) for v in data):
        for i, value in enumerate(data):
            rows.extend(flatten_summary(value, f"{prefix}[{i}]"))
    elif isinstance(data, list):
        rows.append((prefix, ", ".join("null" if v is None else str(v) for v in data)))
    else:
        rows.append((prefix, "null" if data is None else data))
    return rows


def read_mesh_links(path, ids, xyz_m):
    """Plan-view segments of the radio-mesh links in a GraphML file.

    A GraphML node is placed by its ``x_m``/``y_m`` attributes when it has
    them, else by the node table position of the node with the same id.
    Returns (segments as an (n, 2, 2) array, number of links that could not be
    placed, note).
    """
    import networkx as nx

    try:
        graph = nx.read_graphml(path)
    except Exception as error:  # a malformed file must not stop the report
        return np.zeros((0, 2, 2)), 0, f"{Path(path).name} could not be read ({error}); links not drawn"
    where = {node_id: xyz_m[k, :2] for k, node_id in enumerate(ids)}
    position = {}
    for node, attributes in graph.nodes(data=True):
        if "x_m" in attributes and "y_m" in attributes:
            try:
                position[node] = np.array([float(attributes["x_m"]), float(attributes["y_m"])])
                continue
            except (TypeError, ValueError):
                pass
        if str(node) in where:
            position[node] = where[str(node)]
    segments, missing = [], 0
    for u, v in graph.edges():
        if u in position and v in position:
            segments.append([position[u], position[v]])
        else:
            missing += 1
    note = f"{graph.number_of_edges()} links in {Path(path).name}"
    if missing:
        note += f"; {missing} could not be placed (node not in the node table and no x_m/y_m)"
    return np.asarray(segments).reshape(-1, 2, 2), missing, note


def _new_figure(width=7.5, height=4.6):
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height), layout="constrained")


def _extent(grid):
    return (grid.origin_m[0], grid.end_m[0], grid.origin_m[1], grid.end_m[1])


def _draw_site_outlines(ax, site):
    for work in site.planned_works:
        pts = np.asarray(work.points_m)[:, :2]
        if work.geometry == "polygon":
            pts = np.vstack([pts, pts[:1]])
        ax.plot(pts[:, 0], pts[:, 1], color=colours.PLANNED_WORK_COLOUR, lw=1.6, ls="-")
    for zone in site.exclusion_zones:
        pts = np.asarray(zone.polygon_xy_m)
        pts = np.vstack([pts, pts[:1]])
        ax.plot(pts[:, 0], pts[:, 1], color=colours.EXCLUSION_ZONE_COLOUR, lw=1.2, ls="--")


def _layout_map(site, coverage: Coverage, ids, xyz, kinds, links):
    grid = coverage.grid
    top = ground_top_m(grid, coverage.ground)
    fig = _new_figure()
    ax = fig.add_subplot()
    image = ax.imshow(top.T, origin="lower", extent=_extent(grid), cmap=colours.ELEVATION_MAP, alpha=0.55,
                      aspect="equal")
    fig.colorbar(image, ax=ax, label="ground top (m elevation)", shrink=0.8)
    if links is not None and len(links):
        for segment in links:
            ax.plot(segment[:, 0], segment[:, 1], color=colours.MESH_LINK_COLOUR, lw=0.6,
                    alpha=colours.MESH_LINK_ALPHA)
    _draw_site_outlines(ax, site)
    styles = {kind: (marker, colours.NODE_KIND_COLOURS[kind])
              for kind, marker in (("surface", "o"), ("face", "s"), ("borehole", "v"))}
    for kind, (marker, colour) in styles.items():
        pick = np.array([k == kind for k in kinds])
        if pick.any():
            ax.scatter(xyz[pick, 0], xyz[pick, 1], s=14, marker=marker, color=colour, label=f"{kind} ({pick.sum()})",
                       zorder=3, edgecolors=colours.REFERENCE_LINE_COLOUR, linewidths=0.4)
    other = np.array([k not in styles for k in kinds])
    if other.any():
        ax.scatter(xyz[other, 0], xyz[other, 1], s=14, marker="x", label=f"unspecified ({other.sum()})",
                   zorder=3, color=colours.UNSPECIFIED_KIND_COLOUR)
    ax.set_xlim(grid.origin_m[0], grid.end_m[0])
    ax.set_ylim(grid.origin_m[1], grid.end_m[1])
    ax.set_xlabel("x east (m)")
    ax.set_ylabel("y north (m)")
    ax.legend(loc="upper right", fontsize=7)
    map_marks.draw_north_arrow(ax)
    map_marks.draw_scale_bar(ax, grid.end_m[0] - grid.origin_m[0])
    ax.set_title("Layout: nodes, planned works (solid), exclusion zones (dashed)" +
                 (", mesh links (thin grey)" if links is not None and len(links) else ""), fontsize=9)
    return fig


def _target_outline(ax, x_m, y_m, target):
    """The outline of the target volume: white on a dark halo, legible on both ends of the coverage map."""
    values = np.asarray(target, dtype=float)
    ax.contour(x_m, y_m, values, levels=[0.5], colors=[colours.TARGET_OUTLINE_HALO], linewidths=1.8)
    ax.contour(x_m, y_m, values, levels=[0.5], colors=[colours.TARGET_OUTLINE_COLOUR], linewidths=0.8)


def _coverage_slices(coverage: Coverage, depths_m):
    grid = coverage.grid
    top = ground_top_m(grid, coverage.ground)
    z = grid.centres_m(2)
    fig = _new_figure(7.5, 2.6 * len(depths_m))
    axes = fig.subplots(len(depths_m), 1, squeeze=False)[:, 0]
    quality = np.where(coverage.ground, coverage.quality, np.nan)
    for ax, depth in zip(axes, depths_m):
        # the cell of each column nearest to `depth` below its own ground top
        iz = np.clip(np.rint((top - depth - grid.origin_m[2]) / grid.cell_m[2] - 0.5), 0, grid.shape[2] - 1)
        iz = np.where(np.isfinite(iz), iz, 0).astype(int)
        layer = np.take_along_axis(quality, iz[:, :, None], axis=2)[:, :, 0]
        layer = np.where(np.isfinite(top) & (top - depth > z[0] - grid.cell_m[2] / 2), layer, np.nan)
        image = ax.imshow(layer.T, origin="lower", extent=_extent(grid), cmap=colours.COVERAGE_MAP, vmin=0, vmax=1,
                          aspect="equal")
        target = np.take_along_axis(coverage.target, iz[:, :, None], axis=2)[:, :, 0]
        if target.any() and not target.all():
            _target_outline(ax, grid.centres_m(0), grid.centres_m(1), target.T)
        ax.set_title(f"coverage quality {depth:g} m below ground (white: target volume)", fontsize=9)
        ax.set_ylabel("y north (m)")
        map_marks.draw_north_arrow(ax, loc=(0.05, 0.55), length=0.2)
        map_marks.draw_scale_bar(ax, grid.end_m[0] - grid.origin_m[0])
        fig.colorbar(image, ax=ax, shrink=0.85, label="quality (1 = meets standard)")
    axes[-1].set_xlabel("x east (m)")
    return fig


def _coverage_section(coverage: Coverage):
    grid = coverage.grid
    cols = np.argwhere(coverage.target.any(axis=2))
    iy = int(np.rint(cols[:, 1].mean())) if cols.size else grid.shape[1] // 2
    section = np.where(coverage.ground[:, iy, :], coverage.ray_count[:, iy, :].astype(float), np.nan)
    fig = _new_figure(7.5, 3.2)
    ax = fig.add_subplot()
    image = ax.imshow(section.T, origin="lower", cmap=colours.COVERAGE_MAP,
                      extent=(grid.origin_m[0], grid.end_m[0], grid.origin_m[2], grid.end_m[2]), aspect="equal")
    if coverage.target[:, iy, :].any():
        _target_outline(ax, grid.centres_m(0), grid.centres_m(2), coverage.target[:, iy, :].T)
    y = grid.centres_m(1)[iy]
    ax.set_title(f"rays per cell, west-east section at y = {y:g} m looking north (white: target volume)",
                 fontsize=9)
    map_marks.draw_scale_bar(ax, grid.end_m[0] - grid.origin_m[0])
    ax.set_xlabel("x east (m)")
    ax.set_ylabel("z elevation (m)")
    fig.colorbar(image, ax=ax, shrink=0.85, label="rays crossing the cell")
    return fig


def _read_json(path: Path):
    try:
        return json.loads(path.read_text(encoding="utf-8")), None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as error:
        return None, f"{path.name} could not be read ({error})"


def _csv_head(path: Path):
    try:
        with open(path, encoding="utf-8-sig", newline="") as handle:
            rows = list(csv.reader(handle))
    except (OSError, UnicodeDecodeError, csv.Error) as error:
        return None, f"{path.name} could not be read ({error})"
    rows = [r for r in rows if r and not r[0].lstrip().startswith("#")]
    if not rows:
        return None, f"{path.name} is empty"
    header, body = rows[0], rows[1:]
    width = len(header)
    shown = [(r + [""] * width)[:width] for r in body[:_TABLE_ROWS]]
    return (header, shown, len(body)), None


def _csv_cell(column: str, cell: str) -> str:
    """A cell of a planning table as the page shows it: yes/no for 0/1 flags, lists readable, no -0."""
    if column in _YES_NO_COLUMNS:
        return {"1": "yes", "0": "no"}.get(cell, cell)
    if re.fullmatch(r"-0(\.0*)?", cell):
        return cell[1:]  # a negative zero is rounding noise
    return cell.replace(";", "; ") if ";" in cell else cell


def _key_value_table(data, caption, labels):
    return table_html(["figure", "value"], summary_rows(data, labels), caption=caption)


def _range_warning_html(pairs_summary) -> str:
    """The warning of the range check of ``pairs_summary.json``, when it has one."""
    check = pairs_summary.get("range_check") if isinstance(pairs_summary, dict) else None
    if not isinstance(check, dict) or not check.get("warning"):
        return ""
    return ('<div class="cautions"><h2>Warning: pairs beyond the rule of thumb</h2>'
            f"<p>{escape(check['warning'])}.</p><p>{escape(check.get('note') or '')}.</p></div>")


def _recovery_html(recovery: dict) -> str:
    parts = ["<h2>Recovery tests</h2>"]
    statements = recovery.get("statements") or []
    if statements:
        parts.append("<ul>" + "".join(f"<li>{escape(s)}</li>" for s in statements) + "</ul>")
    checker = recovery.get("checkerboard") or {}
    if checker:
        parts.append(f"<p>Checkerboard of {escape(checker.get('cube_m'))} m cubes: correlation of recovered and "
                     f"true pattern {escape(_fmt(checker.get('correlation')))} over the target cells crossed by "
                     "rays.</p>")
        bands = checker.get("by_depth") or []
        if bands:
            parts.append(table_html(["from depth (m)", "to depth (m)", "cells", "correlation"],
                                    [(b.get("depth_from_m"), b.get("depth_to_m"), b.get("cells"),
                                      _fmt(b.get("correlation"))) for b in bands]))
        if checker.get("caution"):
            parts.append(f"<p><strong>Caution.</strong> {escape(checker['caution'])}</p>")
    parts.append(_recovery_by_work_html(recovery))
    voids = recovery.get("voids") or []
    if voids:
        parts.append(table_html(
            ["planned work", "fill", "depth (m)", "diameter (m)", "largest time change (ns)", "seen in data",
             "resolved"],
            [(v.get("work", ""), v.get("fill"), v.get("depth_m"), v.get("diameter_m"),
              _fmt(v.get("largest_time_change_ns")), "yes" if v.get("seen_in_data") else "no",
              "yes" if v.get("resolved") else "no") for v in voids],
            caption="Inserted voids"))
    return "".join(parts)


def _recovery_by_work_html(recovery: dict) -> str:
    """The smallest void resolved at each planned work, by fill and depth, and the pairs used."""
    parts = []
    pairs = recovery.get("link_budget") or {}
    if pairs.get("link_budget"):
        parts.append(f"<p>The tests use the {escape(pairs.get('pairs_heard'))} pairs the link budget hears (of "
                     f"{escape(pairs.get('pairs_within_range'))}); pick noise: {escape(pairs.get('noise'))}.</p>")
    elif pairs:
        parts.append(f"<p>The tests use every pair ({escape(pairs.get('pairs_heard'))}), with "
                     f"{escape(pairs.get('noise'))}: the link budget was not applied.</p>")
    places = recovery.get("smallest_resolved_void_by_work") or []
    depths = (recovery.get("settings") or {}).get("depths_m") or []
    if not places or not depths:
        return "".join(parts)
    rows = []
    for place in places:
        for fill, per_depth in (place.get("smallest_resolved_void_m") or {}).items():
            rows.append([place.get("work"), fill]
                        + [_fmt(per_depth.get(f"{d:g}")) if per_depth.get(f"{d:g}") is not None else "none"
                           for d in depths])
    parts.append(table_html(["planned work", "fill"] + [f"at {d:g} m depth (m)" for d in depths], rows,
                            caption="Smallest void resolved at each planned work (diameter; none: no size "
                                    "tested was resolved)"))
    return "".join(parts)


def _fmt(value, digits: int = 3):
    """A figure for the page: ``digits`` significant digits, floating-point noise shown as 0."""
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        if not np.isfinite(value):
            return "n/a"
        if abs(value) < _NOISE:
            return "0"
        if abs(value) >= 10 ** digits:  # no exponent for large figures: 16,200 rather than 1.62e+04
            return f"{value:,.0f}"
        return f"{value:.{digits}g}"
    return value


def _words(key_path: str) -> str:
    """Words for a key path that has no label: ``a.b_c_m`` -> ``a: b c (m)``, ``x[2]`` -> ``x 3``."""
    parts = []
    for part in key_path.split("."):
        part = re.sub(r"\[(\d+)\]", lambda m: f" {int(m.group(1)) + 1}", part)
        ending, unit = next(((e, u) for e, u in _UNITS if part.endswith(e) and len(part) > len(e)), ("", None))
        words = part[: len(part) - len(ending)].replace("_", " ").strip()
        parts.append(f"{words} ({unit})" if unit else words)
    return ": ".join(p for p in parts if p)


def find_label(key_path: str, labels: dict):
    """``(words, how)`` of the label of a key path (``*`` matching any one key or list position), or
    None when ``labels`` has none; ``how`` is ``"percent"`` or None."""
    for pattern, label in labels.items():
        regex = "^" + re.escape(pattern).replace(r"\*", r"([^.\[\]]+)") + "$"
        match = re.match(regex, key_path)
        if match:
            words, how = (label, None) if isinstance(label, str) else label
            found = [str(int(g) + 1) if g.isdigit() else g.replace("_", " ") for g in match.groups()]
            return words.format(None, *found), how
    return None


def _label(key_path: str, labels: dict):
    """The label of a key path, or words made from the key names when it has none."""
    return find_label(key_path, labels) or (_words(key_path), None)


def _value_text(value, how=None) -> str:
    if how == _PERCENT and isinstance(value, (int, float)) and not isinstance(value, bool):
        return _fmt(100.0 * value, 3)
    if isinstance(value, str) and ", " in value:  # a list joined by flatten_summary: format each number
        items = []
        for item in value.split(", "):
            try:
                items.append(str(_fmt(float(item), 4)) if item not in ("null",) else "none")
            except ValueError:
                items.append(item)
        return ", ".join(items)
    if value in ("null", ""):
        return "none"
    return str(_fmt(value, 4))


def summary_rows(data, labels: dict) -> list[tuple[str, str]]:
    """``(words, value)`` rows of a planning summary for the page (see :data:`PAIR_GRAPH_LABELS`).

    A mapping of node id to value (``per_node``) becomes one row; figures are
    rounded to four significant digits, floating-point noise shown as 0.
    """
    rows = []
    for key_path, value in flatten_summary(_compact_per_node(data)):
        words, how = _label(key_path, labels)
        rows.append((words, _value_text(value, how)))
    return rows


def unlabelled_keys(data, labels: dict) -> list[str]:
    """Key paths of a summary that ``labels`` does not cover (shown with words made from their names)."""
    return [k for k, _ in flatten_summary(_compact_per_node(data)) if find_label(k, labels) is None]


def _compact_per_node(data):
    """The same JSON with every ``per_node`` mapping turned into one text: ``id value; id value``."""
    if isinstance(data, dict):
        out = {}
        for key, value in data.items():
            if key == "per_node" and isinstance(value, dict):
                out[key] = "; ".join(f"{k}: {_fmt(v, 4) if isinstance(v, (int, float)) else v}"
                                     for k, v in value.items())
            else:
                out[key] = _compact_per_node(value)
        return out
    if isinstance(data, list):
        return [_compact_per_node(v) for v in data]
    return data


#: Share of the heard pairs with the air wave first beyond which the planner warns: "most" (the
#: issue's word; our threshold, common practice, no published source).
AIR_WAVE_MOST = 0.5


def air_wave_warning(pairs_summary: dict, most: float = AIR_WAVE_MOST) -> str | None:
    """A warning when most heard pairs would have the air wave first, else None.

    Reads ``pairs.heard`` and ``pairs.heard_air_wave_first`` of
    ``pairs_summary.json`` (:func:`plan.radio.pair_graph.pair_graph_summary`).
    Such pairs' first arrivals run through the air along the ground or a bench
    face: they tell little about the rock under the nodes, a straight-ray
    inversion leaves them out, and the ground the inversion covers falls short
    of the straight-ray coverage the plan predicts.
    """
    pairs = pairs_summary.get("pairs", {}) if isinstance(pairs_summary, dict) else {}
    heard, first = pairs.get("heard"), pairs.get("heard_air_wave_first")
    if not heard or first is None or first <= most * heard:
        return None
    return (f"most heard pairs would have the air wave first: {first:,} of {heard:,} ({first / heard:.0%}, "
            f"more than {most:.0%}); their first arrivals run through the air along the ground or a bench face "
            "and tell little about the rock below, so the ground covered by the inversion will fall short of "
            "the coverage predicted here; put more nodes in holes, deeper, or away from the faces")


#: Share of the target volume covered to the standard below which the planner warns: less than half
#: leaves more of the ground under the planned works unseen than seen (our threshold, common
#: practice, no published source).
LOW_COVERAGE_SHARE = 0.5


def low_coverage_warning(target_volume: dict, least: float = LOW_COVERAGE_SHARE) -> str | None:
    """A warning when the layout covers less than ``least`` of the target volume to the standard, else None.

    Reads ``covered_fraction`` of the ``target_volume`` block of ``coverage_summary.json``
    (:meth:`plan.assess.coverage.Coverage.summary`).
    """
    covered = target_volume.get("covered_fraction") if isinstance(target_volume, dict) else None
    if covered is None or covered >= least:
        return None
    return (f"this layout covers only {100 * covered:.1f} % of the target volume to the standard (less than "
            f"{least:.0%}): voids in the other {100 * (1 - covered):.1f} % may go unseen, and an empty void table "
            "would say little about them; add nodes or holes where the coverage slices below are weak, or "
            "narrow the target volume to what matters")


def plan_report_html(site, coverage: Coverage, ids, xyz_m, kinds, plan_dir) -> tuple[str, list[str]]:
    """The plan report page and the list of plan-folder files it used.

    Parameters
    ----------
    site : Site
    coverage : Coverage
        Coverage of the layout (:func:`plan.assess.coverage.compute_coverage`).
    ids, xyz_m, kinds : node ids, positions (n, 3) in metres and kinds
    plan_dir : path of the plan folder (other planning outputs are read from it)
    """
    plan_dir = Path(plan_dir)
    used: list[str] = []
    notes: list[str] = []
    xyz = np.asarray(xyz_m, dtype=float)
    links = None
    mesh = plan_dir / "mesh.graphml"
    if mesh.is_file():
        links, _, note = read_mesh_links(mesh, ids, xyz)
        notes.append(note)
        used.append(mesh.name)
    s = coverage.summary()
    tv = s["target_volume"]
    std = coverage.standard
    body = [f"<p>Site: {escape(site.name)}. Layout: {coverage.n_nodes} nodes, {coverage.n_rays:,} straight rays "
            f"(one per pair). Wavelength in the rock {coverage.wavelength_m:.2f} m "
            f"({site.rock.antenna_frequency_mhz:g} MHz at {site.rock.velocity_m_per_ns:g} m/ns).</p>"]
    pairs_summary, _ = _read_json(plan_dir / "pairs_summary.json") if (plan_dir / "pairs_summary.json").is_file() \
        else (None, None)
    for warning in (low_coverage_warning(tv), air_wave_warning(pairs_summary) if isinstance(pairs_summary, dict)
                    else None):
        body.append(f"<h2>Warning</h2><p>{escape(warning[0].upper() + warning[1:])}.</p>" if warning else "")
    in_holes = blast_hole_warning(site, ids, xyz)
    if in_holes:
        body.append(f'<div class="cautions"><h2>Warning: nodes in blast holes</h2><p>{escape(in_holes)}</p></div>')
    body.append("<h2>Layout</h2>")
    body.append(png_img_html(figure_png(_layout_map(site, coverage, ids, xyz, kinds, links)),
                             alt="plan view of the nodes, planned works and exclusion zones",
                             caption="; ".join(notes) if notes else None))
    body.append(hole_deviation_html(hole_deviation_rows(site.boreholes)))
    body.append("<h2>Coverage of the target volume</h2>")
    body.append(f"<p>Target volume: {escape(tv['description'])}; {tv['cells']:,} cells "
                f"({tv['volume_m3']:,.0f} m&sup3;). Standard: at least {std.min_rays} rays per cell and angular "
                f"coverage at least {std.min_angular_coverage:g}"
                + (f" and a resolution floor no wider than {std.max_resolution_m:g} m" if std.max_resolution_m else "")
                + ".</p>")
    body.append(table_html(["figure", "value"], [
        ("share of the target volume covered to the standard", f"{100 * tv['covered_fraction']:.1f} %"),
        ("coverage score (mean cell quality, 0..1)", f"{tv['score']:.3f}"),
        ("target cells crossed by no ray", tv["cells_without_rays"]),
        ("median rays per target cell", _fmt(tv["ray_count"]["median"])),
        ("median angular coverage (0 one direction, 1 all directions)", _fmt(tv["angular_coverage"]["median"])),
        ("resolution floor, median (first Fresnel zone width, m)", _fmt(tv["resolution_floor_m"]["median"])),
        ("resolution floor, widest (m)", _fmt(tv["resolution_floor_m"]["max"])),
    ]))
    body.append("<p>The resolution floor is the narrowest first Fresnel zone among the rays crossing a cell "
                "(Williamson 1991; Spetzler and Snieder 2004): voids much smaller than it are averaged away "
                "whatever the ray density.</p>")
    depth = std.depth_of_interest_m
    body.append(png_img_html(figure_png(_coverage_slices(coverage, [round(depth * f, 1) for f in (0.2, 0.5, 0.9)])),
                             alt="coverage quality in horizontal slices below the ground"))
    body.append(png_img_html(figure_png(_coverage_section(coverage)), alt="rays per cell in a vertical section"))

    recovery = plan_dir / "recovery_summary.json"
    if recovery.is_file():
        data, problem = _read_json(recovery)
        body.append(_recovery_html(data) if isinstance(data, dict) else f"<p>{escape(problem or 'unreadable')}</p>")
        used.append(recovery.name)
    optimise = plan_dir / "optimise_summary.json"
    if optimise.is_file():
        data, problem = _read_json(optimise)
        body.append("<h2>Layout optimisation</h2>")
        body.append(_key_value_table(data, f"from {optimise.name}", OPTIMISE_LABELS) if data is not None
                    else f"<p>{escape(problem)}</p>")
        used.append(optimise.name)
    for name, title, labels in OTHER_SUMMARIES:
        path = plan_dir / name
        if path.is_file():
            data, problem = _read_json(path)
            body.append(f"<h2>{escape(title)}</h2>")
            body.append(_range_warning_html(data) if name == "pairs_summary.json" else "")
            body.append(_key_value_table(data, f"from {name}", labels) if data is not None
                        else f"<p>{escape(problem)}</p>")
            used.append(name)
    for name, title, words in OTHER_TABLES:
        path = plan_dir / name
        if path.is_file():
            head, problem = _csv_head(path)
            body.append(f"<h2>{escape(title)} ({escape(name)})</h2>")
            if head is None:
                body.append(f"<p>{escape(problem)}</p>")
            else:
                header, rows, total = head
                rows = [[_csv_cell(column, cell) for column, cell in zip(header, row)] for row in rows]
                body.append(table_html([words.get(c, _words(c)) for c in header], rows,
                                       caption=f"first {len(rows)} of {total} rows"))
            used.append(name)
    return html_document(f"Survey plan: {site.name}", "".join(body), generated_by="voidcube plan report"), used
