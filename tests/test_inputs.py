"""Good-path checks of generator.inputs.reader: typing, conventions, xlsx, BOM, references,
duplicates, noise logs, narrative pages, digest and read-only loading."""
from __future__ import annotations

import datetime as dt
import hashlib
import os
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from generator.inputs import docs as inputs_docs
from generator.inputs.reader import build_date, load_programme, page_slug
from generator.inputs.spec import AUDIO_FREQS, FILES
from tests.conftest import env
from tests.progkit import make_programme

TODAY = dt.date(2026, 1, 1)
REPO = Path(__file__).resolve().parent.parent


def load(root: Path):
    """Load with a fixed build date."""
    return load_programme(root, today=TODAY)


def errors(prog) -> list[str]:
    return [f.format() for f in prog.findings.errors]


def full_programme(tmp_path: Path) -> Path:
    """Write a small, valid programme using every data file."""
    return make_programme(tmp_path / "prog", {
        "people.csv": [
            {"person_id": "E001", "group": "G1", "sex": "m", "birth_date": "1980-05-01",
             "hire_date": "2010-01-01", "department": "Press shop", "name": "Invented Person A"},
            {"person_id": "E002", "group": "G2", "sex": "F", "birth_date": "1990",
             "hire_date": "2015-03-01", "leave_date": "2025-06-30"},
            {"person_id": "E003", "group": "G2", "sex": "", "birth_date": "", "hire_date": ""},
        ],
        "groups.csv": [
            {"group": "G1", "name": "Press line", "shift_hours": "", "days_per_week": "4"},
            {"group": "G2", "name": "Assembly", "shift_hours": "10", "days_per_week": ""},
        ],
        "noise.csv": [
            {"measurement_id": "M1", "date": "2025-03-01", "kind": "Personal", "person_id": "E001",
             "group": "", "duration_h": "7.5", "laeq": "88.4", "lcpeak": "131", "instrument_class": "2"},
            {"measurement_id": "M2", "date": "2025-03-02", "kind": "AREA", "group": "G2",
             "location": "Bay 3", "duration_h": "1", "laeq": "79", "x_m": "-3.5", "y_m": "12"},
        ],
        "tasks.csv": [{"group": "G1", "task": "stamping", "task_hours": "6", "laeq": "90.1"}],
        "audiograms.csv": [
            {"person_id": "E001", "date": "2024-02-01", "ear": "l", "kind": "BASELINE", "hl_500": "5",
             "hl_1000": "10", "hl_2000": "NR", "hl_3000": "nr", "hl_4000": "-10", "hl_6000": "120",
             "hl_8000": "", "audiometer_id": "A1"},
            {"person_id": "E001", "date": "2024-02-01", "ear": "R", "kind": "", "hl_500": "0"},
        ],
        "audiometers.csv": [{"audiometer_id": "A1", "date": "2024-01-15", "check": "Acoustic",
                             "result": "PASS", "ob_500": "20"}],
        "reviews.csv": [{"person_id": "E001", "ear": "L", "date": "2025-02-01", "decision": "confirm_shift"}],
        "notices.csv": [{"person_id": "E001", "date": "2025-02-10", "about": "sts"}],
        "training.csv": [{"person_id": "E002", "date": "2025-01-20", "topic": "protector fitting"}],
        "protectors.csv": [{"protector_id": "P1", "type": "Foam_Plug", "nrr": "29", "snr": "33"}],
        "protector_fits.csv": [{"person_id": "E001", "protector_id": "P1", "par": "18"}],
    })


# ---------------------------------------------------------------------------------------
# typing and conventions (the docstring of generator/inputs/spec.py)


def test_good_programme_loads_without_findings(tmp_path: Path) -> None:
    prog = load(full_programme(tmp_path))
    assert list(prog.findings) == []
    assert set(prog.present) == {f.name for f in FILES}
    assert prog.present["people"] == "data/people.csv"


