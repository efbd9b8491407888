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

from .progkit import random_lines

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
    "text like a formula": [(3, 0, "=cmd"), (5, 4, "-5"), (6, 0, "@x"), (7, 3, "+annual")],
    "level like a formula": [(3, 4, "-inf"), (4, 0, "-5")],
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


DATE_CASES = {
    "dates blank and future": [(3, 1, ""), (4, 1, "2027-03-01"), (5, 1, "2026-01-02")],
    "dates not a calendar day": [(3, 1, "2020-02-30"), (4, 1, "2019-02-29"), (5, 1, "2020-13-01"), (6, 1, "2020-01-00")],
    "dates leap days": [(3, 1, "2020-02-29"), (4, 1, "2000-02-29"), (5, 1, "1900-02-29")],
    "dates written otherwise": [(3, 1, "2020-1-5"), (4, 1, "2020/01/05"), (5, 1, "2020-01-05T10:00"), (6, 1, "2020")],
    "dates outside the years": [(3, 1, "1899-12-31"), (4, 1, "2201-01-01"), (5, 1, "1900-01-01"), (6, 1, "2200-12-31")],
    "nr in every spelling": [(3, 4, "NR"), (4, 5, "nr"), (5, 6, "Nr"), (6, 7, "nR"), (7, 10, "")],
    "nr beside text": [(3, 4, "NR"), (4, 4, "NRX"), (5, 5, "N"), (6, 6, "nan")],
    "nr beside a level out of range": [(3, 9, "NR"), (4, 9, "130"), (5, 10, "")],
}


@pytest.mark.parametrize("case", sorted(DATE_CASES))
def test_typed_dates_and_nr_match_text_read(tmp_path, monkeypatch, case):
    raw = _file(DATE_CASES[case])
    typed, f_typed = _read(tmp_path, raw, True, monkeypatch)
    text, f_text = _read(tmp_path, raw, False, monkeypatch)
    pd.testing.assert_frame_equal(typed, text, check_exact=True)
    assert f_typed == f_text


@pytest.mark.parametrize("case", ["clean", "nr and blank levels", "dates blank and future", "nr in every spelling"])
def test_dates_and_nr_levels_are_parsed_typed(tmp_path, monkeypatch, case):
    """Clean ISO dates and levels with NR or blank cells arrive typed: no column is read again as text."""
    raw = _file({**CASES, **DATE_CASES}[case])
    grids: list[reader._Grid] = []
    fast = reader._csv_fast
    monkeypatch.setattr(reader, "_csv_fast", lambda *a: grids.append(fast(*a)) or grids[-1])
    _read(tmp_path, raw, True, monkeypatch)
    cells = grids[0].cells
    assert cells[1].dtype == "datetime64[ns]"
    assert all(cells[i].dtype == "float64" for i in range(4, 12))
    nr = sum(int(m.sum()) for m in grids[0].nr.values())
    assert nr == sum(v.lower() == "nr" for _, _, v in {**CASES, **DATE_CASES}[case])


def test_cell_edge_hints_match_byte_hints(monkeypatch):
    """The hints found from the edges of each cell equal those found from every byte (random files)."""
    rng = np.random.default_rng(7)
    for _ in range(4000):
        arr, nl, commas = random_lines(rng, b"ab -=+@,\n\r\t1.", 14)
        every_byte = reader._byte_hints(arr)
        monkeypatch.setattr(reader, "_sparse", lambda *a: True)
        assert reader._byte_hints(arr, commas, nl) == every_byte, bytes(arr)
        monkeypatch.undo()


