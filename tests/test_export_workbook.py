"""The export workbook: cells written straight into the sheet XML read back as openpyxl's own writer gives them.

Oracle: openpyxl (a general-purpose xlsx library) writing the same rows through its cell
API, read back with ``openpyxl.load_workbook``. The sheet row limit is the xlsx format's
1,048,576 rows (ECMA-376 / the Office Open XML spreadsheet format as Excel reads it).
"""
from __future__ import annotations

import io
import types

import numpy as np
import pandas as pd
import pytest
from openpyxl import Workbook, load_workbook

from generator import export


def _frame(n: int) -> pd.DataFrame:
    rng = np.random.default_rng(7)
    return pd.DataFrame({
        "person_id": [f"P{i:05d}" for i in range(n)],
        "date": pd.to_datetime("2025-01-01") + pd.to_timedelta(rng.integers(0, 365, n), unit="D"),
        "level": np.where(rng.random(n) < 0.1, np.nan, rng.normal(85, 5, n)),
        "count": rng.integers(0, 9, n),
        "flag": rng.random(n) < 0.5,
        "note": [[" lead", "trail ", "a & b < c > d", "", "=SUM(A1)", "-3", "bell\x07 char", "tab\there"][i % 8]
                 for i in range(n)],
    })


def _oracle(tables: dict[str, pd.DataFrame]) -> dict[str, list[list[object]]]:
    """The rows as openpyxl's normal writer stores them (numbers where the column is numeric)."""
    wb = Workbook()
    wb.remove(wb.active)
    for name in sorted(tables):
        frame = tables[name]
        ws = wb.create_sheet(title=name.rsplit(".", 1)[0][:31])
        ws.append(export.text_header(frame))
        numeric = [pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
                   for c in frame.columns]
        for rows in export.text_rows(frame):
            for row in rows:
                ws.append([float(v) if num and v != "" and export._is_number(v) else v.replace("\x07", "")
                           for v, num in zip(row, numeric)])
    raw = io.BytesIO()
    wb.save(raw)
    return _cells(raw.getvalue())


def _cells(data: bytes) -> dict[str, list[list[object]]]:
    wb = load_workbook(io.BytesIO(data))
    return {ws.title: [[c.value for c in r] for r in ws.iter_rows()] for ws in wb.worksheets}


@pytest.fixture()
def fixed_time(monkeypatch: pytest.MonkeyPatch) -> types.SimpleNamespace:
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1767225600")
    return types.SimpleNamespace()  # the workbook stamp comes from SOURCE_DATE_EPOCH; no context is read


