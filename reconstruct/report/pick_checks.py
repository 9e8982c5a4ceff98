"""Writing the pick checks: ``pick_checks.csv``, ``node_time_zero.csv``,
``pick_checks.json``, ``pick_checks.html``.

:func:`pick_checks_summary`, :func:`pick_check_rows` and
:func:`node_time_zero_rows` decide what is written (pure);
:func:`write_pick_checks` writes the folder, manifest last. The figures are drawn with
:class:`matplotlib.figure.Figure` (no pyplot, no display) and embedded in the
page by :mod:`reconstruct.report.html`, which also puts the cautions at its top.
"""

from __future__ import annotations


import numpy as np

from reconstruct.checks.anisotropy import anisotropy_from_pick_checks, ray_angle_deg
from reconstruct.checks.drift import drift_from_pick_checks
from reconstruct.report import colours, map_marks
from reconstruct.report.html import escape, figure_png, html_document, png_img_html, table_html
from reconstruct.model.constants import AIR_VELOCITY_M_PER_NS
from reconstruct.io.outputs import (
    build_manifest,
    make_output_folder,
    utc_now_iso,
    write_csv_atomic,
    write_json_atomic,
    write_text_atomic,
)
from reconstruct.checks.picks import (
    FLAG_AIR_DIRECT,
    FLAG_AIR_REFRACTED,
    FLAG_FASTER_THAN_AIR,
    FLAG_RECIPROCAL,
    FLAG_SLOWER_THAN_BAND,
    FLAGS,
    PickChecks,
    error_flagged,
    excluded_flags,
    off_node_picks,
    usability_cautions,
    verdict,
)
from reconstruct.io.tables import Nodes, Picks

__all__ = ["PICK_CHECK_COLUMNS", "NODE_TIME_ZERO_COLUMNS", "pick_check_rows", "node_time_zero_rows",
           "pick_checks_summary", "time_distance_classes", "summary_rows", "write_pick_checks"]

#: Columns of ``pick_checks.csv``: one row per pick read.
PICK_CHECK_COLUMNS = ["input_line", "tx", "rx", "time_ns", "sigma_ns", "distance_m", "time_zero_correction_ns",
                      "corrected_time_ns", "apparent_velocity_m_per_ns", "reciprocal_input_line",
                      "reciprocal_error_ns", "reciprocal_mean_ns", "air_time_ns", "reference_time_ns",
                      "residual_ns", "flags", "action"]
#: Columns of ``node_time_zero.csv``: one row per node.
NODE_TIME_ZERO_COLUMNS = ["node_id", "time_zero_ns", "delay_ns", "depth_m", "picks_as_tx", "picks_as_rx",
                          "reciprocal_pairs", "median_residual_ns", "group_score", "off_as_group", "likely_cause"]


def _f(value, digits=4) -> str:
    return "" if value is None or not np.isfinite(value) else f"{value:.{digits}f}"


def pick_check_rows(picks: Picks, nodes: Nodes, checks: PickChecks, excluding=()):
    """Rows of ``pick_checks.csv``: every pick read, checked picks first, then the rows
    excluded on reading (with their reason as the flag)."""
    ids = nodes.ids
    excluding = set(excluding)
    for k in range(len(picks)):
        partner = int(checks.reciprocal[k])
        flags = checks.flags[k]
        action = "excluded" if excluding.intersection(flags) else "kept"
        yield [int(picks.lines[k]), ids[picks.tx[k]], ids[picks.rx[k]], f"{picks.time_ns[k]:.4f}",
               _f(checks.sigma_ns[k]), _f(checks.distance_m[k], 3), _f(checks.time_zero_correction_ns[k]),
               _f(checks.corrected_time_ns[k]), _f(checks.apparent_velocity_m_per_ns[k], 5),
               "" if partner < 0 else int(picks.lines[partner]), _f(checks.reciprocal_error_ns[k]),
               _f(checks.reciprocal_mean_ns[k]), _f(checks.air_time_ns[k]), _f(checks.reference_time_ns[k]),
               _f(checks.residual_ns[k]), ";".join(flags), action]
    for e in picks.excluded:
        yield [e.line, e.tx, e.rx, e.time_text, "", "", "", "", "", "", "", "", "", "", "", e.reason, "excluded"]


