"""Tests of the node and pick table readers (reconstruct.io.tables).

Outside references: values read from clean files are compared with
``numpy.loadtxt`` and the standard-library ``csv`` module; expected line
numbers are counted with ``str.splitlines``. Bad-input tests assert the
message text. All tables are invented for these tests and written to tmp_path.
"""

from __future__ import annotations

import csv
import io
import os

import numpy as np
import pytest

from reconstruct.errors import InputError
from reconstruct.io.tables import (
    EXCLUDED_NO_PICK,
    EXCLUDED_NOT_POSITIVE,
    EXCLUDED_SAME_NODE,
    ExcludedPick,
    read_nodes,
    read_picks,
    write_excluded_csv,
)

pytestmark = pytest.mark.filterwarnings("error")

NODES = """node_id,x_m,y_m,z_m,kind,borehole
T1,0.0,0.0,100.0,surface,
T2,10.5,0.0,99.25,face,
R1,0.0,20.0,80.0,borehole,BH1
R2,10.0,20.0,-1.5e1,,BH1
"""


def _write(tmp_path, name, text, encoding="utf-8"):
    path = tmp_path / name
    path.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return path


def _line_of(text, row):
    """1-based physical line of ``row`` in ``text``, counted independently."""
    return text.splitlines().index(row) + 1


@pytest.fixture
def nodes(tmp_path):
    return read_nodes(_write(tmp_path, "nodes.csv", NODES))


def _picks(tmp_path, nodes, text):
    return read_picks(_write(tmp_path, "picks.csv", text), nodes)


def _error(func, *args):
    with pytest.raises(InputError) as info:
        func(*args)
    return str(info.value)


# ---------------------------------------------------------------- clean files


def test_clean_nodes_equal_numpy_loadtxt_and_csv(tmp_path):
    path = _write(tmp_path, "nodes.csv", NODES)
    nodes = read_nodes(path)
    reference_xyz = np.loadtxt(path, delimiter=",", skiprows=1, usecols=(1, 2, 3))
    with open(path, newline="") as f:
        reference = list(csv.DictReader(f))
    np.testing.assert_array_equal(nodes.xyz_m, reference_xyz)
    assert nodes.xyz_m.dtype == np.float64 and nodes.xyz_m.shape == (4, 3)
    assert nodes.ids == tuple(r["node_id"] for r in reference)
    assert nodes.kinds == ("surface", "face", "borehole", None)
    assert nodes.boreholes == (None, None, "BH1", "BH1")
    np.testing.assert_array_equal(nodes.lines, [2, 3, 4, 5])
    assert nodes.source == str(path) and len(nodes) == 4
    assert nodes.index_of("R1") == 2
    with pytest.raises(KeyError, match="'R9' is not in the node table"):
        nodes.index_of("R9")


def test_clean_picks_equal_csv_reference(tmp_path, nodes):
    text = ("tx,rx,time_ns,sigma_ns,amplitude,quality,operator\n"
            "T1,R1,101.5,0.5,12.0,good,ann\nT2,R2,88.25,1.0,-3.5e2,fair,bob\n"
            "R1,T1,101.0,0.5,,good,ann\n")
    picks = _picks(tmp_path, nodes, text)
    reference = list(csv.DictReader(io.StringIO(text)))
    np.testing.assert_array_equal(picks.time_ns, [float(r["time_ns"]) for r in reference])
    np.testing.assert_array_equal(picks.sigma_ns, [float(r["sigma_ns"]) for r in reference])
    np.testing.assert_array_equal(picks.amplitude, [12.0, -350.0, np.nan])
    assert [nodes.ids[i] for i in picks.tx] == [r["tx"] for r in reference]
    assert [nodes.ids[i] for i in picks.rx] == [r["rx"] for r in reference]
    assert picks.quality == ("good", "fair", "good")
    assert picks.ignored_columns == ("operator",)
    assert picks.n_rows == 3 and len(picks) == 3 and picks.excluded == ()
    np.testing.assert_array_equal(picks.lines, [2, 3, 4])


