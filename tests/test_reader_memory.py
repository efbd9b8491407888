"""The quote-free CSV reader, which looks at the bytes piece by piece and reads undeclared
columns as categorical text, gives the same tables and findings as the csv-module reader.

The oracle is the reader's other path (``_csv_quoted``: Python's csv module, every cell a
str), run on the same bytes. The pieces and the blocks of undeclared cells are made tiny so
that every boundary case (a piece of one line, a block of one record) is met. Memory itself
is measured by ``bench/bench_reader_memory.py``; here only the form of what is kept.
"""
from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from generator.findings import Findings
from generator.inputs import reader
from generator.inputs.spec import FILES

from .progkit import random_lines

PEOPLE = next(f for f in FILES if f.name == "people")
AUDIOGRAMS = next(f for f in FILES if f.name == "audiograms")
P_HEAD = "person_id,group,sex,birth_date,hire_date"
P_ROWS = ["E001,G1,M,1970-01-02,2000-03-04", "E002,G1,F,1980-05-06,2001-07-08", "E003,G2,F,,2002-09-10"]
A_HEAD = "person_id,date,ear,kind,hl_500,hl_1000,hl_2000,hl_3000,hl_4000,hl_6000,hl_8000"
A_ROWS = [f"E00{i},2020-01-1{i},{'LR'[i % 2]},annual,{5 * i},10,15,NR,25,30,35" for i in range(1, 7)]


def _lines(head: str, rows: list[str], extra_head: str = "", extra: list[str] | None = None) -> str:
    extra = extra or [""] * len(rows)
    return head + extra_head + "\n" + "".join(r + e + "\n" for r, e in zip(rows, extra))


CASES = {
    "blank headers over empty cells": ("people", _lines(P_HEAD, P_ROWS, "," * 40, ["," * 40] * 3)),
    "blank header over one cell": ("people", _lines(P_HEAD, P_ROWS, ",,,", [",,,", ",, x ,", ",,,"])),
    "rows longer than the header": ("people", _lines(P_HEAD, P_ROWS, "", ["," * 300, "", ",a,b"])),
    "rows shorter than the header": ("people", P_HEAD + "\nE001,G1\nE002,G1,F,1980-05-06,2001-07-08\nE003\n"),
    "separator lines longer than the header": ("people", _lines(P_HEAD, P_ROWS) + "," * 500 + "\n\n" + ",,\n"),
    "unknown columns, spaces and formulas": ("people", _lines(P_HEAD, P_ROWS, ",shoe, note ,",
                                                              [",44, =cmd ,", ",41,@sum(a),", ",, plain ,z"])),
    "unknown columns without spaces": ("people", _lines(P_HEAD, P_ROWS, ",shoe,note",
                                                        [",44,=cmd", ",41,x", ",,"])),
    "repeated and made columns": ("people", _lines(P_HEAD, P_ROWS, ",group,_row,shoe", [",G9,7,1"] * 3)),
    "crlf and no last line end": ("people", _lines(P_HEAD, P_ROWS, ",,", [",,"] * 3).replace("\n", "\r\n")[:-2]),
    "audiograms with unknown and blank columns": ("audiograms", _lines(A_HEAD, A_ROWS, ",,x1,,x2",
                                                                      [",,a,,", ",,b,,", ",,a,,c"] * 2)),
    "audiograms, unknown columns and a ragged row": ("audiograms", _lines(A_HEAD, A_ROWS, ",x1",
                                                                          [",a", ",b,c", ",a", "", ",a", ",a"])),
    "only unknown columns": ("people", "shoe,hat\n1,2\n3,4\n"),
    "separator line of the header's width and formulas": (
        "people", P_HEAD + "\n" + P_ROWS[0] + "\n,,,,\n=cmd,G1,M,1970-01-02,2000-03-04\nE004,+x,F,,\n"),
}


def _read(tmp_path, name: str, text: str, fast: bool, monkeypatch) -> tuple[pd.DataFrame, list[str]]:
    spec = PEOPLE if name == "people" else AUDIOGRAMS
    (tmp_path / "data").mkdir(exist_ok=True)
    (tmp_path / "data" / f"{name}.csv").write_bytes(text.encode())
    with monkeypatch.context() as m:
        if fast:
            m.setattr(reader, "_PIECE", 7)  # pieces of one or two lines
            m.setattr(reader, "_CATEGORY_CELLS", 3)  # blocks of a record or two
        else:
            m.setattr(reader, "_csv_fast", lambda *a: None)
        findings = Findings()
        table, _ = reader._read_table(spec, tmp_path, reader._Inputs(tmp_path, findings), findings,
                                      dt.date(2026, 1, 1))
    return table, list(findings.lines(shown=10_000))