def node_time_zero_rows(picks: Picks, nodes: Nodes, checks: PickChecks):
    """Rows of ``node_time_zero.csv``: one per node."""
    n = len(nodes)
    n_tx = np.bincount(picks.tx, minlength=n)
    n_rx = np.bincount(picks.rx, minlength=n)
    has_partner = checks.reciprocal >= 0
    n_rec = np.bincount(picks.tx[has_partner], minlength=n)
    nc = checks.nodes
    for k in range(n):
        yield [nodes.ids[k], _f(checks.time_zero_ns[k]), _f(checks.delay_ns[k]),
               _f(checks.depth_m[k], 3), int(n_tx[k]), int(n_rx[k]), int(n_rec[k]), _f(nc.median_residual_ns[k]),
               _f(nc.score[k], 2), "yes" if nc.off[k] else "no", nc.cause[k]]


def _nodes_off_summary(nodes: Nodes, checks: PickChecks) -> dict:
    nc = checks.nodes
    return {
        "rule": ("a node's median residual (its picks against the reference model after the time-zero "
                 "correction, picks flagged as errors left out) is off when it lies more than cut times "
                 "max(1.4826 MAD of the nodes' medians, median pick sigma) from the median of the nodes' medians"),
        "median_of_node_medians_ns": nc.level_ns, "spread_of_node_medians_ns": nc.spread_ns, "cut": nc.cut,
        "count": int(nc.off.sum()),
        "nodes": [{"node_id": nodes.ids[k], "median_residual_ns": float(nc.median_residual_ns[k]),
                   "picks": int(nc.picks[k]), "group_score": float(nc.score[k]), "likely_cause": nc.cause[k]}
                  for k in np.flatnonzero(nc.off)],
    }


def pick_checks_summary(picks: Picks, nodes: Nodes, checks: PickChecks, problems, *, rays: str = "straight",
                        keep_flagged=()) -> dict:
    """Content of ``pick_checks.json``."""
    o = checks.options
    excluding = excluded_flags(rays, keep_flagged)
    flagged_out = np.array([bool(set(excluding).intersection(f)) for f in checks.flags], dtype=bool)
    time_zero = checks.time_zero_ns
    known = np.isfinite(time_zero)
    cautions = usability_cautions(picks, checks)
    return {
        "picks": {
            "rows_read": picks.n_rows, "checked": len(picks), "excluded_on_reading": len(picks.excluded),
            "flag_counts": checks.counts(),
            "flagged": sum(1 for f in checks.flags if f),
            "not_flagged": sum(1 for f in checks.flags if not f),
            "flagged_as_errors": int(error_flagged(checks).sum()),
            "of_nodes_off_as_group": int(off_node_picks(picks, checks).sum()),
            "excluded_by_flags": int(flagged_out.sum()),
            "flags_that_exclude": list(excluding),
            "kept": int(len(picks) - flagged_out.sum()),
            "faster_than_air_input_lines": [int(k) for k in picks.lines[checks.has(FLAG_FASTER_THAN_AIR)]],
        },
        "sigma": {
            "source": checks.sigma_source,
            "median_sigma_ns": float(np.median(checks.sigma_ns)) if len(picks) else None,
            "pick_noise_from_reciprocity_ns": checks.noise_sigma_ns,
        },
        "reciprocity": checks.reciprocity,
        "time_zero": {
            "model": "t_ab = T_ab + (time_zero_b - time_zero_a) + (delay_a + delay_b): time_zero_ns is the "
                     "clock term, relative to its mean over the nodes; delay_ns half the node's receiving "
                     "minus its transmitting time-zero",
            "largest_abs_time_zero_ns": float(np.nanmax(np.abs(time_zero))) if known.any() else None,
            "largest_abs_delay_ns": float(np.nanmax(np.abs(checks.delay_ns))) if known.any() else None,
            "per_node": {nodes.ids[k]: {"time_zero_ns": time_zero[k], "delay_ns": checks.delay_ns[k]}
                         for k in range(len(nodes))},
        },
        "velocity_m_per_ns": {
            "band": [o.velocity_min_m_per_ns, o.velocity_max_m_per_ns],
            "air_c": AIR_VELOCITY_M_PER_NS,
            "site_rock": checks.rock_velocity_m_per_ns,
            "fitted_to_picks": checks.fitted_velocity_m_per_ns,
        },
        "thresholds": {
            "band_sigmas": o.band_sigmas, "reciprocal_sigmas": o.reciprocal_sigmas,
            "air_tolerance_fraction": o.air_tolerance_fraction,
            "velocity_uncertainty_fraction": o.velocity_uncertainty_fraction,
            "max_implausible_fraction": o.max_implausible_fraction,
            "max_mismatch_fraction": o.max_mismatch_fraction, "max_noise_ratio": o.max_noise_ratio,
            "max_off_node_fraction": o.max_off_node_fraction, "caution_error_fraction": o.caution_error_fraction,
            "caution_flagged_fraction": o.caution_flagged_fraction, "neighbours": o.neighbours,
            "blame_score": o.blame_score, "node_score": o.node_score,
        },
        "clock_drift": drift_from_pick_checks(picks, checks, nodes.ids),
        "nodes_off_as_group": _nodes_off_summary(nodes, checks),
        "rays": rays,
        "verdict": verdict(problems, cautions),
        "usable": not problems,
        "problems": list(problems),
        "cautions": cautions,
        "put_back": ("nothing in the pick table is changed; rerun with --keep-flagged FLAG[,FLAG] to keep "
                     "flagged picks in the inversion"),
    }