def test_optional_pick_columns_absent_are_none(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,R1,50\n")
    assert picks.sigma_ns is None and picks.amplitude is None and picks.quality is None


def test_arrays_read_only_and_inputs_not_modified(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,R1,50\nT2,R2,60\n")
    for array in (nodes.xyz_m, nodes.lines, picks.tx, picks.rx, picks.time_ns, picks.lines):
        with pytest.raises(ValueError):
            array[0] = 0
    new_xyz = np.zeros((4, 3))
    snapped = nodes.with_xyz(new_xyz)
    new_xyz[0, 0] = 7.0  # the caller's array stays the caller's
    assert snapped.xyz_m[0, 0] == 0.0 and not snapped.xyz_m.flags.writeable
    assert snapped.ids == nodes.ids and nodes.xyz_m[1, 0] == 10.5


def test_subset_keeps_excluded(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns,quality\nT1,R1,50,a\nT1,R2,,\nT2,R2,60,b\n")
    part = picks.subset(np.array([False, True]))
    assert part.time_ns.tolist() == [60.0] and part.quality == ("b",)
    assert part.excluded == picks.excluded and part.n_rows == 3
    assert picks.subset([1, 0]).lines.tolist() == [4, 2]


# ------------------------------------------------- format: comments, BOM, lines


def test_comments_bom_and_line_numbers(tmp_path):
    text = ("# site: invented\n\nnode_id , x_m,y_m,z_m\n# surface nodes\n"
            " T1 , 1.0 ,2.0,3.0\n\n# face\nF1,4,5,6\n")
    nodes = read_nodes(_write(tmp_path, "nodes.csv", text, encoding="utf-8-sig"))
    assert nodes.ids == ("T1", "F1")
    assert nodes.lines.tolist() == [_line_of(text, " T1 , 1.0 ,2.0,3.0"), _line_of(text, "F1,4,5,6")]
    assert nodes.lines.tolist() == [5, 8]
    assert read_nodes(_write(tmp_path, "crlf.csv", text.replace("\n", "\r\n"))).lines.tolist() == [5, 8]


def test_error_line_counts_comments(tmp_path):
    text = "\ufeffnode_id,x_m,y_m,z_m\n# one\n# two\nT1,0,0,0\nT2,0,abc,0\n"
    message = _error(read_nodes, _write(tmp_path, "nodes.csv", text))
    assert f"line {_line_of(text, 'T2,0,abc,0')}, column y_m: 'abc' is not a number" in message
    assert "line 5" in message


def test_pick_lines_and_excluded_lines_count_comments(tmp_path, nodes):
    text = "# picks\ntx,rx,time_ns\n# shot 1\nT1,R1,50\n\nT1,R2,NaN\n# end\nT2,R2,60\n"
    picks = _picks(tmp_path, nodes, text)
    assert picks.lines.tolist() == [_line_of(text, "T1,R1,50"), _line_of(text, "T2,R2,60")] == [4, 8]
    assert picks.excluded == (ExcludedPick(6, "T1", "R2", "NaN", EXCLUDED_NO_PICK),)


def test_ignored_columns_kept(tmp_path):
    nodes = read_nodes(_write(tmp_path, "n.csv", "note,node_id,x_m,y_m,z_m,\nhi,A,1,2,3,\n"))
    assert nodes.ignored_columns == ("note", "<unnamed column 6>")


def test_missing_file_and_not_utf8(tmp_path):
    missing = tmp_path / "nope.csv"
    assert _error(read_nodes, missing) == f"{missing}: file not found; check the path"
    latin1 = _write(tmp_path, "latin1.csv", "node_id,x_m,y_m,z_m\nPuits_é,0,0,0\n", encoding="latin-1")
    message = _error(read_nodes, latin1)
    assert message.startswith(f"{latin1}: not valid UTF-8") and "line 2" in message
    assert "save the file as UTF-8" in message


# --------------------------------------------------------------- node errors


def test_missing_column_names_file_column_and_found(tmp_path):
    path = _write(tmp_path, "nodes.csv", "node_id,x_m,Y_m\nT1,0,0\n")
    message = _error(read_nodes, path)
    assert message.startswith(f"{path}: missing required columns y_m, z_m")
    assert "columns found on header line 1: node_id, x_m, Y_m" in message
    assert "'Y_m' must be written 'y_m'" in message


def test_duplicate_node_id_names_both_lines(tmp_path):
    path = _write(tmp_path, "nodes.csv", "node_id,x_m,y_m,z_m\nT1,0,0,0\nR1,1,1,1\nT1,2,2,2\n")
    message = _error(read_nodes, path)
    assert message == (f"{path}: line 4: node_id 'T1' repeats line 2; each node needs its own id: "
                       "rename or delete one of the two rows")


@pytest.mark.parametrize("text, expected", [
    ("12.3m", "'12.3m' is not a number"), ("1,000", "cells but the header has 4 columns"),
    ("nan", "'nan' is not a finite number"), ("-inf", "'-inf' is not a finite number"),
    ("", "column z_m: blank"), ("1_0", "'1_0' is not a number"),
])
def test_bad_coordinate_names_line_column_text(tmp_path, text, expected):
    path = _write(tmp_path, "nodes.csv", f"node_id,x_m,y_m,z_m\nT1,0,0,0\nT2,0,0,{text}\n")
    message = _error(read_nodes, path)
    assert message.startswith(f"{path}: line 3") and expected in message


def test_blank_id_and_unknown_kind(tmp_path):
    path = _write(tmp_path, "nodes.csv", "node_id,x_m,y_m,z_m,kind\n,0,0,0,\nT2,0,0,0,wall\n")
    message = _error(read_nodes, path)
    assert message.startswith("2 problems:")
    assert f"{path}: line 2: node_id is blank; give every node an id" in message
    assert (f"{path}: line 3, column kind: 'wall' is not allowed; use one of surface, face, "
            "borehole, or leave it blank for unspecified") in message


@pytest.mark.parametrize("text, expected", [
    ("node_id,x_m,y_m,z_m\n# only a comment\n", "no data rows after the header (line 1)"),
    ("# nothing here\n\n", "no header row"),
    ("", "no header row"),
])
def test_empty_node_table(tmp_path, text, expected):
    assert expected in _error(read_nodes, _write(tmp_path, "nodes.csv", text))


def test_all_row_problems_in_one_error_capped_at_20(tmp_path):
    rows = "".join(f"N{i},{i},x,0\n" for i in range(25))
    message = _error(read_nodes, _write(tmp_path, "nodes.csv", "node_id,x_m,y_m,z_m\n" + rows))
    assert message.startswith("21 problems:")
    assert "line 2, column y_m: 'x'" in message and "line 21, column y_m" in message
    assert "line 22, column y_m" not in message
    assert "... and 5 more problems not shown" in message


# --------------------------------------------------------------- pick errors


def test_unknown_node_ids_all_listed_with_fix(tmp_path, nodes):
    message = _error(_picks, tmp_path, nodes, "tx,rx,time_ns\nT1,R9,50\nT1,R1,50\nX1,r1,40\n")
    assert message.startswith("3 problems:")
    fix = "add it to the node table or remove the row"
    assert f"line 2: rx 'R9' is not in the node table {nodes.source}; {fix}" in message
    assert f"line 4: tx 'X1' is not in the node table {nodes.source}; {fix}" in message
    assert "line 4: rx 'r1' is not in the node table" in message and "did you mean 'R1'?" in message


def test_missing_picks_excluded_and_counted(tmp_path, nodes):
    text = "tx,rx,time_ns\nT1,R1,\nT1,R2,nan\nT2,R1,NaN\nT2,R2,NA\nR1,T1,40\n"
    picks = _picks(tmp_path, nodes, text)
    assert len(picks) == 1 and picks.n_rows == 5 and len(picks.excluded) == 4
    assert [e.reason for e in picks.excluded] == [EXCLUDED_NO_PICK] * 4
    assert EXCLUDED_NO_PICK == "no pick (blank or NaN time)"
    assert [e.line for e in picks.excluded] == [2, 3, 4, 5]
    assert [e.time_text for e in picks.excluded] == ["", "nan", "NaN", "NA"]


def test_zero_and_negative_times_excluded(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,R1,0\nT1,R2,-3.5\nT2,R1,0.1\n")
    assert picks.time_ns.tolist() == [0.1]
    assert [(e.line, e.time_text, e.reason) for e in picks.excluded] == [
        (2, "0", EXCLUDED_NOT_POSITIVE), (3, "-3.5", EXCLUDED_NOT_POSITIVE)]
    assert EXCLUDED_NOT_POSITIVE == "time <= 0 ns (before time-zero)"


def test_same_node_excluded(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,T1,5\nT1,R1,50\n")
    assert picks.excluded == (ExcludedPick(2, "T1", "T1", "5", EXCLUDED_SAME_NODE),)
    assert EXCLUDED_SAME_NODE == "transmitter and receiver are the same node"


@pytest.mark.parametrize("text, expected", [
    ("12.3ns", "line 3, column time_ns: '12.3ns' is not a number"),
    ("abc", "line 3, column time_ns: 'abc' is not a number"),
    ("inf", "line 3, column time_ns: 'inf' is not finite"),
    ("1e999", "line 3, column time_ns: '1e999' is not finite"),
])
def test_bad_time_text_is_error(tmp_path, nodes, text, expected):
    message = _error(_picks, tmp_path, nodes, f"tx,rx,time_ns\nT1,R1,50\nT1,R2,{text}\n")
    assert message.startswith(str(tmp_path / "picks.csv")) and expected in message


def test_duplicate_pair_names_both_lines(tmp_path, nodes):
    message = _error(_picks, tmp_path, nodes, "tx,rx,time_ns\nT1,R1,50\nT2,R1,55\nT1,R1,51\n")
    assert message.endswith("line 4: the pair tx 'T1' -> rx 'R1' repeats line 2; "
                            "keep one pick per transmitter-receiver pair, or average them")


def test_reciprocal_pairs_accepted(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,R1,50\nR1,T1,50.4\n")
    pairs = [(nodes.ids[a], nodes.ids[b]) for a, b in zip(picks.tx, picks.rx)]
    assert pairs == [("T1", "R1"), ("R1", "T1")]


def test_duplicate_of_excluded_row_is_not_a_duplicate(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns\nT1,R1,\nT1,R1,50\n")
    assert picks.lines.tolist() == [3] and len(picks.excluded) == 1


@pytest.mark.parametrize("sigma, expected", [
    ("0", "'0' must be a finite number > 0"), ("-1", "'-1' must be a finite number > 0"),
    ("abc", "'abc' must be a finite number > 0"), ("inf", "'inf' must be a finite number > 0"),
    ("NaN", "'NaN' must be a finite number > 0"),
    ("", "blank; give a value or remove the column"),
])
def test_bad_sigma_is_error(tmp_path, nodes, sigma, expected):
    message = _error(_picks, tmp_path, nodes, f"tx,rx,time_ns,sigma_ns\nT1,R1,50,1\nT1,R2,50,{sigma}\n")
    assert f"line 3, column sigma_ns: {expected}" in message


def test_bad_amplitude_is_error_blank_is_nan(tmp_path, nodes):
    message = _error(_picks, tmp_path, nodes, "tx,rx,time_ns,amplitude\nT1,R1,50,\nT1,R2,50,strong\n")
    assert message.endswith("line 3, column amplitude: 'strong' is not a finite number; "
                            "write a number or leave it blank")
    picks = _picks(tmp_path, nodes, "tx,rx,time_ns,amplitude\nT1,R1,50,\n")
    assert np.isnan(picks.amplitude[0])


def test_empty_pick_table_and_missing_column(tmp_path, nodes):
    message = _error(_picks, tmp_path, nodes, "# no picks yet\ntx,rx,time_ns\n")
    assert "no data rows after the header (line 2); a pick table needs at least one row" in message
    message = _error(_picks, tmp_path, nodes, "tx,rx,t_ns\nT1,R1,5\n")
    assert "missing required column time_ns; columns found on header line 1: tx, rx, t_ns" in message


# ------------------------------------------------------------------- writing


def test_write_excluded_csv_path_and_buffer(tmp_path, nodes):
    picks = _picks(tmp_path, nodes, 'tx,rx,time_ns\nT1,T1,5\nT1,R1,\n"T2",R2,-1\nT2,R1,30\n')
    out = tmp_path / "out" / "excluded.csv"
    with pytest.raises(InputError, match="check that the folder exists"):
        write_excluded_csv(picks.excluded, out)
    out.parent.mkdir()
    write_excluded_csv(picks.excluded, out)
    assert os.listdir(out.parent) == ["excluded.csv"]  # no temporary file left behind
    with open(out, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    assert list(rows[0]) == ["input_line", "tx", "rx", "time_ns", "reason"]
    assert [(r["input_line"], r["tx"], r["rx"], r["time_ns"], r["reason"]) for r in rows] == [
        ("2", "T1", "T1", "5", EXCLUDED_SAME_NODE), ("3", "T1", "R1", "", EXCLUDED_NO_PICK),
        ("4", "T2", "R2", "-1", EXCLUDED_NOT_POSITIVE)]
    buffer = io.StringIO()
    write_excluded_csv(picks.excluded, buffer)
    assert buffer.getvalue() == out.read_text(encoding="utf-8")


def test_shot_times_come_from_the_schedule_by_transmitter(tmp_path):
    # the schedule's start of each transmitter's slot is the shot time of its picks
    # (the layout of 'voidcube plan schedule': one slot per transmitter, start_s in seconds)
    from reconstruct.errors import InputError
    from reconstruct.io.tables import shot_times_from_schedule

    (tmp_path / "nodes.csv").write_text("node_id,x_m,y_m,z_m\nA,0,0,0\nB,1,0,0\nC,2,0,0\n", encoding="utf-8")
    (tmp_path / "picks.csv").write_text("tx,rx,time_ns\nA,B,10\nB,A,10\nC,A,20\n", encoding="utf-8")
    (tmp_path / "schedule.csv").write_text("slot,start_s,transmitter\n1,0.0,A\n2,25.5,B\n3,51.0,C\n4,76.5,A\n",
                                           encoding="utf-8")
    nodes = read_nodes(tmp_path / "nodes.csv")
    picks = read_picks(tmp_path / "picks.csv", nodes)
    timed = shot_times_from_schedule(picks, nodes, tmp_path / "schedule.csv")
    assert timed.shot_time_s.tolist() == [0.0, 25.5, 51.0]  # A's first slot
    assert picks.shot_time_s is None  # the picks read are not modified
    (tmp_path / "schedule.csv").write_text("slot,start_s,transmitter\n1,0.0,A\n2,x,B\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        shot_times_from_schedule(picks, nodes, tmp_path / "schedule.csv")
    message = str(info.value)
    assert "line 3, column start_s" in message and "no slot for transmitter(s) B, C" in message