@pytest.mark.parametrize("case", sorted(CASES))
def test_piecewise_read_matches_csv_module_read(tmp_path, monkeypatch, case):
    name, text = CASES[case]
    fast, f_fast = _read(tmp_path, name, text, True, monkeypatch)
    slow, f_slow = _read(tmp_path, name, text, False, monkeypatch)
    assert f_fast == f_slow
    assert list(fast.columns) == list(slow.columns)
    for c in fast.columns:
        a, b = fast[c], slow[c]
        if isinstance(a.dtype, pd.CategoricalDtype) or a.dtype.kind in "OUT" or str(a.dtype) in ("str", "string"):
            assert a.astype(object).tolist() == b.astype(object).tolist(), c
        else:
            pd.testing.assert_series_equal(a, b, check_exact=True)


def test_findings_of_commas_heavy_files(tmp_path, monkeypatch):
    """What the findings say, written out: the oracle above could share a mistake with this reader."""
    _, found = _read(tmp_path, "people", CASES["rows longer than the header"][1], True, monkeypatch)
    assert "data/people.csv:2:: error: has 305 fields but the header has 5 (row not read)" in found
    assert "data/people.csv:4:: error: has 7 fields but the header has 5 (row not read)" in found
    table, found = _read(tmp_path, "people", CASES["blank headers over empty cells"][1], True, monkeypatch)
    assert not [f for f in found if "unknown column" in f] and len(table) == 3
    table, found = _read(tmp_path, "people", CASES["blank header over one cell"][1], True, monkeypatch)
    assert any("unknown column 'column_7'" in f for f in found)
    assert table["column_7"].astype(object).tolist() == ["", "x", ""]
    table, found = _read(tmp_path, "people", CASES["unknown columns, spaces and formulas"][1], True, monkeypatch)
    assert table["note"].astype(object).tolist() == ["=cmd", "@sum(a)", "plain"]
    assert [f for f in found if "spreadsheet formula" in f] == [
        "data/people.csv:2:note: warning: '=cmd' looks like a spreadsheet formula; kept as text",
        "data/people.csv:3:note: warning: '@sum(a)' looks like a spreadsheet formula; kept as text"]
    _, found = _read(tmp_path, "people", CASES["separator line of the header's width and formulas"][1], True,
                     monkeypatch)
    assert [f for f in found if "spreadsheet formula" in f] == [
        "data/people.csv:4:person_id: warning: '=cmd' looks like a spreadsheet formula; kept as text",
        "data/people.csv:5:group: warning: '+x' looks like a spreadsheet formula; kept as text"]


def test_undeclared_columns_are_kept_as_codes(tmp_path, monkeypatch):
    wide = "," .join(f"x{j}" for j in range(500))
    rows = [r + "," + ",".join("1" if j % 3 else "" for j in range(500)) for r in P_ROWS]
    table, found = _read(tmp_path, "people", _lines(P_HEAD + "," + wide, rows), True, monkeypatch)
    assert any("unknown columns 'x0', 'x1'" in f for f in found)
    for j in range(500):
        s = table[f"x{j}"]
        assert isinstance(s.dtype, pd.CategoricalDtype) and s.cat.codes.dtype == np.int8
        assert s.astype(object).tolist() == ["1" if j % 3 else ""] * 3


def test_positions_are_int32_and_only_for_the_columns_parsed():
    """Where cells lie is kept per line for the columns parsed from the bytes, never per comma of the file."""
    body = "".join(r + "," * 900 + "\n" for r in A_ROWS * 50)
    raw = (A_HEAD + "," * 900 + "\n" + body).encode()
    arr = np.frombuffer(raw, dtype=np.uint8)
    nl = reader._byte_positions(arr, 10)
    assert nl.dtype == np.int32 and nl.tolist() == np.flatnonzero(arr == 10).tolist()
    fields = reader._cells_per_line(arr, nl)
    assert (fields == 911).all()
    typed = reader._typed_columns(raw.decode(), AUDIOGRAMS)
    where = reader._Fields(arr, nl, 911, np.arange(1, nl.size), typed)
    assert set(where.commas) <= {j for i in typed for j in (i - 1, i)} and len(where.commas) <= 2 * len(typed)
    assert all(v.dtype == np.int32 and v.shape == (nl.size,) for v in where.commas.values())
    a, b = where.span(4)  # hl_500, checked against the text
    cells = [raw[x:y].decode() for x, y in zip(a.tolist(), b.tolist())]
    assert cells == [r.split(",")[4] for r in A_ROWS * 50]


@pytest.mark.parametrize("piece", [1, 5, 64, 1 << 21])
def test_counts_and_hints_do_not_depend_on_the_pieces(monkeypatch, piece):
    rng = np.random.default_rng(11)
    for _ in range(300):
        arr, nl, commas = random_lines(rng, b"ab -=+@,,,\n\r\t1.", 40)
        whole = np.diff(np.searchsorted(commas, nl), prepend=0) + 1
        expected = reader._byte_hints(arr)
        monkeypatch.setattr(reader, "_PIECE", piece)
        assert reader._cells_per_line(arr, nl).tolist() == whole.tolist(), bytes(arr)
        assert reader._hints_by_piece(arr, nl) == expected, bytes(arr)
        monkeypatch.undo()