# --------------------------------------------------------------------------
# figures

_COLOURS = colours.PICK_CLASS_COLOURS
#: Colour class and marker of each flag on the time-distance plot: the two air waves share the air colour
#: ("orange means air") and the two implausible velocities theirs, told apart by the marker.
_FLAG_STYLE = {
    FLAG_RECIPROCAL: ("reciprocal", "D"),
    FLAG_FASTER_THAN_AIR: ("implausible", "^"),
    FLAG_SLOWER_THAN_BAND: ("implausible", "v"),
    FLAG_AIR_DIRECT: ("air", "o"),
    FLAG_AIR_REFRACTED: ("air", "s"),
}
#: Words of the picks that carry no flag, on the plot and in the table.
NOT_FLAGGED_WORDS = "not flagged"
#: Words of the reciprocal pairs, on the reciprocity plot and in the table.
PAIRS_AGREE_WORDS = "reciprocal pairs that agree"
PAIRS_DISAGREE_WORDS = "reciprocal pairs that disagree"


def time_distance_classes(checks: PickChecks) -> list:
    """Legend entries of the time-distance plot: ``(label, mask, colour class, marker)``.

    One entry for the picks without a flag and one per flag present, each with
    the words and count of the summary table (a pick with two flags is drawn
    under both), so that the legend and the table agree.
    """
    plain = np.array([not f for f in checks.flags], dtype=bool)
    out = [(f"{NOT_FLAGGED_WORDS} ({int(plain.sum())})", plain, "kept", ".")]
    for flag in FLAGS:
        sel = checks.has(flag)
        if sel.any():
            colour_class, marker = _FLAG_STYLE[flag]
            out.append((f"{FLAG_WORDS[flag]} ({int(sel.sum())})", sel, colour_class, marker))
    return out


def _figure(width=7.0, height=4.5):
    from matplotlib.figure import Figure

    return Figure(figsize=(width, height))


def _time_distance_png(checks: PickChecks) -> bytes:
    fig = _figure()
    ax = fig.add_subplot()
    d, t = checks.distance_m, checks.corrected_time_ns
    for label, sel, colour_class, marker in time_distance_classes(checks):
        ax.scatter(d[sel], t[sel], s=4 if marker == "." else 8, marker="o" if marker == "." else marker,
                   color=_COLOURS[colour_class], alpha=0.7, label=label)
    dmax = float(d.max()) if d.size else 1.0
    xs = np.array([0.0, dmax])
    o = checks.options
    for v, style, label in ((AIR_VELOCITY_M_PER_NS, "-", "air, c"),
                            (checks.rock_velocity_m_per_ns, "--", "site rock"),
                            (checks.fitted_velocity_m_per_ns, ":", "fitted to the picks"),
                            (o.velocity_min_m_per_ns, "-.", "band minimum")):
        ax.plot(xs, xs / v, style, color=colours.REFERENCE_LINE_COLOUR, linewidth=1, label=f"{label} {v:.3f} m/ns")
    tmax = float(np.nanmax(t)) if t.size else 1.0
    ax.set_ylim(0, 1.05 * max(tmax, 1.0))
    ax.set_xlabel("distance between nodes (m)")
    ax.set_ylabel("pick time less the time-zero correction (ns)")
    ax.legend(fontsize=7, loc="upper left")
    ax.grid(alpha=0.3)
    return figure_png(fig)