LOG = "start,laeq\n" + "".join(f"2020-01-16T07:{m:02d}:00,{80 + (m % 7) * 0.7:.1f}\n" for m in range(30))
LOG_CASES = {
    "clean": {},
    "blank start and level": {"A": [(3, 0, "")], "B": [(4, 1, "")]},
    "start written otherwise": {"A": [(3, 0, "2020-01-16 07:03:00")], "B": [(5, 0, "2020-01-16T07:05")]},
    "start not a time": {"A": [(3, 0, "2020-02-30T07:03:00")], "B": [(4, 0, "2020-01-16T24:00:00")]},
    "start in the future or out of the years": {"A": [(3, 0, "2027-01-16T07:03:00")],
                                                "B": [(4, 0, "1850-01-16T07:04:00")]},
    "start going back": {"A": [(3, 0, "2020-01-16T06:03:00")], "B": [(4, 0, "2020-01-16T07:03:00")]},
    "irregular interval": {"A": [(3, 0, "2020-01-16T07:02:30")]},
    "levels not clean": {"A": [(3, 1, "abc")], "B": [(4, 1, "200")], "C": [(5, 1, "nan")]},
    "cell with spaces": {"B": [(3, 1, " 80.1")]},
}


def _logs(tmp_path, case: str, mode: str, monkeypatch) -> tuple[dict, dict, list[str]]:
    folder = tmp_path / "data" / "noise_logs"
    folder.mkdir(parents=True, exist_ok=True)
    for name in "ABC":
        rows = [r.split(",") for r in LOG.rstrip("\n").split("\n")]
        for row, col, value in LOG_CASES[case].get(name, []):
            rows[row][col] = value
        (folder / f"{name}.csv").write_text("\n".join(",".join(r) for r in rows) + "\n")
    if mode == "text":
        monkeypatch.setattr(reader, "_log_typed", lambda *a: None)
    elif mode == "one by one":
        monkeypatch.setattr(reader, "_log_batch", lambda cols, members, findings, today: [
            reader._log_single((",".join(cols) + "\n").encode() + m[2], m[1], m[0], findings, today)
            for m in members])
    findings = Findings()
    noise = pd.DataFrame({"measurement_id": ["A", "B", "C"]})
    logs, intervals = reader._load_logs(tmp_path, reader._Inputs(tmp_path, findings), findings, noise,
                                        dt.date(2026, 1, 1))
    monkeypatch.undo()
    return logs, intervals, list(findings.lines(shown=10_000))


@pytest.mark.parametrize("case", sorted(LOG_CASES))
def test_typed_logs_match_text_and_single_reads(tmp_path, monkeypatch, case):
    """Logs read in one typed pass give the logs, intervals and findings of the text pass and of one log at a time."""
    typed = _logs(tmp_path, case, "typed", monkeypatch)
    for mode in ("text", "one by one"):
        other = _logs(tmp_path, case, mode, monkeypatch)
        assert typed[0].keys() == other[0].keys()
        for k in typed[0]:
            pd.testing.assert_frame_equal(typed[0][k], other[0][k], check_exact=True)
        assert typed[1] == other[1]
        assert typed[2] == other[2]


def test_clean_logs_are_parsed_typed(tmp_path, monkeypatch):
    seen: list[bool] = []
    typed = reader._log_typed
    monkeypatch.setattr(reader, "_log_typed", lambda *a: seen.append(typed(*a) is not None) or typed(*a))
    _logs(tmp_path, "clean", "typed", monkeypatch)
    assert seen == [True]


@pytest.mark.parametrize("ids", [["P1", "P2", "P1", "P2"], []])
def test_person_dates_looked_up_once_match_one_by_one(ids):
    """Dates of each audiogram's person, found with one lookup, equal the lookup column by column."""
    day = pd.Timestamp("2000-01-01")
    people = pd.DataFrame({"person_id": pd.Series(ids, dtype=str),
                           "birth_date": pd.Series([day, pd.NaT, day + pd.Timedelta(days=1), day][:len(ids)],
                                                   dtype="datetime64[ns]"),
                           "leave_date": pd.Series([pd.NaT, day, day, day][:len(ids)], dtype="datetime64[ns]")})
    keys = pd.Series(["P2", "P9", "", "P1", "P2"], dtype=str, index=range(10, 15))
    both = reader._per_person_dates(keys, people, ["birth_date", "leave_date"])
    for got, column in zip(both, ["birth_date", "leave_date"]):
        pd.testing.assert_series_equal(got, reader._per_person(keys, people, column), check_exact=True)