def test_column_kinds_follow_the_conventions(tmp_path: Path) -> None:
    prog = load(full_programme(tmp_path))
    people = prog.tables["people"]
    assert people["person_id"].tolist() == ["E001", "E002", "E003"]
    assert all(isinstance(v, str) for v in people["department"])
    assert people["department"].tolist() == ["Press shop", "", ""]
    assert str(people["hire_date"].dtype) == "datetime64[ns]"
    assert people["hire_date"].isna().tolist() == [False, False, True]
    # a bare year of birth is read as 1 July of that year, with birth_year added
    assert people["birth_date"].iloc[1] == pd.Timestamp("1990-07-01")
    assert people["birth_year"].tolist()[:2] == [1980.0, 1990.0]
    assert np.isnan(people["birth_year"].iloc[2])
    # sexes upper-cased; blank stays ""
    assert people["sex"].tolist() == ["M", "F", ""]
    assert people["_row"].tolist() == [2, 3, 4]
    assert str(people["_row"].dtype) == "int64"


def test_hearing_levels_and_no_response(tmp_path: Path) -> None:
    aud = load(full_programme(tmp_path)).tables["audiograms"]
    first = aud.iloc[0]
    assert first["ear"] == "L" and first["kind"] == "baseline"
    assert first["hl_500"] == 5.0 and first["hl_4000"] == -10.0 and first["hl_6000"] == 120.0
    # NR is a censored value: NaN with nr_<f> True, never a number
    assert np.isnan(first["hl_2000"]) and bool(first["nr_2000"]) is True
    assert np.isnan(first["hl_3000"]) and bool(first["nr_3000"]) is True
    # blank = not tested: NaN with nr False
    assert np.isnan(first["hl_8000"]) and bool(first["nr_8000"]) is False
    for f in AUDIO_FREQS:
        assert str(aud[f"hl_{f}"].dtype) == "float64"
        assert str(aud[f"nr_{f}"].dtype) == "bool"
    # the declared default of kind applies when blank
    assert aud.iloc[1]["kind"] == "periodic"


def test_choices_defaults_and_numbers(tmp_path: Path) -> None:
    prog = load(full_programme(tmp_path))
    noise = prog.tables["noise"]
    assert noise["kind"].tolist() == ["personal", "area"]
    assert noise["laeq"].tolist() == [88.4, 79.0]
    assert noise["x_m"].iloc[1] == -3.5
    assert str(noise["instrument_class"].dtype) == "float64"
    groups = prog.tables["groups"]
    assert groups["shift_hours"].tolist() == [8.0, 10.0]  # default 8 when blank
    assert groups["days_per_week"].tolist() == [4.0, 5.0]  # default 5 when blank
    assert prog.tables["protectors"]["type"].tolist() == ["foam_plug"]
    assert prog.tables["audiometers"]["check"].tolist() == ["acoustic"]
    assert prog.tables["audiometers"]["result"].tolist() == ["pass"]


def test_noise_group_is_filled_from_the_person(tmp_path: Path) -> None:
    noise = load(full_programme(tmp_path)).tables["noise"]
    assert noise["group"].tolist() == ["G1", "G2"]


def test_absent_optional_files_are_empty_tables_with_columns(tmp_path: Path) -> None:
    prog = load(make_programme(tmp_path / "p"))
    assert not prog.has("audiograms")
    aud = prog.tables["audiograms"]
    assert aud.empty and {"person_id", "date", "ear", "hl_4000", "nr_4000", "_row"} <= set(aud.columns)
    assert str(aud["date"].dtype) == "datetime64[ns]"
    # groups.csv absent: derived from the people, with shift_hours 8, silently
    assert not prog.has("groups")
    assert prog.tables["groups"]["group"].tolist() == ["G1"]
    assert prog.tables["groups"]["shift_hours"].tolist() == [8.0]
    assert list(prog.findings) == []


def test_header_names_are_case_insensitive_and_unknown_columns_kept(tmp_path: Path) -> None:
    text = " Person_ID ,GROUP,Shoe_Size\nE001,G1,44\nE002,G1,41\n"
    prog = load(make_programme(tmp_path / "p", {"people.csv": text}))
    people = prog.tables["people"]
    assert people["person_id"].tolist() == ["E001", "E002"]
    assert people["shoe_size"].tolist() == ["44", "41"]
    warns = [f for f in prog.findings.warnings if "unknown column" in f.message]
    assert len(warns) == 1 and "shoe_size" in warns[0].message
    assert not prog.findings.errors


def test_cells_are_stripped(tmp_path: Path) -> None:
    text = "person_id,group,sex\n E001 , G1 , f \n"
    people = load(make_programme(tmp_path / "p", {"people.csv": text})).tables["people"]
    assert people[["person_id", "group", "sex"]].iloc[0].tolist() == ["E001", "G1", "F"]