def _reciprocity_png(picks: Picks, checks: PickChecks) -> bytes:
    fig = _figure(5.5, 5.0)
    ax = fig.add_subplot()
    k = np.flatnonzero((checks.reciprocal >= 0) & (np.arange(len(picks)) < checks.reciprocal))
    j = checks.reciprocal[k]
    bad = checks.pair_mismatch[k]
    t = picks.time_ns
    ax.scatter(t[k][~bad], t[j][~bad], s=4, color=_COLOURS["kept"], label=f"{PAIRS_AGREE_WORDS} ({int((~bad).sum())})")
    if bad.any():
        ax.scatter(t[k][bad], t[j][bad], s=10, color=_COLOURS["reciprocal"],
                   label=f"{PAIRS_DISAGREE_WORDS} ({int(bad.sum())})")
    top = float(max(t.max(), 1.0)) if t.size else 1.0
    ax.plot([0, top], [0, top], color=colours.REFERENCE_LINE_COLOUR, linewidth=1, label="t(A->B) = t(B->A)")
    ax.set_xlabel("t(A->B) as picked (ns)")
    ax.set_ylabel("t(B->A) as picked (ns)")
    ax.legend(fontsize=7, loc="upper left")
    ax.grid(alpha=0.3)
    return figure_png(fig)


def _histogram_png(checks: PickChecks) -> bytes:
    fig = _figure(6.0, 4.0)
    ax = fig.add_subplot()
    r = checks.residual_ns[np.isfinite(checks.residual_ns)]
    if r.size:
        lim = float(np.percentile(np.abs(r), 99.5)) or 1.0
        ax.hist(np.clip(r, -lim, lim), bins=60, color=_COLOURS["kept"])
        s = float(np.median(checks.sigma_ns))
        for x in (-3 * s, 3 * s):
            ax.axvline(x, color=colours.REFERENCE_LINE_COLOUR, linestyle="--", linewidth=1)
    ax.set_xlabel("residual against the reference (ns), clipped at the 99.5th percentile; dashed: +-3 sigma")
    ax.set_ylabel("picks")
    return figure_png(fig)


def _node_map_png(picks: Picks, nodes: Nodes, checks: PickChecks, xyz_m) -> bytes:
    fig = _figure(6.5, 5.0)
    ax = fig.add_subplot()
    median = checks.nodes.median_residual_ns
    xyz = np.asarray(xyz_m)
    ok = np.isfinite(median)
    lim = float(np.nanmax(np.abs(median))) if ok.any() else 1.0
    sc = ax.scatter(xyz[ok, 0], xyz[ok, 1], c=median[ok], cmap=colours.DIVERGING_MAP, vmin=-lim, vmax=lim, s=30,
                    edgecolors=colours.REFERENCE_LINE_COLOUR, linewidths=0.5)
    off = checks.nodes.off
    if off.any():
        ax.scatter(xyz[off, 0], xyz[off, 1], s=140, facecolors="none", edgecolors=colours.REFERENCE_LINE_COLOUR,
                   linewidths=1.5, label=f"{NODES_OFF_WORDS} ({int(off.sum())})")
    if (~ok).any():
        ax.scatter(xyz[~ok, 0], xyz[~ok, 1], marker="x", color=colours.NO_DATA_COLOUR, label="no pick")
    if off.any() or (~ok).any():
        ax.legend(fontsize=7)
    fig.colorbar(sc, ax=ax, label="median residual of the node's picks (ns):\nblue later, red earlier than the reference")
    ax.set_xlabel("x east (m)")
    ax.set_ylabel("y north (m)")
    ax.set_aspect("equal", adjustable="datalim")
    ax.grid(alpha=0.3)
    map_marks.draw_north_arrow(ax)
    map_marks.draw_scale_bar(ax, float(np.ptp(xyz[:, 0])) if len(xyz) else 1.0)
    return figure_png(fig)