def test_cells_read_back_as_openpyxl_writes_them(fixed_time, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(export, "CHUNK_ROWS", 7)  # several chunks per sheet
    tables = {"b.csv": _frame(40), "a.csv": _frame(3), "empty.csv": _frame(0)}
    data = export.workbook_bytes(tables, fixed_time)
    assert _cells(data) == _oracle(tables)
    wb = load_workbook(io.BytesIO(data))
    assert wb.sheetnames == ["a", "b", "empty"]
    assert all(ws.freeze_panes == "A2" for ws in wb.worksheets)
    # the same tables give the same bytes
    assert export.workbook_bytes(tables, fixed_time) == data


def test_a_table_longer_than_a_sheet_continues_on_numbered_sheets(fixed_time, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(export, "CHUNK_ROWS", 4)
    monkeypatch.setattr(export, "SHEET_MAX_ROWS", 11)  # header + 10 rows a sheet
    frame = _frame(25)
    cells = _cells(export.workbook_bytes({"hearing_results_for_a_long_name.csv": frame}, fixed_time))
    assert list(cells) == ["hearing_results_for_a_long_name", "hearing_results_for_a_long_ (2)",
                           "hearing_results_for_a_long_ (3)"]
    header = export.text_header(frame)
    sheets = list(cells.values())
    assert all(s[0] == header for s in sheets)
    assert [len(s) - 1 for s in sheets] == [10, 10, 5]
    # every row once, in order
    assert [r[0] for s in sheets for r in s[1:]] == frame["person_id"].tolist()


@pytest.mark.parametrize("rows", [10, 20])  # exactly one and exactly two full sheets, chunks ending on the edge
def test_a_table_filling_its_sheets_exactly_makes_no_empty_sheet(fixed_time, monkeypatch: pytest.MonkeyPatch,
                                                                   rows: int) -> None:
    monkeypatch.setattr(export, "CHUNK_ROWS", 5)
    monkeypatch.setattr(export, "SHEET_MAX_ROWS", 11)  # header + 10 rows a sheet
    frame = _frame(rows)
    cells = _cells(export.workbook_bytes({"t.csv": frame}, fixed_time))
    assert [len(s) - 1 for s in cells.values()] == [10] * (rows // 10)
    assert [r[0] for s in cells.values() for r in s[1:]] == frame["person_id"].tolist()


def test_the_sheet_limit_is_the_formats() -> None:
    assert export.SHEET_MAX_ROWS == 1_048_576
    assert all(len(t) <= 31 for t in export.sheet_titles("x" * 40, 12))


def test_sheet_xml_is_openpyxls_own_byte_for_byte(fixed_time, monkeypatch: pytest.MonkeyPatch) -> None:
    # openpyxl's write-only writer, given the same rows cell by cell, writes the same sheet XML
    import zipfile
    from openpyxl.utils import get_column_letter
    monkeypatch.setattr(export, "CHUNK_ROWS", 5)
    tables = {"t.csv": _frame(23)}
    ours = zipfile.ZipFile(io.BytesIO(export.workbook_bytes(tables, fixed_time))).read("xl/worksheets/sheet1.xml")
    frame = tables["t.csv"]
    wb = Workbook(write_only=True)
    ws = wb.create_sheet(title="t")
    ws.freeze_panes = "A2"
    header = export.text_header(frame)
    rows = [r for chunk in export.text_rows(frame) for r in chunk]
    for i, col in enumerate(header, start=1):
        longest = max([len(col)] + [len(r[i - 1]) for r in rows[:1000]])
        ws.column_dimensions[get_column_letter(i)].width = max(export.WIDTH_MIN, min(export.WIDTH_MAX, longest + 2))
    ws.append(header)
    numeric = [pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
               for c in frame.columns]
    for row in rows:
        ws.append([float(v) if num and v != "" and export._is_number(v) else v.replace("\x07", "")
                   for v, num in zip(row, numeric)])
    raw = io.BytesIO()
    wb.save(raw)
    assert ours == zipfile.ZipFile(raw).read("xl/worksheets/sheet1.xml")


def _written_whole(data: bytes) -> bytes:
    """The same entries, names, dates and order written whole with ``ZipFile.writestr`` (the oracle of streaming)."""
    import zipfile
    src = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            entry = zipfile.ZipInfo(info.filename, date_time=info.date_time)
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = info.external_attr
            dst.writestr(entry, src.read(info.filename))
    return out.getvalue()


def test_streamed_sheets_are_the_bytes_of_whole_sheets(fixed_time, monkeypatch: pytest.MonkeyPatch) -> None:
    # rows streamed into a sheet's zip entry chunk by chunk give the bytes of the whole XML written at once
    monkeypatch.setattr(export, "CHUNK_ROWS", 7)
    tables = {"b.csv": _frame(40), "a.csv": _frame(3), "empty.csv": _frame(0)}
    data = export.workbook_bytes(tables, fixed_time)
    assert _written_whole(data) == data
    # a size bound that cannot rule out ZIP64 sends the rows through a temporary file: the same bytes
    monkeypatch.setattr(export, "XML_ESCAPE_MAX", 10 ** 9)
    assert export.workbook_bytes(tables, fixed_time) == data


def test_a_sheet_past_the_zip64_size_is_written_as_writestr_writes_it(fixed_time,
                                                                      monkeypatch: pytest.MonkeyPatch) -> None:
    # ZipFile.writestr takes the ZIP64 form for an entry over ZIP64_LIMIT / 1.05 bytes: lowered here to a
    # few kilobytes so that the sheet of 300 rows (about 100 kB of XML) needs it
    import zipfile
    monkeypatch.setattr(export, "CHUNK_ROWS", 50)
    tables = {"t.csv": _frame(300)}
    small = export.workbook_bytes(tables, fixed_time)
    with monkeypatch.context() as m:
        m.setattr(zipfile, "ZIP64_LIMIT", 20_000)
        data = export.workbook_bytes(tables, fixed_time)
        assert _written_whole(data) == data
    assert data != small  # the ZIP64 form was taken
    assert _cells(data) == _cells(small)
