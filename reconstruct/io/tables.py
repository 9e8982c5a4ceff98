"""Node and pick tables: reading, checking and writing the excluded picks.

Both tables are comma-separated text files (CSV) with a header row.

File format, common to both tables
----------------------------------
- UTF-8, with or without a byte-order mark. Any other encoding is refused
  with an :class:`~reconstruct.errors.InputError` naming the file and the
  byte position ("save it as UTF-8").
- A physical line whose first non-blank character is ``#`` is a comment and is
  skipped; so are blank lines and rows whose cells are all blank (spreadsheet
  exports often end with ``,,,`` rows). Comments are recognised per physical
  line, so a quoted cell must not continue onto a line starting with ``#``.
- The first remaining row is the header. Column names and cells are trimmed
  of surrounding whitespace. Names are case-sensitive; a wrong-case name is
  reported as missing with a hint. A repeated name of a column this module
  reads is an error (which one would count?).
- Unknown columns are ignored; their names are kept in ``ignored_columns``
  (a column with a blank name appears as ``<unnamed column N>``).
- Line numbers in messages are 1-based *physical* lines of the file, so they
  match a text editor: comments and blank lines are counted. A row whose
  quoted cell spans lines is reported at the line where it starts.
- A row with fewer cells than the header, or with non-blank cells beyond the
  header, is an error (usually a missing or extra comma).
- Numbers are plain decimals with optional exponent (``12.5``, ``-3``,
  ``1.2e3``); ``nan``/``inf`` spellings are recognised so they can be reported
  as such. Anything else (``12.3ns``, ``1_000``, ``abc``) is not a number.
- Every row problem in a file is collected into ONE InputError (the first 20
  are shown, then ``... and N more``), so a user fixes a file in one pass.
- A missing, unreadable or non-UTF-8 file is an InputError naming the path.

Nodes table (:func:`read_nodes`)
--------------------------------
Required columns ``node_id, x_m, y_m, z_m`` (metres; x east, y north,
z elevation up). Optional ``kind`` (``surface``, ``face`` or ``borehole``,
case-insensitive and stored lower case; blank means unspecified, ``None``),
``borehole`` (an id; blank is ``None``) and ``depth_along_hole_m`` (the
node's length along its hole from the collar, metres; blank is unknown). A
node with a hole and a depth along it in a hole that has a deviation survey
takes its position from the survey (:func:`nodes_on_surveyed_holes`).

======================================  ===========================================
Input                                   Decision
======================================  ===========================================
required column missing                 error naming the file, the missing
                                        column(s) and the columns found
blank node_id                           error naming the line
node_id repeated                        error naming the file and BOTH lines
                                        (ids are case-sensitive, trimmed)
coordinate blank, text, NaN or inf      error naming line, column and the text
depth_along_hole_m text, NaN, negative  error naming line, column and the text
kind not one of the allowed values      error naming line, text and the allowed values
no data rows (or no header at all)      error
======================================  ===========================================

Picks table (:func:`read_picks`)
--------------------------------
Required columns ``tx, rx, time_ns`` (node ids and first-arrival time in
nanoseconds after time-zero). Optional ``sigma_ns`` (standard deviation of the
pick, ns), ``amplitude`` (any unit; may be negative), ``quality`` (free
text, kept as a trimmed string) and ``shot_time_s`` (when the shot was
fired, seconds from any fixed origin such as the start of the survey; for
the clock-drift time-zero model). Read against a :class:`Nodes` table.

=========================================  =========================================
Input                                      Decision
=========================================  =========================================
tx or rx blank                             error naming the line
tx or rx not in the node table             error naming line and id: "add it to the
                                           node table or remove the row"; all such
                                           rows in the one error
time_ns blank, ``nan`` or ``NA``           row EXCLUDED, "no pick (blank or NaN
(any case)                                 time)"
time_ns text (``12.3ns``, ``abc``)         error naming line and text
time_ns infinite                           error naming line
tx == rx                                   row EXCLUDED, "transmitter and receiver
                                           are the same node"
time_ns <= 0                               row EXCLUDED, "time <= 0 ns (before
                                           time-zero)"
same ordered (tx, rx) pair in two kept     error naming both lines ("keep one pick per
rows                                       transmitter-receiver pair, or average
                                           them"); A->B and B->A are reciprocal
                                           pairs and both are kept
sigma_ns (column present) blank            error: "give a value or remove the column"
sigma_ns text, NaN, inf or <= 0            error naming line and text
amplitude text or inf                      error naming line; blank or NaN -> NaN
no data rows                               error
=========================================  =========================================

An excluded row gets the first reason that applies, in the order: no pick,
same node, time <= 0. Ids are checked on every row (an unknown id is a table
mistake whatever the time says); ``sigma_ns`` and ``amplitude`` are checked on
kept rows only, because a missing pick usually has blank cells throughout.
A table whose rows are all excluded is returned as it is (zero picks, all
rows in ``excluded``): the caller decides whether that is fatal.

Classes
-------
:class:`Nodes` and :class:`Picks` are frozen dataclasses holding read-only
numpy arrays. They compare by identity (``eq=False``): the generated
field-wise ``==`` would compare numpy arrays, which has no single truth value,
and the generated hash would fail on arrays.
"""