#: Each flag in words, for the page (the flag's own name is what --keep-flagged takes).
FLAG_WORDS = {
    FLAG_RECIPROCAL: "reciprocal picks disagree",
    FLAG_FASTER_THAN_AIR: "faster than air (impossible)",
    FLAG_SLOWER_THAN_BAND: "slower than the velocity band",
    FLAG_AIR_DIRECT: "direct air wave",
    FLAG_AIR_REFRACTED: "refracted air wave",
}
#: Words of the nodes whose picks are off as a group, on the node map and in the table.
NODES_OFF_WORDS = "nodes off as a group"
_SIGMA_SOURCE_WORDS = {
    "table": "the pick table's sigma_ns column",
    "reciprocity": "the spread of the reciprocal pairs",
    "default": "the default (too few reciprocal pairs to estimate it)",
}
_NODE_TIME_ZERO_HEADINGS = ["node", "time-zero offset (ns)", "delay (ns)", "depth below ground (m)",
                            "picks as transmitter", "picks as receiver", "reciprocal pairs",
                            "median residual (ns)", "group score", "off as a group", "likely cause"]


def _anisotropy_png(picks, checks, xyz_m, record) -> bytes:
    """Apparent velocity of the unflagged picks against their angle to the vertical, with the fit."""
    fig = _figure(6.0, 4.0)
    ax = fig.add_subplot()
    keep = np.array([not f for f in checks.flags], dtype=bool) & (checks.corrected_time_ns > 0)
    xyz = np.asarray(xyz_m, dtype=float)
    angle = ray_angle_deg(xyz[picks.tx[keep]], xyz[picks.rx[keep]], "z")
    ax.scatter(angle, checks.apparent_velocity_m_per_ns[keep], s=4, color=_COLOURS["kept"], alpha=0.6,
               label=f"picks without a flag ({int(keep.sum())})")
    phi = np.radians(np.linspace(0.0, 90.0, 91))
    v_along, v_across = record["velocity_along_beds_m_per_ns"], record["velocity_across_beds_m_per_ns"]
    curve = 1.0 / np.sqrt(np.sin(phi) ** 2 / v_along**2 + np.cos(phi) ** 2 / v_across**2)
    ax.plot(np.degrees(phi), curve, color=colours.REFERENCE_LINE_COLOUR, linewidth=1.2,
            label=f"elliptical fit: {v_along:.4f} along, {v_across:.4f} m/ns across the beds")
    ax.set_xlabel("angle of the ray to the vertical (degrees; 90 = horizontal)")
    ax.set_ylabel("apparent velocity (m/ns)")
    ax.legend(fontsize=7, loc="lower right")
    ax.grid(alpha=0.3)
    return figure_png(fig)


def _anisotropy_html(picks, checks, xyz_m, record) -> str:
    """The anisotropy section: the fit in words and the plot."""
    if record is None:
        return ("<h2>Anisotropy</h2><p>Not estimated: fewer than 10 picks without a flag, or their rays span "
                "less than 20 degrees of angle to the vertical.</p>")
    return (f"<h2>Anisotropy</h2><p>Elliptical model, symmetry axis vertical (horizontal beds): "
            f"{escape(record['words'])}.</p>"
            + png_img_html(_anisotropy_png(picks, checks, xyz_m, record), "apparent velocity against ray angle",
                           "Apparent velocity (distance over corrected time) of the picks without a flag "
                           "against the angle of their straight ray to the vertical, with the elliptical fit."))


def _drift_html(record) -> str:
    """The clock drift section: measurable drifts per node with their standard deviations."""
    if record is None:
        return ("<h2>Clock drift</h2><p>Not estimated: the pick table has no shot_time_s column (when each "
                "shot was fired), so a clock that drifts during the survey cannot be told from one that is "
                "merely offset.</p>")
    drifting = record["drifting_nodes"]
    rows = [[node, record["per_node"][node]["drift_ns_per_h"], record["per_node"][node]["sd_ns_per_h"]]
            for node in drifting]
    largest = record["largest_abs_drift_ns_per_h"]
    text = (f"<h2>Clock drift</h2><p>Each node's clock fitted as an offset plus a drift over the "
            f"{record['survey_hours']:.2f} h of shots. {len(drifting)} node(s) drift measurably (more than "
            f"{record['measurable_above_sigmas']:g} standard deviations); largest drift "
            + ("-" if largest is None else f"{largest:.2f}")
            + f" ns per hour; estimated from {escape(record.get('estimated_from', 'the picks'))}."
            + (" The drifts are relative to their straight-line trend with each node's own firing time, "
               "which reciprocal pairs cannot see when every node fires once." if "firing time" in record["model"]
               else "")
            + " Where nodes drift, invert with --time-zero clock_drift.</p>")
    if not rows:
        return text
    return text + table_html(["node", "drift (ns per hour)", "standard deviation (ns per hour)"], rows,
                             float_format=".2f")