def test_utf8_bom_is_accepted(tmp_path: Path) -> None:
    # Unicode Standard, ch. 23.8: U+FEFF at the start of a UTF-8 stream is a signature, not data
    text = "person_id,group,name\nE001,G1,Zoë Invented\n"
    plain = load(make_programme(tmp_path / "a", {"people.csv": text.encode("utf-8")}))
    bom = load(make_programme(tmp_path / "b", {"people.csv": b"\xef\xbb\xbf" + text.encode("utf-8")}))
    assert not list(bom.findings)
    pd.testing.assert_frame_equal(plain.tables["people"], bom.tables["people"])
    assert bom.tables["people"]["name"].iloc[0] == "Zoë Invented"


def test_crlf_and_blank_lines_keep_line_numbers(tmp_path: Path) -> None:
    text = "person_id,group\r\nE001,G1\r\n\r\nE002,G1\r\n"
    people = load(make_programme(tmp_path / "p", {"people.csv": text.encode()})).tables["people"]
    assert people["person_id"].tolist() == ["E001", "E002"]
    assert people["_row"].tolist() == [2, 4]


def test_quoted_cells_with_commas_and_line_breaks(tmp_path: Path) -> None:
    # RFC 4180 section 2 (6)-(7): quoted fields may hold commas, line breaks and "" for a quote
    text = ('person_id,group,job_title\nE001,G1,"fitter, ""senior"""\n'
            'E002,G1,"two\nlines"\nE003,G1,plain\n')
    prog = load(make_programme(tmp_path / "p", {"people.csv": text}))
    people = prog.tables["people"]
    assert people["job_title"].tolist() == ['fitter, "senior"', "two\nlines", "plain"]
    assert people["_row"].tolist() == [2, 3, 5]  # the record after the two-line cell starts on line 5
    assert not list(prog.findings)


def test_row_numbers_in_findings_after_a_quoted_line_break(tmp_path: Path) -> None:
    text = 'person_id,date,topic\nE001,2025-01-01,"a\nb"\nE001,2025-13-01,x\n'
    prog = load(make_programme(tmp_path / "p", {"training.csv": text}))
    assert [(f.row, f.column) for f in prog.findings.errors] == [(4, "date")]


def test_xlsx_reads_like_csv(tmp_path: Path) -> None:
    openpyxl = pytest.importorskip("openpyxl")
    root = make_programme(tmp_path / "x", {"people.csv": [
        {"person_id": "E001", "group": "G1", "birth_date": "1980-05-01"},
        {"person_id": "E002", "group": "G1", "birth_date": "1990"}]})
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["person_id", "Date", "ear", "hl_500", "hl_1000", "quiet_hours"])
    ws.append(["E001", dt.datetime(2024, 2, 1), "L", 10, "NR", 14.5])
    ws.append(["E001", dt.datetime(2024, 2, 1, 9, 30), "R", 15.0, 20, None])
    ws.append([None, None, None, None, None, None])
    ws.append(["E002", "2024-03-05", "r", -5, 0, 16])
    wb.save(root / "data" / "audiograms.xlsx")
    prog = load(root)
    assert errors(prog) == []
    assert prog.present["audiograms"] == "data/audiograms.xlsx"
    aud = prog.tables["audiograms"]
    assert aud["date"].tolist() == [pd.Timestamp("2024-02-01"), pd.Timestamp("2024-02-01"),
                                    pd.Timestamp("2024-03-05")]
    assert aud["ear"].tolist() == ["L", "R", "R"]
    assert aud["hl_500"].tolist() == [10.0, 15.0, -5.0]
    assert aud["nr_1000"].tolist() == [True, False, False]
    assert aud["quiet_hours"].iloc[0] == 14.5
    assert aud["_row"].tolist() == [2, 3, 5]  # sheet row numbers; the empty row 4 is skipped


# ---------------------------------------------------------------------------------------
# references, duplicates, cross-checks