class _CellsAt:
    """The cells of one column laid out as the reader's _Fields gives them (bytes, first byte of each)."""

    def __init__(self, cells: list[str]) -> None:
        raw = ("h\n" + "\n".join(cells) + "\n").encode()
        self.arr = np.frombuffer(raw, dtype=np.uint8)
        first = 2 + np.cumsum([0] + [len(c) + 1 for c in cells[:-1]])
        self.a, self.b = first, first + np.array([len(c) for c in cells])

    def fixed(self, j: int, width: int):
        size = self.b - self.a
        blank = size == 0
        return (blank, self.a[~blank]) if ((size == width) | blank).all() else None


def _iso_oracle(cells: list[str], with_time: bool) -> np.ndarray | None:
    """pandas' own parser with the exact ISO format: None where a cell is not a date (or time) of 1900-2200."""
    fmt = "%Y-%m-%dT%H:%M:%S" if with_time else "%Y-%m-%d"
    width = 19 if with_time else 10
    if any(c and len(c) != width for c in cells):
        return None
    if any(c and not all(ch.isdigit() for i, ch in enumerate(c) if i not in (4, 7, 10, 13, 16)) for c in cells):
        return None  # (strptime takes signs and spaces in places the reader does not)
    if with_time and any(c and (int(c[17:19]) > 59 or c[10] != "T") for c in cells):
        return None  # (strptime takes the leap seconds 60 and 61 and a small t; ISO 8601 has neither)
    got = pd.to_datetime(pd.Series([c or None for c in cells], dtype=object), format=fmt, errors="coerce")
    if (got.isna() & pd.Series([bool(c) for c in cells])).any():
        return None
    years = got.dt.year.dropna()
    if ((years < 1900) | (years > 2200)).any():
        return None
    return got.to_numpy("datetime64[ns]")


@pytest.mark.parametrize("with_time", [False, True])
def test_iso_cells_match_pandas_parser(with_time):
    """Dates and times read from the bytes equal pandas.to_datetime with the ISO format, over random columns
    of good, blank and damaged cells (the byte reader refuses a column with any cell pandas cannot read)."""
    rng = np.random.default_rng(11 + with_time)
    parsed = 0
    for _ in range(3000):
        cells = []
        for _ in range(int(rng.integers(1, 12))):
            y = int(rng.integers(1890, 2210)) if rng.random() < 0.02 else int(rng.integers(1990, 2030))
            m = int(rng.integers(0, 14)) if rng.random() < 0.02 else int(rng.integers(1, 13))
            d = int(rng.integers(0, 33)) if rng.random() < 0.02 else int(rng.integers(1, 32))
            c = f"{y:04d}-{m:02d}-{d:02d}"
            if with_time:
                h = int(rng.integers(0, 26)) if rng.random() < 0.02 else int(rng.integers(0, 24))
                s = int(rng.integers(0, 62)) if rng.random() < 0.02 else int(rng.integers(0, 60))
                c += f"T{h:02d}:{int(rng.integers(0, 60)):02d}:{s:02d}"
            r = rng.random()
            if r < 0.04:
                c = ""
            elif r < 0.06:
                k = int(rng.integers(len(c)))
                c = c[:k] + chr(int(rng.integers(32, 127))) + c[k + 1:]
            cells.append(c)
        want = _iso_oracle(cells, with_time)
        got = reader._iso_cells(_CellsAt(cells), 0, with_time)
        assert (got is None) == (want is None), cells
        if want is not None:
            parsed += 1
            assert np.array_equal(got.view("i8"), want.view("i8")), cells  # (NaT is one integer)
    assert parsed > 1000