def _verdict_html(summary) -> str:
    """The verdict, its reasons and the rules behind it."""
    o = summary["thresholds"]
    word = summary["verdict"]
    if summary["problems"]:
        items = "".join(f"<li>{escape(p)}</li>" for p in summary["problems"] + summary["cautions"])
        text = ("<p>voidcube reconstruct invert refuses these picks unless --invert-unusable is given.</p>")
    elif summary["cautions"]:
        items = "".join(f"<li>{escape(p)}</li>" for p in summary["cautions"])
        text = ("<p>No check stops an inversion, but a good share of the data is flagged or suspect: look at "
                "the flagged picks and the nodes off as a group before trusting the result.</p>")
    else:
        items, text = "", "<p>No check stops an inversion and nothing calls for caution. Flagged picks are listed below.</p>"
    rules = (f"Not usable as it stands: more than {o['max_implausible_fraction']:.0%} of the picks outside the "
             f"velocity band, more than {o['max_mismatch_fraction']:.0%} of the reciprocal pairs disagreeing, "
             f"a pick noise over {o['max_noise_ratio']:g} times the table's sigma, or more than "
             f"{o['max_off_node_fraction']:.0%} of the picks from nodes off as a group. Usable with caution: "
             f"more than {o['caution_error_fraction']:.0%} of the picks flagged as errors, more than "
             f"{o['caution_flagged_fraction']:.0%} flagged at all, or any node off as a group (our thresholds: "
             "common practice, no published source).")
    return (f"<h2>Verdict: {escape(word)}</h2>" + (f"<ul>{items}</ul>" if items else "") + text
            + f"<p>{escape(rules)}</p>")


def summary_rows(summary, checks: PickChecks) -> list:
    """Rows ``[words, value]`` of the summary table of the page."""
    p = summary["picks"]
    counts = p["flag_counts"]
    rows = [["rows read", p["rows_read"]], ["picks checked", p["checked"]],
            ["excluded on reading", p["excluded_on_reading"]], [NOT_FLAGGED_WORDS, p["not_flagged"]],
            ["flagged (a pick may carry several flags)", p["flagged"]]]
    rows += [[f"flagged: {FLAG_WORDS[f]} ({f})", counts[f]] for f in FLAGS]
    rows += [["flagged as errors (reciprocal, faster than air, slower than the band)", p["flagged_as_errors"]],
             [NODES_OFF_WORDS, summary["nodes_off_as_group"]["count"]],
             ["picks of nodes off as a group", p["of_nodes_off_as_group"]],
             ["left out of the inversion by flags", p["excluded_by_flags"]],
             ["pick uncertainty taken from", _SIGMA_SOURCE_WORDS.get(checks.sigma_source, checks.sigma_source)],
             ["pick noise from reciprocal pairs (ns)",
              "-" if checks.noise_sigma_ns is None else f"{checks.noise_sigma_ns:.3f}"],
             ["reciprocal pairs", checks.n_reciprocal_pairs],
             [PAIRS_AGREE_WORDS, checks.n_reciprocal_pairs - checks.reciprocity["mismatched_pairs"]],
             [PAIRS_DISAGREE_WORDS, checks.reciprocity["mismatched_pairs"]],
             ["site rock velocity (m/ns)", f"{checks.rock_velocity_m_per_ns:.4f}"],
             ["velocity fitted to the picks (m/ns)", f"{checks.fitted_velocity_m_per_ns:.4f}"]]
    return rows


def _nodes_off_html(summary) -> str:
    off = summary["nodes_off_as_group"]
    if not off["nodes"]:
        return (f"<h2>Nodes off as a group</h2><p>None: every node's median residual lies within "
                f"{off['cut']:g} robust standard deviations of the others'.</p>")
    rows = [[n["node_id"], f"{n['median_residual_ns']:.2f}", n["picks"], f"{n['group_score']:.1f}", n["likely_cause"]]
            for n in off["nodes"]]
    return ("<h2>Nodes off as a group</h2><p>The median residual of these nodes' picks lies more than "
            f"{off['cut']:g} robust standard deviations from the median of all nodes' medians "
            f"({off['median_of_node_medians_ns']:.2f} ns, spread {off['spread_of_node_medians_ns']:.2f} ns). "
            "Negative: earlier than the reference. The likely cause is read from the pattern of the residuals; "
            "check the node's coordinates, height, clock and coupling.</p>"
            + table_html(["node", "median residual (ns)", "picks", "group score", "likely cause"], rows))