from __future__ import annotations

import csv
import errno
import io
import math
import os
import re
from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np

from reconstruct.errors import InputError
from reconstruct.io.outputs import write_text_atomic

__all__ = [
    "Nodes",
    "Picks",
    "ExcludedPick",
    "read_nodes",
    "nodes_on_surveyed_holes",
    "shot_times_from_schedule",
    "read_picks",
    "write_excluded_csv",
    "NODE_KINDS",
    "EXCLUDED_NO_PICK",
    "EXCLUDED_SAME_NODE",
    "EXCLUDED_NOT_POSITIVE",
]

#: Allowed values of the optional ``kind`` column of the node table.
NODE_KINDS = ("surface", "face", "borehole")

#: Reasons given to excluded pick rows (compare against these, not literals).
EXCLUDED_NO_PICK = "no pick (blank or NaN time)"
EXCLUDED_SAME_NODE = "transmitter and receiver are the same node"
EXCLUDED_NOT_POSITIVE = "time <= 0 ns (before time-zero)"

_NODE_REQUIRED = ("node_id", "x_m", "y_m", "z_m")
_NODE_OPTIONAL = ("kind", "borehole", "depth_along_hole_m")
_PICK_REQUIRED = ("tx", "rx", "time_ns")
_PICK_OPTIONAL = ("sigma_ns", "amplitude", "quality", "shot_time_s")

_MAX_SHOWN = 20
_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?", re.ASCII)
_SPECIAL = re.compile(r"[+-]?(?:nan|inf|infinity)", re.ASCII | re.IGNORECASE)
_MISSING_TIME = {"", "nan", "+nan", "-nan", "na"}


# --------------------------------------------------------------------------
# dataclasses


def _readonly(array) -> np.ndarray:
    array = np.array(array, copy=True)
    array.setflags(write=False)
    return array


