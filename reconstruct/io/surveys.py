"""Deviation surveys of boreholes and blast holes: read from the site file or a CSV, and checked.

A survey is a list of stations ``[measured depth m, inclination deg, azimuth
deg]`` (drilling convention: inclination from vertical down, 0 vertical and
90 horizontal; azimuth clockwise from north). In the site file a hole takes
either ``survey:`` (the stations as a list) or ``survey_csv:`` (a file
relative to the site file with columns ``measured_depth_m, inclination_deg,
azimuth_deg``; more columns are ignored, lines starting with ``#`` are
comments). The first station must be the collar (measured depth 0), the
depths must increase.

Every function returns the stations (a tuple of float triples) or None, with a
list of problems, each naming the field or the file and line and the fix.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

__all__ = ["SURVEY_COLUMNS", "survey_from_list", "read_survey_csv", "check_stations", "hole_deviation_rows"]

#: Columns of a survey CSV.
SURVEY_COLUMNS = ("measured_depth_m", "inclination_deg", "azimuth_deg")

_STATION_WORDS = "[measured depth m, inclination deg from vertical, azimuth deg from north]"


def _number(value):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value) if math.isfinite(value) else None


def survey_from_list(value, where: str):
    """Stations given in the site file as a list of three-number lists.

    ``where`` names the field (e.g. ``boreholes[0].survey``).
    """
    if not isinstance(value, list) or not value:
        return None, [f"{where} must be a list of stations {_STATION_WORDS} (got {value!r})"]
    stations, problems = [], []
    for i, item in enumerate(value):
        numbers = [_number(v) for v in item] if isinstance(item, list) else []
        if len(numbers) != 3 or None in numbers:
            problems.append(f"{where}[{i}] must be a station of three finite numbers {_STATION_WORDS} "
                            f"(got {item!r})")
        else:
            stations.append(tuple(numbers))
    if problems:
        return None, problems
    return check_stations(stations, where, [f"{where}[{i}]" for i in range(len(stations))])


def read_survey_csv(path: Path, where: str):
    """Stations from a survey CSV; ``where`` names the site-file field that gave the path."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        return None, [f"{where}: file {path} not found; the path is relative to the folder of the site file"]
    except UnicodeDecodeError:
        return None, [f"{where}: {path} is not a UTF-8 text file; save it as plain CSV"]
    except OSError as exc:
        return None, [f"{where}: cannot read {path} ({exc.strerror}); check the path and its permissions"]
    header, index, stations, labels, problems = None, None, [], [], []
    for lineno, line in enumerate(text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        fields = [f.strip() for f in next(csv.reader([line]))]
        if header is None:
            header = fields
            missing = [c for c in SURVEY_COLUMNS if c not in fields]
            if missing:
                return None, [f"{path} line {lineno}: the header lacks column {', '.join(missing)}; the first "
                              f"line must name {', '.join(SURVEY_COLUMNS)}"]
            index = [fields.index(c) for c in SURVEY_COLUMNS]
            continue
        values = []
        for column, i in zip(SURVEY_COLUMNS, index):
            raw = fields[i] if i < len(fields) else ""
            try:
                value = float(raw)
            except ValueError:
                value = math.nan
            if not math.isfinite(value):
                problems.append(f"{path} line {lineno}, column {column}: {raw!r} is not a finite number; "
                                "write a plain decimal number")
            values.append(value)
        if len(values) == 3 and all(math.isfinite(v) for v in values):
            stations.append(tuple(values))
            labels.append(f"{path} line {lineno}")
    if problems:
        return None, problems
    if not stations:
        return None, [f"{path}: no stations below the header; give at least the collar station"]
    return check_stations(stations, where, labels)


def check_stations(stations, where: str, labels):
    """Check the stations (collar first, depths increasing, angles in range); ``labels`` name each."""
    problems = []
    if stations[0][0] != 0.0:
        problems.append(f"{labels[0]}: the first station is at measured depth {stations[0][0]:g} m; the survey "
                        "must start at the collar: add a station [0, inclination, azimuth] first")
    for k, (md, inclination, azimuth) in enumerate(stations):
        if not 0.0 <= inclination <= 180.0:
            problems.append(f"{labels[k]}: inclination {inclination:g} deg is outside 0 to 180 (0 is vertical "
                            "down, 90 horizontal); check the column order: depth, inclination, azimuth")
        if not 0.0 <= azimuth <= 360.0:
            problems.append(f"{labels[k]}: azimuth {azimuth:g} deg is outside 0 to 360 (clockwise from north)")
        if k and md <= stations[k - 1][0]:
            problems.append(f"{labels[k]}: measured depth {md:g} m does not increase (previous station "
                            f"{stations[k - 1][0]:g} m); list the stations from the collar down, each once")
    if problems:
        return None, problems
    return tuple(stations), []


def hole_deviation_rows(boreholes, step_m: float = 0.5) -> list[dict]:
    """Planned against surveyed position of every hole that has a survey, one row per hole.

    ``offset`` is the distance between the planned straight line and the
    surveyed path at the same length along the hole, sampled every ``step_m``
    and at the toe (metres).
    """
    import numpy as np

    rows = []
    for hole in boreholes:
        if hole.survey is None:
            continue
        depth = np.unique(np.r_[np.arange(0.0, hole.length_m, step_m), hole.length_m])
        offset = np.linalg.norm(hole.point_at(depth) - hole.planned_point_at(depth), axis=1)
        worst = int(np.argmax(offset))
        planned_toe, surveyed_toe = hole.planned_point_at(hole.length_m), hole.toe_m
        rows.append({
            "hole": hole.id, "kind": hole.kind, "length_m": float(hole.length_m),
            "survey_stations": len(hole.survey),
            "planned_toe_m": [round(float(v), 3) for v in planned_toe],
            "surveyed_toe_m": [round(float(v), 3) for v in surveyed_toe],
            "toe_offset_m": float(offset[-1]),
            "largest_offset_m": float(offset[worst]), "largest_offset_at_depth_m": float(depth[worst]),
        })
    return rows