def _html(picks, nodes, checks, summary, xyz_m, site_name) -> str:
    parts = [_verdict_html(summary)]
    rows = summary_rows(summary, checks)
    parts.append("<h2>Summary</h2>" + table_html(["item", "value"], [[str(a), str(b)] for a, b in rows]))
    parts.append("<h2>Plots</h2>")
    parts.append(png_img_html(_time_distance_png(checks), "time against distance",
                              "Pick time corrected for the time-zero offsets against distance, with lines of "
                              "constant velocity."))
    parts.append(png_img_html(_reciprocity_png(picks, checks), "reciprocity scatter",
                              "Reciprocal pairs: time one way against time the other way."))
    parts.append(png_img_html(_histogram_png(checks), "residual histogram",
                              "Residuals against the reference: a homogeneous rock fitted to the picks (air "
                              "segments at c), or the air-wave time for air-wave picks."))
    parts.append(png_img_html(_node_map_png(picks, nodes, checks, xyz_m), "residual per node",
                              "Plan map of the nodes coloured by the median residual of their picks; "
                              "rings: nodes off as a group."))
    parts.append(_nodes_off_html(summary))
    node_rows = [["-" if v == "" else v for v in row] for row in node_time_zero_rows(picks, nodes, checks)]
    parts.append("<h2>Node time-zero offsets</h2><p>Time-zero offset: the node's clock term, relative to the "
                 "mean over the nodes; delay: half the difference between its receiving and transmitting "
                 "time-zero. A pick from A to B is corrected by the offset of B less that of A.</p>"
                 + table_html(_NODE_TIME_ZERO_HEADINGS, node_rows))
    parts.append(_drift_html(summary.get("clock_drift")))
    parts.append(_anisotropy_html(picks, checks, xyz_m, summary.get("anisotropy")))
    flagged = [r for r in pick_check_rows(picks, nodes, checks) if r[-2]][:500]
    parts.append(f"<h2>Flagged picks (first {len(flagged)})</h2>"
                 + table_html(["input line", "transmitter", "receiver", "pick time (ns)", "flags"],
                              [[r[0], r[1], r[2], r[3], "; ".join(FLAG_WORDS.get(f, f) for f in r[-2].split(";"))]
                               for r in flagged]))
    parts.append(f"<p>{escape(summary['put_back'])}.</p>")
    return html_document(f"Pick checks: {site_name}", "".join(parts))


def write_pick_checks(picks: Picks, nodes: Nodes, checks: PickChecks, problems, out_dir, *, xyz_m, site_name: str,
                      inputs: dict, parameters: dict, started: str, command: str, rays: str = "straight",
                      keep_flagged=()) -> dict:
    """Write ``pick_checks.csv``, ``node_time_zero.csv``, ``pick_checks.json``,
    ``pick_checks.html`` and, last, ``manifest.json`` into ``out_dir``; returns the summary.

    Many parameters because the manifest records the command, inputs and
    parameters of the run beside the data.
    """
    out = make_output_folder(out_dir)
    excluding = excluded_flags(rays, keep_flagged)
    summary = pick_checks_summary(picks, nodes, checks, problems, rays=rays, keep_flagged=keep_flagged)
    summary["anisotropy"] = anisotropy_from_pick_checks(picks, checks, xyz_m)
    written = [
        write_csv_atomic(out / "pick_checks.csv", PICK_CHECK_COLUMNS,
                         pick_check_rows(picks, nodes, checks, excluding)),
        write_csv_atomic(out / "node_time_zero.csv", NODE_TIME_ZERO_COLUMNS,
                         node_time_zero_rows(picks, nodes, checks)),
        write_json_atomic(out / "pick_checks.json", summary),
        write_text_atomic(out / "pick_checks.html", _html(picks, nodes, checks, summary, xyz_m, site_name)),
    ]
    manifest = build_manifest(command=command, inputs=inputs, parameters=parameters,
                              outputs=[p.name for p in written] + ["manifest.json"], started=started,
                              finished=utc_now_iso())
    write_json_atomic(out / "manifest.json", manifest)
    return summary