@dataclass(frozen=True, eq=False)
class Nodes:
    """Transmitter and receiver positions.

    Parameters
    ----------
    ids : tuple of str
        Node ids, unique, non-blank.
    xyz_m : ndarray, shape (n, 3)
        Positions (x east, y north, z elevation up) in metres; stored as a
        read-only float64 copy.
    kinds : tuple of (str or None)
        ``"surface"``, ``"face"``, ``"borehole"`` or None (unspecified).
    boreholes : tuple of (str or None)
        Borehole id of each node, or None.
    lines : ndarray, shape (n,)
        Source line of each node in its file (1-based physical line).
    source : str
        Path of the file the nodes came from, as given.
    ignored_columns : tuple of str
        Names of columns of the file that were not read.
    depth_along_hole_m : ndarray, shape (n,), or None
        Length along its hole from the collar of each node (metres; NaN where
        not given); None when the table has no such column.

    Raises
    ------
    ValueError
        If the arguments do not fit together (shapes, repeated ids, non-finite
        positions, unknown kind); the message names the argument.
    """

    ids: tuple[str, ...]
    xyz_m: np.ndarray
    kinds: tuple[str | None, ...]
    boreholes: tuple[str | None, ...]
    lines: np.ndarray
    source: str
    ignored_columns: tuple[str, ...] = ()
    depth_along_hole_m: np.ndarray | None = None

    def __post_init__(self):
        ids = tuple(str(i) for i in self.ids)
        n = len(ids)
        xyz = np.asarray(self.xyz_m, dtype=np.float64)
        if xyz.shape != (n, 3):
            raise ValueError(f"xyz_m has shape {xyz.shape}, expected ({n}, 3) for {n} ids")
        if not np.all(np.isfinite(xyz)):
            raise ValueError("xyz_m must be finite")
        if len(set(ids)) != n:
            raise ValueError("ids must be unique")
        kinds = tuple(self.kinds)
        boreholes = tuple(self.boreholes)
        lines = np.asarray(self.lines, dtype=np.int64)
        for name, value in (("kinds", kinds), ("boreholes", boreholes), ("lines", lines)):
            if len(value) != n:
                raise ValueError(f"{name} has length {len(value)}, expected {n}")
        bad = [k for k in kinds if k is not None and k not in NODE_KINDS]
        if bad:
            raise ValueError(f"kinds must be one of {', '.join(NODE_KINDS)} or None (got {bad[0]!r})")
        object.__setattr__(self, "ids", ids)
        object.__setattr__(self, "xyz_m", _readonly(xyz))
        object.__setattr__(self, "kinds", kinds)
        object.__setattr__(self, "boreholes", boreholes)
        object.__setattr__(self, "lines", _readonly(lines))
        object.__setattr__(self, "source", str(self.source))
        object.__setattr__(self, "ignored_columns", tuple(self.ignored_columns))
        if self.depth_along_hole_m is not None:
            depth = np.asarray(self.depth_along_hole_m, dtype=np.float64)
            if depth.shape != (n,):
                raise ValueError(f"depth_along_hole_m has shape {depth.shape}, expected ({n},)")
            object.__setattr__(self, "depth_along_hole_m", _readonly(depth))

    def __len__(self) -> int:
        return len(self.ids)

    @cached_property
    def _index(self) -> dict[str, int]:
        return {node_id: i for i, node_id in enumerate(self.ids)}

    def index_of(self, node_id: str) -> int:
        """Row index of ``node_id``; KeyError if the id is unknown."""
        try:
            return self._index[node_id]
        except KeyError:
            raise KeyError(f"node id {node_id!r} is not in the node table {self.source}") from None

    def with_xyz(self, xyz_m) -> "Nodes":
        """Copy with new positions (metres, shape (n, 3)), e.g. after snapping
        nodes to the ground surface. Everything else is kept."""
        return replace(self, xyz_m=xyz_m)


@dataclass(frozen=True)
class ExcludedPick:
    """A pick row that was read but left out, with the reason.

    ``line`` is the row's input line in the pick table (written as column
    ``input_line``); ``time_text`` is the time cell exactly as written (trimmed).
    """

    line: int
    tx: str
    rx: str
    time_text: str
    reason: str