def test_unknown_references_are_errors(tmp_path: Path) -> None:
    prog = load(make_programme(tmp_path / "p", {
        "groups.csv": [{"group": "G1"}],
        "people.csv": [{"person_id": "E001", "group": "G1"}, {"person_id": "E002", "group": "G7"}],
        "training.csv": [{"person_id": "E001", "date": "2025-01-01"}, {"person_id": "E404", "date": "2025-01-01"}],
    }))
    got = {(f.path, f.row, f.column) for f in prog.findings.errors}
    assert got == {("data/people.csv", 3, "group"), ("data/training.csv", 3, "person_id")}
    msg = next(f.message for f in prog.findings.errors if f.column == "person_id")
    assert "E404" in msg and "data/people.csv" in msg


def test_duplicates_name_the_first_line(tmp_path: Path) -> None:
    rows = [{"person_id": "E001", "date": "2024-02-01", "ear": "L", "hl_500": 5},
            {"person_id": "E001", "date": "2024-02-01", "ear": "R", "hl_500": 5},
            {"person_id": "E001", "date": "2024-02-01", "ear": "l", "hl_500": 10}]
    prog = load(make_programme(tmp_path / "p", {"audiograms.csv": rows}))
    [dup] = prog.findings.errors
    assert dup.row == 4 and "first on line 2" in dup.message


def test_cross_check_warnings(tmp_path: Path) -> None:
    prog = load(make_programme(tmp_path / "p", {
        "people.csv": [
            {"person_id": "E001", "group": "G1", "birth_date": "1980-05-01", "hire_date": "1990-01-01",
             "leave_date": "2024-06-30"},
            {"person_id": "E002", "group": "G1", "birth_date": "1990-01-01", "hire_date": "2015-01-01"}],
        "noise.csv": [{"measurement_id": "M1", "date": "2025-01-01", "kind": "personal",
                       "duration_h": 8, "laeq": 85}],
        "audiograms.csv": [
            {"person_id": "E002", "date": "1989-12-01", "ear": "L", "hl_500": 5},
            {"person_id": "E001", "date": "2024-07-01", "ear": "L", "hl_500": 5},
            {"person_id": "E001", "date": "2024-07-02", "ear": "R", "hl_500": 5}],
    }))
    assert not prog.findings.errors
    got = {(f.path, f.row, f.column) for f in prog.findings.warnings}
    assert got == {
        ("data/people.csv", 2, "birth_date"),  # aged 9.7 at hire (below 14: common practice)
        ("data/noise.csv", 2, "person_id"),  # personal measurement without a person
        ("data/audiograms.csv", 2, "date"),  # before birth
        ("data/audiograms.csv", 4, "date"),  # two days after leaving (one day is tolerated)
    }


# ---------------------------------------------------------------------------------------
# noise logs


def _log(start: str, n: int, step_s: int, level: float = 85.0) -> str:
    t0 = pd.Timestamp(start)
    lines = ["start,laeq"] + [f"{(t0 + pd.Timedelta(seconds=i * step_s)).isoformat()},{level + i % 3}"
                              for i in range(n)]
    return "\n".join(lines) + "\n"


def _noise_rows(ids: list[str]) -> list[dict]:
    return [{"measurement_id": i, "date": "2025-03-01", "kind": "area", "group": "G1", "duration_h": 1,
             "laeq": 85} for i in ids]


def test_logs_are_sorted_with_their_interval(tmp_path: Path) -> None:
    unsorted = "start,laeq\n2025-03-01T08:01:00,86\n2025-03-01T08:00:00,85\n2025-03-01T08:02:00,87\n"
    prog = load(make_programme(tmp_path / "p", {
        "noise.csv": _noise_rows(["M1", "M2", "M3"]),
        "noise_logs/M1.csv": _log("2025-03-01T08:00:00", 10, 60),
        "noise_logs/M2.csv": _log("2025-03-01T09:00:00", 5, 1),
        "noise_logs/M3.csv": unsorted,
    }))
    assert sorted(prog.noise_logs) == ["M1", "M2", "M3"]
    assert prog.log_interval_s == {"M1": 60.0, "M2": 1.0, "M3": 60.0}
    m1 = prog.noise_logs["M1"]
    assert list(m1.columns) == ["start", "laeq", "_row"]
    assert m1["_row"].tolist() == list(range(2, 12))
    assert m1["laeq"].tolist()[:3] == [85.0, 86.0, 87.0]
    m3 = prog.noise_logs["M3"]
    assert m3["start"].is_monotonic_increasing and m3["_row"].tolist() == [3, 2, 4]
    # an out-of-order timestamp is an error on its line
    assert [(f.path, f.row) for f in prog.findings.errors] == [("data/noise_logs/M3.csv", 3)]


