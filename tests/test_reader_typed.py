"""Numeric columns read as numbers by the CSV parser give the same tables and findings as the text path.

The oracle is the reader's own text path (every cell kept as text, then converted with
Python's float()), run on the same bytes with the column declarations withheld from the parser.
"""
from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

from generator.findings import Findings
from generator.inputs import reader
from generator.inputs.spec import FILES

AUDIOGRAMS = next(f for f in FILES if f.name == "audiograms")
HEAD = "person_id,date,ear,kind,hl_500,hl_1000,hl_2000,hl_3000,hl_4000,hl_6000,hl_8000,quiet_hours\n"
GOOD = "P{i:03d},2020-0{m}-1{d},{ear},annual,{a},10,15,20,25,30,35,{q}\n"


def _rows(n: int = 120) -> list[str]:
    return [GOOD.format(i=i, m=1 + i % 9, d=i % 10, ear="LR"[i % 2], a=(i % 7) * 5 - 5, q=(i % 5) * 4.25)
            for i in range(n)]


CASES = {
    "clean": [],
    "nr and blank levels": [(3, 5, "NR"), (7, 6, ""), (9, 10, "nr")],
    "not a number": [(4, 4, "abc"), (5, 11, "1.5.2"), (6, 5, "12 dB")],
    "nan and inf written": [(2, 11, "nan"), (6, 4, "inf"), (8, 7, "1e999"), (10, 11, "-NaN")],
    "out of range": [(1, 4, "200"), (2, 11, "-3")],
    "underscore and signs": [(3, 4, "1_0"), (4, 5, "+5"), (5, 6, "-0"), (6, 11, ".5"), (7, 11, "5.")],
    "blank optional number": [(1, 11, ""), (2, 11, "")],
    "long decimals": [(1, 11, "0.1000000000000000055511151231257827"), (2, 11, "2.675000000000000000001")],
}


def _file(edits: list[tuple[int, int, str]]) -> bytes:
    rows = [r.rstrip("\n").split(",") for r in _rows()]
    for row, col, value in edits:
        rows[row][col] = value
    return (HEAD + "".join(",".join(r) + "\n" for r in rows)).encode()


def _read(tmp_path, raw: bytes, typed: bool, monkeypatch) -> tuple[pd.DataFrame, list[str]]:
    (tmp_path / "data").mkdir(exist_ok=True)
    (tmp_path / "data" / "audiograms.csv").write_bytes(raw)
    if not typed:
        original = reader._parse_csv
        monkeypatch.setattr(reader, "_parse_csv", lambda raw, rel, findings, spec=None: original(raw, rel, findings))
    findings = Findings()
    table, _ = reader._read_table(AUDIOGRAMS, tmp_path, reader._Inputs(tmp_path, findings), findings,
                                  dt.date(2026, 1, 1))
    monkeypatch.undo()
    return table, list(findings.lines(shown=10_000))


@pytest.mark.parametrize("case", sorted(CASES))
def test_typed_read_matches_text_read(tmp_path, monkeypatch, case):
    raw = _file(CASES[case])
    seen: list[bool] = []
    numbers = reader._csv_numbers
    monkeypatch.setattr(reader, "_csv_numbers", lambda *a: seen.append(True) or numbers(*a))
    typed, f_typed = _read(tmp_path, raw, True, monkeypatch)
    assert seen  # the parser was asked for numbers
    text, f_text = _read(tmp_path, raw, False, monkeypatch)
    pd.testing.assert_frame_equal(typed, text, check_exact=True)
    for c in typed.columns:
        if typed[c].dtype == "float64":  # the same bits, -0.0 included
            assert np.array_equal(np.signbit(typed[c].to_numpy()), np.signbit(text[c].to_numpy()))
    assert f_typed == f_text