@dataclass(frozen=True, eq=False)
class Picks:
    """First-arrival travel times between pairs of nodes.

    Parameters
    ----------
    tx, rx : ndarray of int, shape (m,)
        Row indices into the :class:`Nodes` table of transmitter and receiver.
    time_ns : ndarray of float64, shape (m,)
        Travel time in nanoseconds after time-zero, finite and > 0 when read
        from a file.
    sigma_ns : ndarray of float64, shape (m,), or None
        Standard deviation of each pick in ns; None when the column is absent.
    amplitude : ndarray of float64, shape (m,), or None
        Amplitude of each pick (NaN where blank); None when the column is absent.
    quality : tuple of str, or None
        Free-text quality of each pick; None when the column is absent.
    lines : ndarray of int, shape (m,)
        Source line of each pick (1-based physical line).
    excluded : tuple of ExcludedPick
        Rows that were read but left out, with their reasons.
    source : str
        Path of the file, as given.
    n_rows : int
        Data rows read from the file (kept + excluded). Unchanged by
        :meth:`subset`.
    ignored_columns : tuple of str
        Names of columns of the file that were not read.
    """

    tx: np.ndarray
    rx: np.ndarray
    time_ns: np.ndarray
    sigma_ns: np.ndarray | None
    amplitude: np.ndarray | None
    quality: tuple[str, ...] | None
    lines: np.ndarray
    excluded: tuple[ExcludedPick, ...]
    source: str
    n_rows: int
    ignored_columns: tuple[str, ...] = ()
    shot_time_s: np.ndarray | None = None

    def __post_init__(self):
        time_ns = np.asarray(self.time_ns, dtype=np.float64)
        if time_ns.ndim != 1:
            raise ValueError(f"time_ns has shape {time_ns.shape}, expected (m,)")
        m = time_ns.shape[0]

        def vector(name, value, dtype):
            array = np.asarray(value, dtype=dtype)
            if array.shape != (m,):
                raise ValueError(f"{name} has shape {array.shape}, expected ({m},)")
            return _readonly(array)

        for name in ("tx", "rx", "lines"):
            object.__setattr__(self, name, vector(name, getattr(self, name), np.int64))
        object.__setattr__(self, "time_ns", _readonly(time_ns))
        for name in ("sigma_ns", "amplitude", "shot_time_s"):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, vector(name, getattr(self, name), np.float64))
        if self.quality is not None:
            quality = tuple(str(q) for q in self.quality)
            if len(quality) != m:
                raise ValueError(f"quality has length {len(quality)}, expected {m}")
            object.__setattr__(self, "quality", quality)
        if np.any(self.tx < 0) or np.any(self.rx < 0):
            raise ValueError("tx and rx must be non-negative node indices")
        object.__setattr__(self, "excluded", tuple(self.excluded))
        object.__setattr__(self, "source", str(self.source))
        object.__setattr__(self, "n_rows", int(self.n_rows))
        object.__setattr__(self, "ignored_columns", tuple(self.ignored_columns))

    def __len__(self) -> int:
        return int(self.time_ns.shape[0])

    def subset(self, mask_or_index) -> "Picks":
        """Picks selected by a boolean mask of length m or an integer index.

        ``excluded``, ``source`` and ``n_rows`` are kept unchanged: they
        describe the file, not the selection.
        """
        sel = np.asarray(mask_or_index)
        if sel.size == 0:
            sel = np.zeros(0, dtype=np.int64)
        if sel.dtype == bool:
            if sel.shape != (len(self),):
                raise ValueError(f"mask has shape {sel.shape}, expected ({len(self)},)")
            sel = np.flatnonzero(sel)
        elif not np.issubdtype(sel.dtype, np.integer) or sel.ndim != 1:
            raise ValueError("mask_or_index must be a boolean mask or a 1-D integer index")

        def take(value):
            return None if value is None else value[sel]

        quality = None if self.quality is None else tuple(self.quality[i] for i in sel)
        return replace(
            self,
            tx=self.tx[sel],
            rx=self.rx[sel],
            time_ns=self.time_ns[sel],
            sigma_ns=take(self.sigma_ns),
            amplitude=take(self.amplitude),
            quality=quality,
            lines=self.lines[sel],
            shot_time_s=take(self.shot_time_s),
        )


# --------------------------------------------------------------------------
# reading


def _raise_if(problems: list[str], source: str) -> None:
    if not problems:
        return
    shown = problems[:_MAX_SHOWN]
    if len(problems) > _MAX_SHOWN:
        shown.append(
            f"... and {len(problems) - _MAX_SHOWN} more problems not shown; "
            "fix the ones above and read again"
        )
    raise InputError(shown, source=source)


def _read_text(path, source: str) -> str:
    try:
        with open(path, "rb") as f:
            data = f.read()
    except FileNotFoundError:
        raise InputError(f"{source}: file not found; check the path", source=source) from None
    except IsADirectoryError:
        raise InputError(f"{source}: is a folder, expected a CSV file", source=source) from None
    except OSError as exc:
        raise InputError(
            f"{source}: cannot read the file ({exc.strerror or exc}); check the path and permissions",
            source=source,
        ) from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise InputError(
            f"{source}: not valid UTF-8 (byte {exc.start}, line {line}); "
            "save the file as UTF-8 (CSV UTF-8)",
            source=source,
        ) from None


class _Lines:
    """Feeds non-comment physical lines to csv.reader, remembering their numbers."""

    def __init__(self, text: str):
        self._lines = io.StringIO(text, newline="")
        self.numbers: list[int] = []
        self._count = 0

    def __iter__(self):
        for raw in self._lines:
            self._count += 1
            if raw.lstrip().startswith("#"):
                continue
            self.numbers.append(self._count)
            yield raw