def test_quoted_and_plain_logs_read_the_same(tmp_path: Path) -> None:
    plain = _log("2025-03-01T08:00:00", 6, 30)
    quoted = "\n".join('"' + ln.replace(",", '","') + '"' for ln in plain.strip().split("\n")) + "\n"
    prog = load(make_programme(tmp_path / "p", {"noise.csv": _noise_rows(["A", "B"]),
                                                "noise_logs/A.csv": plain, "noise_logs/B.csv": quoted}))
    assert not list(prog.findings)
    pd.testing.assert_frame_equal(prog.noise_logs["A"], prog.noise_logs["B"])


def test_irregular_interval_is_warned_on_its_line(tmp_path: Path) -> None:
    text = ("start,laeq\n2025-03-01T08:00:00,85\n2025-03-01T08:01:00,85\n2025-03-01T08:02:00,85\n"
            "2025-03-01T08:05:00,85\n2025-03-01T08:06:00,85\n")
    prog = load(make_programme(tmp_path / "p", {"noise.csv": _noise_rows(["M1"]), "noise_logs/M1.csv": text}))
    assert prog.log_interval_s == {"M1": 60.0}
    [w] = prog.findings.warnings
    assert (w.path, w.row, w.column) == ("data/noise_logs/M1.csv", 5, "start")
    assert "180" in w.message and "60" in w.message


def test_many_logs_load_quickly(tmp_path: Path) -> None:
    n_logs, n_rows = 2000, 480
    ids = [f"M{i:04d}" for i in range(n_logs)]
    root = make_programme(tmp_path / "p", {"noise.csv": _noise_rows(ids)})
    folder = root / "data" / "noise_logs"
    folder.mkdir()
    t0 = pd.Timestamp("2025-03-01T08:00:00")
    stamps = pd.date_range(t0, periods=n_rows, freq="60s").strftime("%Y-%m-%dT%H:%M:%S")
    body = "start,laeq\n" + "\n".join(f"{s},{80 + j % 11}" for j, s in enumerate(stamps)) + "\n"
    for i in ids:
        (folder / f"{i}.csv").write_text(body, encoding="utf-8")
    start = time.perf_counter()
    prog = load(root)
    elapsed = time.perf_counter() - start
    assert not list(prog.findings)
    assert len(prog.noise_logs) == n_logs and set(prog.log_interval_s.values()) == {60.0}
    assert len(prog.noise_logs["M1999"]) == n_rows
    # a couple of seconds on a quiet machine; generous bound for a shared 2-core box
    assert elapsed < 12, f"loading {n_logs} logs took {elapsed:.1f} s"


# ---------------------------------------------------------------------------------------
# narrative pages and templates


def test_pages_front_matter_slugs_and_order(tmp_path: Path) -> None:
    prog = load(make_programme(tmp_path / "p", pages={
        "About Us.md": "---\ntitle: About the programme\norder: 2\n---\nText.\n",
        "index.md": "---\norder: 1\n---\n# Welcome\n",
        "zeta.md": "# Zeta page\nno front matter\n",
        "alpha.md": "---\ntitle: Alpha\n---\nbody\n",
    }))
    assert not list(prog.findings)
    assert [(p.slug, p.title, p.order) for p in prog.pages] == [
        ("page-index", "Welcome", 1), ("about-us", "About the programme", 2),
        ("alpha", "Alpha", 100), ("zeta", "Zeta page", 100)]
    assert prog.pages[1].markdown == "Text.\n" and prog.pages[1].source == "pages/About Us.md"


@pytest.mark.parametrize("stem, slug", [
    ("Noise_Policy 2025", "noise-policy-2025"), ("review", "page-review"), ("ÄÖ", "page"),
    ("--x--", "x"), ("methods", "page-methods"), ("a..b", "a-b")])
def test_page_slug(stem: str, slug: str) -> None:
    assert page_slug(stem) == slug