def _records(text: str, source: str):
    """Yield ``(line, cells)`` for every non-blank, non-comment CSV record."""
    feeder = _Lines(text)
    reader = csv.reader(iter(feeder))
    while True:
        used = len(feeder.numbers)
        try:
            row = next(reader)
        except StopIteration:
            return
        except csv.Error as exc:
            line = feeder.numbers[-1] if feeder.numbers else 1
            raise InputError(
                f"line {line}: cannot be read as CSV ({exc}); check quotes and remove odd characters",
                source=source,
            ) from None
        cells = [c.strip() for c in row]
        if any(cells):
            yield feeder.numbers[used], cells


def _table(path, required, optional, what):
    """Read a CSV table: header checks, then rows as ``(line, {column: cell})``.

    Returns ``(source, rows, problems, ignored_columns, present)``: the
    problems found so far (row widths), and ``present`` the set of the
    required and optional columns that the header names.
    """
    if isinstance(path, (str, bytes, os.PathLike)):
        source = os.fsdecode(os.fspath(path))
    else:
        source = str(path)
    text = _read_text(path, source)
    records = _records(text, source)
    header = next(records, None)
    if header is None:
        raise InputError(
            "no header row; the first line that is not a comment must name the columns "
            + ", ".join(required),
            source=source,
        )
    header_line, names = header
    known = set(required) | set(optional)
    missing = [c for c in required if c not in names]
    if missing:
        hints = []
        lower = {n.lower(): n for n in names}
        for c in missing:
            if c in lower:
                hints.append(f"'{lower[c]}' must be written '{c}' (names are case-sensitive)")
        found = ", ".join(n if n else "<blank>" for n in names)
        message = (
            f"missing required column{'s' if len(missing) > 1 else ''} {', '.join(missing)}; "
            f"columns found on header line {header_line}: {found}. "
            f"A {what} table needs the columns {', '.join(required)}"
        )
        if hints:
            message += "; " + "; ".join(hints)
        raise InputError(message, source=source)
    repeated = sorted({n for n in names if n in known and names.count(n) > 1})
    if repeated:
        raise InputError(
            f"header line {header_line}: column {', '.join(repeated)} appears more than once; keep one",
            source=source,
        )
    ignored = tuple(
        n if n else f"<unnamed column {i + 1}>" for i, n in enumerate(names) if n not in known
    )
    position = {n: names.index(n) for n in known if n in names}

    problems: list[str] = []
    rows = []
    width = len(names)
    for line, cells in records:
        if len(cells) < width:
            problems.append(
                f"line {line}: {len(cells)} cells but the header has {width} columns; "
                "check for a missing comma"
            )
            continue
        if any(cells[width:]):
            problems.append(
                f"line {line}: {len(cells)} cells but the header has {width} columns; "
                "check for an extra comma"
            )
            continue
        rows.append((line, {n: cells[i] for n, i in position.items()}))
    if not rows and not problems:
        raise InputError(
            f"no data rows after the header (line {header_line}); a {what} table needs at least one row",
            source=source,
        )
    return source, rows, problems, ignored, set(position)


def _number(text: str) -> float | None:
    """The float written in ``text``, or None when it is not a plain number."""
    if _NUMBER.fullmatch(text) or _SPECIAL.fullmatch(text):
        return float(text)
    return None


def _pick_shot_time(text: str, line: int, problems: list) -> float:
    """The shot time of a pick row (seconds); a problem when blank or not a finite number."""
    value = _number(text) if text else None
    if value is None or not math.isfinite(value):
        problems.append(f"line {line}, column shot_time_s: '{text}' is not a time in seconds; give every pick "
                        "the time its shot was fired (seconds from the start of the survey), or drop the column")
        return math.nan
    return value


def _depth_along_hole(text: str, line: int, problems: list):
    """The depth along the hole of a node table row: NaN when blank, None (a problem added) when bad."""
    if not text:
        return math.nan
    value = _number(text)
    if value is None or not math.isfinite(value) or value < 0:
        problems.append(f"line {line}, column depth_along_hole_m: '{text}' is not a length >= 0; give the "
                        "node's length along its hole from the collar in metres, or leave it blank")
        return None
    return value


def nodes_on_surveyed_holes(nodes: Nodes, boreholes) -> tuple[Nodes, np.ndarray]:
    """Node positions from the deviation surveys of their holes.

    A node that names a hole with a survey (``Borehole.survey``) and gives its
    depth along the hole takes the surveyed position at that depth (minimum
    curvature, :mod:`reconstruct.model.deviation`); every other node keeps the
    table's position.

    Parameters
    ----------
    nodes : Nodes
    boreholes : sequence of reconstruct.io.site.Borehole

    Returns
    -------
    nodes : Nodes
        With the surveyed positions.
    shift_m : ndarray, shape (n,)
        How far each node moved from the table's position (0 where it kept it).
    """
    shift = np.zeros(len(nodes))
    if nodes.depth_along_hole_m is None:
        return nodes, shift
    holes = {h.id: h for h in boreholes if h.survey is not None}
    xyz = np.array(nodes.xyz_m, dtype=float)
    for k, (hole_id, depth) in enumerate(zip(nodes.boreholes, nodes.depth_along_hole_m)):
        if hole_id in holes and np.isfinite(depth):
            xyz[k] = holes[hole_id].point_at(float(depth))
    shift = np.linalg.norm(xyz - nodes.xyz_m, axis=1)
    return (nodes.with_xyz(xyz) if shift.any() else nodes), shift


def read_nodes(path) -> Nodes:
    """Read a node table (see the module docstring for the format).

    Parameters
    ----------
    path : str or path-like
        CSV file with columns ``node_id, x_m, y_m, z_m`` and optional
        ``kind`` and ``borehole``; coordinates in metres.

    Returns
    -------
    Nodes

    Raises
    ------
    InputError
        Listing every problem in the file with its line.
    """
    source, rows, problems, ignored, present = _table(path, _NODE_REQUIRED, _NODE_OPTIONAL, "node")
    ids, xyz, kinds, boreholes, depths, lines = [], [], [], [], [], []
    first_line: dict[str, int] = {}
    for line, cell in rows:
        ok = True
        node_id = cell["node_id"]
        if not node_id:
            problems.append(f"line {line}: node_id is blank; give every node an id")
            ok = False
        elif node_id in first_line:
            problems.append(
                f"line {line}: node_id '{node_id}' repeats line {first_line[node_id]}; "
                "each node needs its own id: rename or delete one of the two rows"
            )
            ok = False
        else:
            first_line[node_id] = line
        point = []
        for column in ("x_m", "y_m", "z_m"):
            text = cell[column]
            value = _number(text)
            if not text:
                problems.append(f"line {line}, column {column}: blank; give the coordinate in metres")
            elif value is None:
                problems.append(
                    f"line {line}, column {column}: '{text}' is not a number; "
                    "write the coordinate in metres as a plain number such as 12.5"
                )
            elif not math.isfinite(value):
                problems.append(
                    f"line {line}, column {column}: '{text}' is not a finite number; "
                    "give the coordinate in metres"
                )
            else:
                point.append(value)
                continue
            ok = False
        kind = cell.get("kind", "") or None
        if kind is not None:
            kind = kind.lower()
            if kind not in NODE_KINDS:
                problems.append(
                    f"line {line}, column kind: '{cell['kind']}' is not allowed; "
                    f"use one of {', '.join(NODE_KINDS)}, or leave it blank for unspecified"
                )
                ok = False
        depth = _depth_along_hole(cell.get("depth_along_hole_m", ""), line, problems)
        if ok and depth is not None:
            ids.append(node_id)
            xyz.append(point)
            kinds.append(kind)
            boreholes.append(cell.get("borehole", "") or None)
            depths.append(depth)
            lines.append(line)
    _raise_if(problems, source)
    return Nodes(
        ids=tuple(ids),
        xyz_m=np.asarray(xyz, dtype=np.float64).reshape(-1, 3),
        kinds=tuple(kinds),
        boreholes=tuple(boreholes),
        lines=np.asarray(lines, dtype=np.int64),
        source=source,
        ignored_columns=ignored,
        depth_along_hole_m=np.asarray(depths, dtype=np.float64) if "depth_along_hole_m" in present else None,
    )


def _node_index(nodes: Nodes, column: str, node_id: str, line: int, problems: list[str]) -> int | None:
    if not node_id:
        problems.append(f"line {line}, column {column}: blank; give the node id")
        return None
    try:
        return nodes.index_of(node_id)
    except KeyError:
        pass
    near = [i for i in nodes.ids if i.lower() == node_id.lower()]
    hint = f" (ids are case-sensitive: did you mean '{near[0]}'?)" if len(near) == 1 else ""
    problems.append(
        f"line {line}: {column} '{node_id}' is not in the node table {nodes.source}{hint}; "
        "add it to the node table or remove the row"
    )
    return None