def test_template_dir(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p")
    assert load(root).template_dir is None
    (root / "templates").mkdir()
    (root / "templates" / "base.html").write_text("{% block content %}{% endblock %}", encoding="utf-8")
    prog = load(root)
    assert prog.template_dir == (root / "templates").resolve()
    assert not list(prog.findings)


# ---------------------------------------------------------------------------------------
# digest, read-only loading, build date


def _reference_digest(root: Path, rels: list[str]) -> str:
    """sha256 over sorted (length-prefixed relative path, length-prefixed bytes), per FIPS 180-4."""
    h = hashlib.sha256()
    for rel in sorted(rels):
        data = (root / rel).read_bytes()
        name = rel.encode()
        h.update(len(name).to_bytes(8, "big") + name + len(data).to_bytes(8, "big") + data)
    return h.hexdigest()


def test_digest_is_stable_and_covers_every_input(tmp_path: Path) -> None:
    root = full_programme(tmp_path)
    (root / "pages").mkdir()
    (root / "pages" / "a.md").write_text("# A\n", encoding="utf-8")
    (root / "data" / "noise_logs").mkdir()
    (root / "data" / "noise_logs" / "M1.csv").write_text(_log("2025-03-01T08:00:00", 3, 60), encoding="utf-8")
    first = load(root)
    copy = shutil.copytree(root, tmp_path / "elsewhere")
    assert load(copy).digest == first.digest == load(root).digest
    rels = ["programme.yaml", "pages/a.md", "data/noise_logs/M1.csv"] + [f"data/{f.name}.csv" for f in FILES]
    assert first.digest == _reference_digest(root, rels)
    # any byte of any input changes it
    for rel in ("pages/a.md", "data/noise_logs/M1.csv", "programme.yaml"):
        target = copy / rel
        target.write_bytes(target.read_bytes() + b"\n")
        assert load(copy).digest != first.digest
        shutil.copy2(root / rel, target)
    assert load(copy).digest == first.digest


def test_inputs_are_unchanged_after_load(tmp_path: Path) -> None:
    root = full_programme(tmp_path)
    (root / "pages").mkdir()
    (root / "pages" / "a.md").write_text("---\ntitle: A\n---\n", encoding="utf-8")
    files = sorted(p for p in root.rglob("*") if p.is_file())
    old = time.time() - 3600
    for p in files:
        os.utime(p, (old, old))
    before = {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in files}
    load(root)
    after = {p: (p.read_bytes(), p.stat().st_mtime_ns) for p in files}
    assert after == before
    assert sorted(p for p in root.rglob("*") if p.is_file()) == files  # nothing written


def test_build_date_from_source_date_epoch() -> None:
    # POSIX.1-2017 section 4.16 (seconds since the Epoch): 1767225600 = 20454 days = 2026-01-01
    with env(SOURCE_DATE_EPOCH="1767225600"):
        assert build_date() == dt.date(2026, 1, 1)
    with env(SOURCE_DATE_EPOCH="86399"):
        assert build_date() == dt.date(1970, 1, 1)


def test_future_dates_judged_against_the_given_day(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"training.csv": [{"person_id": "E001", "date": "2025-06-02"}]})
    assert not load_programme(root, today=dt.date(2025, 6, 2)).findings.errors
    [e] = load_programme(root, today=dt.date(2025, 6, 1)).findings.errors
    assert (e.row, e.column) == (2, "date") and "future" in e.message


# ---------------------------------------------------------------------------------------
# the generated data-format reference


def test_data_format_doc_is_current() -> None:
    path = REPO / "docs" / "data-format.md"
    assert path.is_file(), "docs/data-format.md is missing: python -m generator.inputs.docs > docs/data-format.md"
    assert path.read_text(encoding="utf-8") == inputs_docs.data_format_markdown(), \
        "docs/data-format.md is out of date: python -m generator.inputs.docs > docs/data-format.md"


def test_data_format_doc_names_every_column() -> None:
    from generator.inputs.spec import NOISE_LOG
    text = inputs_docs.data_format_markdown()
    for spec in FILES + (NOISE_LOG,):
        section = inputs_docs.file_section(spec)
        assert f"`{spec.path}`" in text and section in text
        for c in spec.columns:
            assert c.doc, f"{spec.name}.{c.name} has no doc string"
            assert f"| `{c.name}` |" in section
            if c.required:
                assert f"| `{c.name}` | {inputs_docs.KIND_TEXT[c.kind]} | yes |" in section
            if c.lo is not None and c.hi is not None:
                assert f"{c.hi:g}" in section