def _pick_time(time_text: str, line: int, problems: list[str]):
    """``(time_ns, reason)`` of a pick's time cell: NaN and a reason to leave the row
    out for a missing pick; NaN and a problem added for bad text."""
    if time_text.lower() in _MISSING_TIME:
        return math.nan, EXCLUDED_NO_PICK
    value = _number(time_text)
    if value is None:
        problems.append(
            f"line {line}, column time_ns: '{time_text}' is not a number; write the time in "
            "nanoseconds as a plain number such as 12.3, or leave it blank for a missing pick"
        )
    elif not math.isfinite(value):
        problems.append(
            f"line {line}, column time_ns: '{time_text}' is not finite; give the time in "
            "nanoseconds, or leave it blank for a missing pick"
        )
    else:
        return value, None
    return math.nan, None


def _pick_sigma(text: str, line: int, problems: list[str]):
    """The pick's sigma_ns (None, with a problem added, when it is not a finite number > 0)."""
    sigma = _number(text) if text else None
    if not text:
        problems.append(
            f"line {line}, column sigma_ns: blank; give a value or remove the column"
        )
    elif sigma is None or not math.isfinite(sigma) or sigma <= 0:
        problems.append(
            f"line {line}, column sigma_ns: '{text}' must be a finite number > 0 "
            "(the standard deviation of the pick in ns)"
        )
    return sigma


def _pick_amplitude(text: str, line: int, problems: list[str]):
    """The pick's amplitude (NaN when blank; None, with a problem added, when not finite)."""
    amp = _number(text) if text else math.nan
    if amp is None or math.isinf(amp):
        problems.append(
            f"line {line}, column amplitude: '{text}' is not a finite number; "
            "write a number or leave it blank"
        )
    return amp


def read_picks(path, nodes: Nodes) -> Picks:
    """Read a pick table against a node table (see the module docstring).

    Parameters
    ----------
    path : str or path-like
        CSV file with columns ``tx, rx, time_ns`` and optional ``sigma_ns``,
        ``amplitude``, ``quality``; times in nanoseconds.
    nodes : Nodes
        The node table the ids in ``tx`` and ``rx`` refer to.

    Returns
    -------
    Picks
        Kept picks; the rows left out are in ``Picks.excluded`` with reasons.

    Raises
    ------
    InputError
        Listing every problem in the file with its line.
    """
    if not isinstance(nodes, Nodes):
        raise TypeError(f"nodes must be a Nodes table (got {type(nodes).__name__})")
    source, rows, problems, ignored, present = _table(path, _PICK_REQUIRED, _PICK_OPTIONAL, "pick")
    has_sigma, has_amp, has_quality, has_shot_time = (c in present for c in _PICK_OPTIONAL)
    kept = {k: [] for k in ("tx", "rx", "time", "sigma", "amp", "quality", "line", "shot")}
    excluded: list[ExcludedPick] = []
    first_line: dict[tuple[int, int], int] = {}
    for line, cell in rows:
        n_before = len(problems)
        tx_id, rx_id, time_text = cell["tx"], cell["rx"], cell["time_ns"]
        tx = _node_index(nodes, "tx", tx_id, line, problems)
        rx = _node_index(nodes, "rx", rx_id, line, problems)
        time_ns, reason = _pick_time(time_text, line, problems)
        if len(problems) > n_before:
            continue
        if reason is None and tx == rx:
            reason = EXCLUDED_SAME_NODE
        if reason is None and time_ns <= 0:
            reason = EXCLUDED_NOT_POSITIVE
        if reason is not None:
            excluded.append(ExcludedPick(line, tx_id, rx_id, time_text, reason))
            continue
        sigma = _pick_sigma(cell["sigma_ns"], line, problems) if has_sigma else math.nan
        amp = _pick_amplitude(cell["amplitude"], line, problems) if has_amp else math.nan
        shot = _pick_shot_time(cell["shot_time_s"], line, problems) if has_shot_time else math.nan
        pair = (tx, rx)
        if pair in first_line:
            problems.append(
                f"line {line}: the pair tx '{tx_id}' -> rx '{rx_id}' repeats line {first_line[pair]}; "
                "keep one pick per transmitter-receiver pair, or average them"
            )
        if len(problems) > n_before:
            continue
        first_line[pair] = line
        for key, value in zip(kept, (tx, rx, time_ns, sigma, amp, cell.get("quality", ""), line, shot)):
            kept[key].append(value)
    _raise_if(problems, source)
    return Picks(
        tx=np.asarray(kept["tx"], dtype=np.int64),
        rx=np.asarray(kept["rx"], dtype=np.int64),
        time_ns=np.asarray(kept["time"], dtype=np.float64),
        sigma_ns=np.asarray(kept["sigma"], dtype=np.float64) if has_sigma else None,
        amplitude=np.asarray(kept["amp"], dtype=np.float64) if has_amp else None,
        quality=tuple(kept["quality"]) if has_quality else None,
        lines=np.asarray(kept["line"], dtype=np.int64),
        excluded=tuple(excluded),
        source=source,
        n_rows=len(rows),
        ignored_columns=ignored,
        shot_time_s=np.asarray(kept["shot"], dtype=np.float64) if has_shot_time else None,
    )


# --------------------------------------------------------------------------
# writing


def _write_excluded_rows(excluded, f) -> None:
    writer = csv.writer(f, lineterminator="\n")
    writer.writerow(["input_line", "tx", "rx", "time_ns", "reason"])
    for e in excluded:
        writer.writerow([e.line, e.tx, e.rx, e.time_text, e.reason])


def write_excluded_csv(excluded, path_or_buffer) -> None:
    """Write excluded pick rows as CSV with columns ``input_line,tx,rx,time_ns,reason``.

    ``input_line`` is the row's line in the pick table; ``time_ns`` holds the
    time cell as it was written there.

    Parameters
    ----------
    excluded : iterable of ExcludedPick
    path_or_buffer : str, path-like or text file object
        A path is written atomically (a temporary file in the same folder,
        then :func:`os.replace`), so a reader never sees half a file. A file
        object is written to as it is and not closed.

    Raises
    ------
    InputError
        If the path cannot be written (missing folder, no permission).
    """
    excluded = tuple(excluded)
    if hasattr(path_or_buffer, "write"):
        _write_excluded_rows(excluded, path_or_buffer)
        return
    path = os.fspath(path_or_buffer)
    buffer = io.StringIO()
    _write_excluded_rows(excluded, buffer)
    try:
        if not os.path.isdir(os.path.dirname(os.path.abspath(path))):
            # the one atomic writer would create the folder; here a missing one is the user's mistake
            raise FileNotFoundError(errno.ENOENT, os.strerror(errno.ENOENT))
        write_text_atomic(path, buffer.getvalue())
    except OSError as exc:
        raise InputError(
            f"{path}: cannot write the excluded-picks table ({exc.strerror or exc}); "
            "check that the folder exists and is writable",
            source=str(path),
        ) from None


def shot_times_from_schedule(picks: Picks, nodes: Nodes, path) -> Picks:
    """Picks with shot times taken from a shot schedule (``voidcube plan schedule``'s ``schedule.csv``).

    The schedule lists one row per slot with the columns ``transmitter`` (a
    node id) and ``start_s`` (seconds from the start of the survey); each
    pick takes the start of its transmitter's slot. A transmitter in several
    slots takes its first. Picks that already carry ``shot_time_s`` keep it.

    Raises
    ------
    InputError
        A missing or unreadable file or column, a start that is not a number
        (naming the line), or picks whose transmitter has no slot (naming the
        nodes).
    """
    if picks.shot_time_s is not None:
        return picks
    source, rows, problems, _, _ = _table(path, ("transmitter", "start_s"), (), "schedule")
    start: dict[str, float] = {}
    for line, cell in rows:
        value = _number(cell["start_s"])
        if value is None or not math.isfinite(value):
            problems.append(f"line {line}, column start_s: '{cell['start_s']}' is not a time in seconds")
            continue
        start.setdefault(cell["transmitter"], value)
    missing = sorted({nodes.ids[k] for k in np.unique(picks.tx)} - set(start))
    if missing:
        problems.append(f"no slot for transmitter(s) {', '.join(missing[:20])}"
                        + (f" and {len(missing) - 20} more" if len(missing) > 20 else "")
                        + "; give the schedule of this survey, or a shot_time_s column in the pick table")
    _raise_if(problems, source)
    return replace(picks, shot_time_s=np.array([start[nodes.ids[k]] for k in picks.tx], dtype=float))
