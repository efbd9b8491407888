"""Malformed inputs: every case is reported as path:row:column: level: message, never raised.

One parametrized table of distinct cases (files -> the finding expected), a fuzz test of
random bytes and random text, a one-million-row file, and the command line on a part of
the table (exit code 1, one line per problem, no traceback, nothing written).
"""
from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from generator.findings import ERROR, WARNING
from generator.inputs.reader import load_programme
from tests.progkit import make_programme

TODAY = dt.date(2026, 1, 1)
REPO = Path(__file__).resolve().parent.parent

T = "data/training.csv"
P = "data/people.csv"
N = "data/noise.csv"
A = "data/audiograms.csv"
L1 = "data/noise_logs/M1.csv"

TRAINING_HEAD = "person_id,date,topic\n"
NOISE_HEAD = "measurement_id,date,kind,person_id,group,duration_h,laeq,lcpeak,instrument_class\n"
AUD_HEAD = "person_id,date,ear,kind,hl_500,hl_1000,hl_2000,hl_3000,hl_4000\n"
ONE_NOISE = NOISE_HEAD + "M1,2025-03-01,area,,G1,1,85,,\n"


def noise(**cells: str) -> str:
    """Return noise.csv with one row (M1, area, group G1) whose cells are overridden."""
    row = {"measurement_id": "M1", "date": "2025-03-01", "kind": "area", "person_id": "", "group": "G1",
           "duration_h": "1", "laeq": "85", "lcpeak": "", "instrument_class": ""}
    row.update(cells)
    return NOISE_HEAD + ",".join(row[c] for c in NOISE_HEAD.strip().split(",")) + "\n"


def aud(**cells: str) -> str:
    """Return audiograms.csv with one row for E001 whose cells are overridden."""
    row = {"person_id": "E001", "date": "2025-02-01", "ear": "L", "kind": "periodic", "hl_500": "5",
           "hl_1000": "5", "hl_2000": "10", "hl_3000": "10", "hl_4000": "15"}
    row.update(cells)
    return AUD_HEAD + ",".join(row[c] for c in AUD_HEAD.strip().split(",")) + "\n"


def log(*lines: str) -> dict[str, str]:
    """Return noise.csv with M1 and the log data/noise_logs/M1.csv made of *lines*."""
    return {"noise.csv": ONE_NOISE, "noise_logs/M1.csv": "\n".join(lines) + "\n"}


def xlsx(rel: str, rows: list[list[Any]]) -> Callable[[Path], None]:
    """Return a setup step writing *rows* as the first sheet of data/<rel>."""
    def write(root: Path) -> None:
        import openpyxl
        wb = openpyxl.Workbook()
        for r in rows:
            wb.active.append(r)
        wb.save(root / "data" / rel)
    return write


def symlink_out(rel: str, content: str) -> Callable[[Path], None]:
    """Return a setup step linking data/<rel> to a file outside the programme folder."""
    def link(root: Path) -> None:
        outside = root.parent / f"outside-{rel.replace('/', '_')}"
        outside.write_text(content, encoding="utf-8")
        target = root / "data" / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        os.symlink(outside, target)
    return link


@dataclass
class Case:
    """One malformed input and the finding it must produce."""

    id: str
    files: dict[str, Any]
    #: (path, row, column, level, substring of the message)
    expect: tuple[str, int | None, str | None, str, str]
    config: Any = None
    pages: dict[str, str] | None = None
    setup: Callable[[Path], None] | None = None
    people: bool = True
    #: also run through the command line (error cases only)
    cli: bool = False
    extra: dict = field(default_factory=dict)


CASES: list[Case] = [
    # --- bytes and encodings -----------------------------------------------------------
    # 0x89 cannot start a UTF-8 sequence (Unicode Standard ch. 3, Table 3-7, well-formed sequences)
    Case("random-bytes-png-header", {"people.csv": bytes([0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A,
                                                          0x00, 0x00, 0x00, 0x0D])},
         (P, 1, None, ERROR, "not UTF-8"), cli=True),
    # C3 28: a lead byte followed by a non-continuation byte (Unicode Standard Table 3-7)
    Case("ill-formed-utf8-line-3", {"people.csv": b"person_id,group\nE001,G1\nE\xc3\x28,G1\n"},
         (P, 3, None, ERROR, "byte 0xc3 on line 3")),
    Case("latin-1", {"people.csv": "person_id,group,name\nE001,G1,Zoë Invented\n".encode("latin-1")},
         (P, 2, None, ERROR, "byte 0xeb on line 2"), cli=True),
    # EF BB BF is the UTF-8 byte-order mark (Unicode Standard ch. 23.8); the bad byte is counted in the file
    Case("bom-then-latin-1", {"people.csv": b"\xef\xbb\xbfperson_id,group\n\xe9E,G1\n"},
         (P, 2, None, ERROR, "byte 0xe9 on line 2 (byte 1 of the line, 20 of the file;"), cli=True),
    Case("cp1252-quotes", {"training.csv": TRAINING_HEAD.encode() + "E001,2025-01-01,“fit”\n".encode("cp1252")},
         (T, 2, None, ERROR, "byte 0x93")),
    # UTF-16 with its byte-order mark FF FE (Unicode Standard ch. 23.8)
    Case("utf-16-bom", {"people.csv": "person_id,group\nE001,G1\n".encode("utf-16")},
         (P, 1, None, ERROR, "UTF-16")),
    Case("utf-16le-no-bom", {"people.csv": "person_id,group\nE001,G1\n".encode("utf-16-le")},
         (P, 1, None, ERROR, "NUL")),
    Case("nul-byte-line-3", {"training.csv": TRAINING_HEAD + "E001,2025-01-01,a\nE001,2025-01-02,b\x00\n"},
         (T, 3, None, ERROR, "NUL")),
    # --- CSV structure (RFC 4180) --------------------------------------------------------
    Case("ragged-too-many", {"training.csv": TRAINING_HEAD + "E001,2025-01-01,a\nE001,2025-01-02,b,extra\n"},
         (T, 3, None, ERROR, "has 4 fields but the header has 3"), cli=True),
    Case("ragged-too-few", {"training.csv": TRAINING_HEAD + "E001,2025-01-01\n"},
         (T, 2, None, ERROR, "has 2 fields but the header has 3")),
    Case("ragged-after-quoted-line-break",
         {"training.csv": TRAINING_HEAD + 'E001,2025-01-01,"two\nlines"\nE001,2025-01-02,x,y\n'},
         (T, 4, None, ERROR, "has 4 fields")),
    Case("unbalanced-quote", {"training.csv": TRAINING_HEAD + 'E001,2025-01-01,"open\nE002,2025-01-01,x\n'},
         (T, 3, None, ERROR, "unbalanced quotes")),
    Case("duplicate-header-column", {"people.csv": "person_id,group,group\nE001,G1,G2\n"},
         (P, 1, "group", ERROR, "appears more than once")),
    # --- numbers -------------------------------------------------------------------------
    # 1e308 is below the largest IEEE 754 binary64 value (about 1.797e308) and parses as a number;
    # 1e999 overflows to infinity (IEEE 754-2019 section 7.4)
    Case("laeq-text", {"noise.csv": noise(laeq="abc")}, (N, 2, "laeq", ERROR, "'abc' is not a number"), cli=True),
    Case("laeq-1e308", {"noise.csv": noise(laeq="1e308")},
         (N, 2, "laeq", ERROR, "1e308 is outside the allowed range (0 to 160)")),
    Case("laeq-minus-1e308", {"noise.csv": noise(laeq="-1e308")},
         (N, 2, "laeq", ERROR, "-1e308 is outside the allowed range")),
    Case("laeq-inf", {"noise.csv": noise(laeq="inf")}, (N, 2, "laeq", ERROR, "'inf' is not a finite number"),
         cli=True),
    Case("laeq-nan", {"noise.csv": noise(laeq="nan")}, (N, 2, "laeq", ERROR, "'nan' is not a finite number")),
    Case("laeq-overflow-1e999", {"noise.csv": noise(laeq="1e999")},
         (N, 2, "laeq", ERROR, "'1e999' is not a finite number")),
    Case("laeq-200", {"noise.csv": noise(laeq="200")}, (N, 2, "laeq", ERROR, "200 is outside the allowed range")),
    Case("duration-0", {"noise.csv": noise(duration_h="0")},
         (N, 2, "duration_h", ERROR, "0 is outside the allowed range (above 0 up to 24)")),
    Case("duration-25", {"noise.csv": noise(duration_h="25")},
         (N, 2, "duration_h", ERROR, "25 is outside the allowed range (above 0 up to 24)")),
    Case("lcpeak-negative", {"noise.csv": noise(lcpeak="-5")}, (N, 2, "lcpeak", ERROR, "(0 to 200)")),
    Case("instrument-class-1.5", {"noise.csv": noise(instrument_class="1.5")},
         (N, 2, "instrument_class", ERROR, "not a whole number")),
    Case("decimal-comma-quoted", {"noise.csv": noise(laeq='"85,5"')}, (N, 2, "laeq", ERROR, "'85,5' is not a number")),
    # --- choices -------------------------------------------------------------------------
    Case("noise-kind-rest", {"noise.csv": noise(kind="rest")},
         (N, 2, "kind", ERROR, "'rest' is not one of: personal, area"), cli=True),
    Case("ear-X", {"audiograms.csv": aud(ear="X")}, (A, 2, "ear", ERROR, "'X' is not one of: L, R"), cli=True),
    Case("sex-X", {"people.csv": "person_id,group,sex\nE001,G1,X\n"}, (P, 2, "sex", ERROR, "not one of: M, F")),
    Case("review-decision-unknown", {"reviews.csv": "person_id,ear,date,decision\nE001,L,2025-01-01,approve\n"},
         (("data/reviews.csv"), 2, "decision", ERROR, "'approve' is not one of")),
    # --- hearing levels (dB HL) ------------------------------------------------------------
    # the accepted range -10..120 dB HL is the one declared in generator/inputs/spec.py (HL_MIN, HL_MAX)
    Case("hl-abc", {"audiograms.csv": aud(hl_4000="abc")}, (A, 2, "hl_4000", ERROR, "'abc' is not a hearing level"),
         cli=True),
    Case("hl-130", {"audiograms.csv": aud(hl_2000="130")},
         (A, 2, "hl_2000", ERROR, "130 is outside the allowed range (-10 to 120)")),
    Case("hl-minus-20", {"audiograms.csv": aud(hl_500="-20")},
         (A, 2, "hl_500", ERROR, "-20 is outside the allowed range (-10 to 120)")),
    # --- dates (ISO 8601 calendar dates YYYY-MM-DD) ------------------------------------------
    # 2025 is not a leap year, so February has 28 days (Gregorian calendar rule, ISO 8601 section 3.2.1)
    Case("date-feb-30", {"training.csv": TRAINING_HEAD + "E001,2025-02-30,x\n"},
         (T, 2, "date", ERROR, "'2025-02-30' is not a date (YYYY-MM-DD)"), cli=True),
    Case("date-day-first", {"training.csv": TRAINING_HEAD + "E001,02/03/2025,x\n"},
         (T, 2, "date", ERROR, "'02/03/2025' is not a date")),
    Case("date-in-future", {"training.csv": TRAINING_HEAD + "E001,2026-01-02,x\n"},
         (T, 2, "date", ERROR, "date 2026-01-02 is in the future (after 2026-01-01)"), cli=True),
    Case("birth-year-1850", {"people.csv": "person_id,group,birth_date\nE001,G1,1850\n"},
         (P, 2, "birth_date", ERROR, "outside the years 1900 to 2200")),
    Case("birth-date-garbage", {"people.csv": "person_id,group,birth_date\nE001,G1,circa 1970\n"},
         (P, 2, "birth_date", ERROR, "is not a date (YYYY-MM-DD) or a year")),
    # --- keys and references ------------------------------------------------------------------
    Case("duplicate-person-id", {"people.csv": "person_id,group\nE001,G1\nE002,G1\nE001,G1\n"},
         (P, 4, "person_id", ERROR, "duplicate person_id E001 (first on line 2)"), cli=True),
    Case("duplicate-measurement-id", {"noise.csv": ONE_NOISE + "M1,2025-03-02,area,,G1,2,80,,\n"},
         (N, 3, "measurement_id", ERROR, "duplicate measurement_id M1 (first on line 2)")),
    Case("duplicate-audiogram-ear-case", {"audiograms.csv": aud() + "E001,2025-02-01,l,periodic,0,0,0,0,0\n"},
         (A, 3, "person_id+date+ear", ERROR, "(first on line 2)")),
    Case("unknown-person", {"training.csv": TRAINING_HEAD + "E999,2025-01-01,x\n"},
         (T, 2, "person_id", ERROR, "unknown person_id 'E999' (not in data/people.csv)"), cli=True),
    Case("unknown-group", {"groups.csv": "group\nG1\n", "people.csv": "person_id,group\nE001,G1\nE002,G9\n"},
         (P, 3, "group", ERROR, "unknown group 'G9' (not in data/groups.csv)")),
    Case("unknown-protector", {"protectors.csv": "protector_id,type\nP1,earmuff\n",
                               "protector_fits.csv": "person_id,protector_id\nE001,P2\n"},
         ("data/protector_fits.csv", 2, "protector_id", ERROR, "unknown protector_id 'P2'")),
    Case("unknown-audiometer", {"audiometers.csv": "audiometer_id,date,check\nA1,2025-01-01,booth\n",
                                "audiograms.csv": AUD_HEAD.strip() + ",audiometer_id\n"
                                + aud().splitlines()[1] + ",A2\n"},
         (A, 2, "audiometer_id", ERROR, "unknown audiometer_id 'A2'")),
    # --- columns and files ---------------------------------------------------------------------
    Case("missing-required-column", {"training.csv": "person_id,topic\nE001,x\n"},
         (T, 1, "date", ERROR, "required column 'date' is missing"), cli=True),
    Case("required-value-blank", {"training.csv": TRAINING_HEAD + "E001,,x\n"},
         (T, 2, "date", ERROR, "required value is blank")),
    Case("unknown-column", {"people.csv": "person_id,group,shoe_size\nE001,G1,44\n"},
         (P, 1, None, WARNING, "unknown column 'shoe_size'")),
    Case("empty-people", {"people.csv": b""},
         (P, None, None, ERROR, "no rows (the file is empty); this file is required"), cli=True),
    Case("header-only-people", {"people.csv": "person_id,group\n"},
         (P, None, None, ERROR, "no rows (header only); this file is required")),
    Case("people-missing", {}, (P, None, None, ERROR, "is missing; this file is required"), people=False),
    Case("header-only-optional", {"training.csv": TRAINING_HEAD}, (T, None, None, WARNING, "no rows")),
    Case("empty-optional", {"training.csv": b""}, (T, None, None, WARNING, "no rows (the file is empty)")),
    Case("unknown-data-file", {"trainings.csv": TRAINING_HEAD}, ("data/trainings.csv", None, None, WARNING,
                                                                 "not a known data file")),
    Case("upper-case-file-name", {"Training.csv": TRAINING_HEAD + "E001,2025-01-01,x\n"},
         ("data/Training.csv", None, None, WARNING, "rename it to training.csv")),
    # --- spreadsheet formulas (CSV injection) ------------------------------------------------------
    # cells starting with = + - @ are run as formulas by spreadsheet programs (OWASP "CSV Injection";
    # common practice)
    Case("formula-cmd", {"training.csv": TRAINING_HEAD + "E001,2025-01-01,=cmd|' /C calc'!A0\n"},
         (T, 2, "topic", WARNING, "looks like a spreadsheet formula; kept as text")),
    Case("formula-at-sum", {"people.csv": "person_id,group,name\nE001,G1,@SUM(A1)\n"},
         (P, 2, "name", WARNING, "looks like a spreadsheet formula")),
    Case("formula-in-unknown-column", {"people.csv": "person_id,group,remark\nE001,G1,+HYPERLINK(x)\n"},
         (P, 2, "remark", WARNING, "looks like a spreadsheet formula")),
    # --- xlsx --------------------------------------------------------------------------------------
    Case("both-csv-and-xlsx", {"training.csv": TRAINING_HEAD + "E001,2025-01-01,x\n"},
         (T, None, None, ERROR, "both data/training.csv and data/training.xlsx"),
         setup=xlsx("training.xlsx", [["person_id", "date"], ["E001", dt.datetime(2025, 1, 1)]]), cli=True),
    Case("xlsx-wrong-column", {}, ("data/training.xlsx", 1, "person_id", ERROR, "required column 'person_id'"),
         setup=xlsx("training.xlsx", [["persn_id", "date"], ["E001", dt.datetime(2025, 1, 1)]]), cli=True),
    Case("xlsx-bad-date", {}, ("data/training.xlsx", 3, "date", ERROR, "'next week' is not a date"),
         setup=xlsx("training.xlsx", [["person_id", "date"], ["E001", dt.datetime(2025, 1, 1)],
                                      ["E002", "next week"]])),
    Case("xlsx-corrupt", {"training.xlsx": b"PK\x03\x04 this is not a workbook"},
         ("data/training.xlsx", None, None, ERROR, "cannot be read as an Excel workbook")),
    # --- programme.yaml ---------------------------------------------------------------------------
    Case("yaml-syntax-error", {}, ("programme.yaml", 3, "6", ERROR, "YAML syntax"),
         config="title: x\nperiod: {start: 2025-01-01\nrules: osha-1910.95\n", cli=True),
    Case("yaml-unknown-key", {}, ("programme.yaml", 2, "colour", WARNING, "unknown option 'colour'"),
         config="title: x\ncolour: blue\n"),
    Case("yaml-wrong-rule-set", {}, ("programme.yaml", 1, "rules", ERROR, "'osha' is not one of"),
         config="rules: osha\n"),
    # YAML 1.1 float type (yaml.org/type/float.html): .nan and .inf are floats, not finite numbers
    Case("yaml-nan", {}, ("programme.yaml", 2, "15", ERROR, "'.nan' is not a finite number"),
         config="title: x\nhours_worked: .nan\n", cli=True),
    Case("yaml-alias", {}, ("programme.yaml", 1, "8", ERROR, "anchors and aliases"),
         config="title: &t x\norganisation: *t\n", cli=True),
    # 2025 is not a leap year (Gregorian calendar rule, ISO 8601 section 3.2.1)
    Case("yaml-impossible-date", {}, ("programme.yaml", 2, "10", ERROR, "'2025-02-30' is not a date"),
         config="period:\n  start: 2025-02-30\n", cli=True),
    # --- paths ---------------------------------------------------------------------------------------
    Case("symlink-outside", {}, (T, None, None, ERROR, "resolves outside the programme folder"),
         setup=symlink_out("training.csv", TRAINING_HEAD + "E001,2025-01-01,x\n"), cli=True),
    Case("log-symlink-outside", {"noise.csv": ONE_NOISE}, (L1, None, None, ERROR, "resolves outside"),
         setup=symlink_out("noise_logs/M1.csv", "start,laeq\n2025-03-01T08:00:00,85\n")),
    # --- narrative pages -------------------------------------------------------------------------------
    Case("front-matter-bad-yaml", {}, ("pages/about.md", 4, "1", ERROR, "front matter YAML syntax"),
         pages={"about.md": "---\ntitle: ok\norder: [1\n---\ntext\n"}, cli=True),
    Case("front-matter-unclosed", {}, ("pages/about.md", 1, None, ERROR, "no closing '---'"),
         pages={"about.md": "---\ntitle: About\n"}),
    Case("front-matter-not-mapping", {}, ("pages/about.md", 2, None, ERROR, "must be a mapping"),
         pages={"about.md": "---\n- a\n- b\n---\n"}),
    Case("front-matter-order-text", {}, ("pages/about.md", None, "order", ERROR, "whole number"),
         pages={"about.md": "---\norder: first\n---\n"}),
    Case("front-matter-unknown-key", {}, ("pages/about.md", None, "author", WARNING, "unknown front-matter key"),
         pages={"about.md": "---\nauthor: someone\n---\n"}),
    Case("page-slug-collision", {}, ("pages/b_c.md", None, None, ERROR, "also the slug of pages/B-C.md"),
         pages={"B-C.md": "x\n", "b_c.md": "y\n"}),
    # --- noise logs -------------------------------------------------------------------------------------
    Case("log-out-of-order", log("start,laeq", "2025-03-01T08:01:00,85", "2025-03-01T08:00:00,85",
                                 "2025-03-01T08:02:00,85"),
         (L1, 3, "start", ERROR, "not later than the row before"), cli=True),
    Case("log-duplicate-timestamp", log("start,laeq", "2025-03-01T08:00:00,85", "2025-03-01T08:00:00,86"),
         (L1, 3, "start", ERROR, "timestamps must increase")),
    Case("log-irregular-interval", log("start,laeq", "2025-03-01T08:00:00,85", "2025-03-01T08:01:00,85",
                                       "2025-03-01T08:02:00,85", "2025-03-01T08:02:30,85"),
         (L1, 5, "start", WARNING, "interval of 30 s differs from the log's usual 60 s")),
    Case("log-unknown-measurement", {"noise.csv": ONE_NOISE, "noise_logs/M7.csv": "start,laeq\n"},
         ("data/noise_logs/M7.csv", None, None, WARNING, "no measurement_id 'M7'")),
    Case("log-bad-level", log("start,laeq", "2025-03-01T08:00:00,85", "2025-03-01T08:01:00,loud"),
         (L1, 3, "laeq", ERROR, "'loud' is not a number")),
    Case("log-bad-timestamp", log("start,laeq", "8 o'clock,85"),
         (L1, 2, "start", ERROR, "is not a date-time")),
    Case("log-missing-column", log("start,level", "2025-03-01T08:00:00,85"),
         (L1, 1, "laeq", ERROR, "required column 'laeq' is missing")),
    Case("log-ragged", log("start,laeq", "2025-03-01T08:00:00,85", "2025-03-01T08:01:00,85,1"),
         (L1, 3, None, ERROR, "has 3 fields")),
    Case("log-in-future", log("start,laeq", "2026-01-03T08:00:00,85"), (L1, 2, "start", ERROR, "in the future")),
    # ISO 8601 section 4.2.5.1: a UTC offset such as +01:00 ends the time of day
    Case("log-time-zone-offset", log("start,laeq", "2025-03-01T08:00:00+01:00,85", "2025-03-01T08:01:00+01:00,85"),
         (L1, 2, "start", WARNING, "time-zone offset ignored")),
    # --- cross-checks (warnings) ---------------------------------------------------------------------------
    Case("personal-without-person", {"noise.csv": noise(kind="personal")},
         (N, 2, "person_id", WARNING, "personal measurement without person_id")),
    Case("audiogram-before-birth", {"people.csv": "person_id,group,birth_date\nE001,G1,2000-01-01\n",
                                    "audiograms.csv": aud(date="1999-05-01")},
         (A, 2, "date", WARNING, "before the person's birth_date")),
    Case("audiogram-after-leave", {"people.csv": "person_id,group,leave_date\nE001,G1,2025-01-01\n",
                                   "audiograms.csv": aud(date="2025-01-03")},
         (A, 2, "date", WARNING, "more than 1 day after the person's leave_date")),
    Case("age-at-hire-10", {"people.csv": "person_id,group,birth_date,hire_date\nE001,G1,2000-01-01,2010-01-01\n"},
         (P, 2, "birth_date", WARNING, "age at hire would be 10.0 years")),
]


def write_case(case: Case, root: Path) -> Path:
    """Write the programme folder of *case* at *root*."""
    make_programme(root, case.files, config=case.config, pages=case.pages, people=case.people)
    if case.setup is not None:
        case.setup(root)
    return root


def test_the_table_has_enough_distinct_cases() -> None:
    ids = [c.id for c in CASES]
    assert len(ids) == len(set(ids))
    assert len(CASES) >= 45
    assert len({(c.expect, tuple(sorted(c.files))) for c in CASES}) == len(CASES)
    assert sum(c.cli for c in CASES) >= 20


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_malformed_input_is_reported(case: Case, tmp_path: Path) -> None:
    root = write_case(case, tmp_path / "prog")
    before = {p: p.read_bytes() for p in root.rglob("*") if p.is_file()}
    prog = load_programme(root, today=TODAY)
    path, row, column, level, text = case.expect
    hits = [f for f in prog.findings if (f.path, f.row, f.column, f.level) == (path, row, column, level)
            and text in f.message]
    assert hits, "expected " + f"{path}:{row}:{column}: {level}: …{text}…" + " in:\n" + \
        "\n".join(f.format() for f in prog.findings)
    assert prog.findings.failed() == bool(prog.findings.errors)
    if level == ERROR:
        assert prog.findings.failed()
    else:
        assert prog.findings.failed(strict=True)
    assert {p: p.read_bytes() for p in root.rglob("*") if p.is_file()} == before


# ---------------------------------------------------------------------------------------
# fuzz: nothing a user can put in a file makes the reader raise


#: the reader's last line of defence; a fuzz input reaching it is a bug in the reader
UNEXPECTED = "could not be read ("
FILE_NAMES = ["people.csv", "training.csv", "noise.csv", "audiograms.csv", "noise_logs/M1.csv"]
HEADERS = {"people.csv": "person_id,group\n", "training.csv": TRAINING_HEAD, "noise.csv": NOISE_HEAD,
           "audiograms.csv": AUD_HEAD, "noise_logs/M1.csv": "start,laeq\n"}


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=st.sampled_from(FILE_NAMES), data=st.binary(max_size=400))
def test_random_bytes_never_raise(tmp_path: Path, name: str, data: bytes) -> None:
    root = tmp_path / "fuzz-bytes"
    files: dict[str, Any] = {name: data}
    if name.startswith("noise_logs"):
        files["noise.csv"] = ONE_NOISE
    make_programme(root, files)
    prog = load_programme(root, today=TODAY)
    for f in prog.findings:
        assert f.format().startswith(f.path + ":")
        assert UNEXPECTED not in f.message, f.format()


CSV_ALPHABET = st.sampled_from(list(',,,"\n\r;= +-@.:0123456789 NRnrLRMFabcxyz\tTé\ufeff\x00'))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(name=st.sampled_from(FILE_NAMES), body=st.text(CSV_ALPHABET, max_size=300), keep_header=st.booleans())
def test_random_csv_text_never_raises(tmp_path: Path, name: str, body: str, keep_header: bool) -> None:
    root = tmp_path / "fuzz-text"
    files: dict[str, Any] = {name: (HEADERS[name] if keep_header else "") + body}
    if name.startswith("noise_logs"):
        files["noise.csv"] = ONE_NOISE
    make_programme(root, files)
    prog = load_programme(root, today=TODAY)
    assert isinstance(prog.digest, str) and len(prog.digest) == 64
    assert not [f for f in prog.findings if UNEXPECTED in f.message]
    for table in prog.tables.values():
        assert "_row" in table.columns


# ---------------------------------------------------------------------------------------
# one million rows


def test_million_row_training_file_loads(tmp_path: Path) -> None:
    n = 10 ** 6
    root = make_programme(tmp_path / "big")
    line = "E001,2025-01-15,annual refresher\nE002,2024-11-30,protector fitting\n"
    (root / "data" / "training.csv").write_text(TRAINING_HEAD + line * (n // 2), encoding="utf-8")
    start = time.perf_counter()
    prog = load_programme(root, today=TODAY)
    elapsed = time.perf_counter() - start
    assert not list(prog.findings)
    training = prog.tables["training"]
    assert len(training) == n
    assert training["_row"].iloc[-1] == n + 1
    assert training["date"].iloc[-1].isoformat() == "2024-11-30T00:00:00"
    assert elapsed < 10, f"loading 10**6 training rows took {elapsed:.1f} s"


def test_many_bad_rows_are_cheap(tmp_path: Path) -> None:
    n = 50_000
    root = make_programme(tmp_path / "bad")
    (root / "data" / "training.csv").write_text(TRAINING_HEAD + "E404,2025-02-30,x\n" * n, encoding="utf-8")
    start = time.perf_counter()
    prog = load_programme(root, today=TODAY)
    elapsed = time.perf_counter() - start
    assert len(prog.findings.errors) == 2 * n  # a bad date and an unknown person on every row
    lines = prog.findings.lines()
    assert len(lines) == 2 * 4  # three shown per kind, then "and 49997 more rows like this"
    assert "and 49997 more rows like this" in lines[3]
    assert elapsed < 10


# ---------------------------------------------------------------------------------------
# the command line on a part of the table


CLI_CASES = [c for c in CASES if c.cli]


def _start_cli(*args: str) -> subprocess.Popen:
    env = dict(os.environ, SOURCE_DATE_EPOCH="1767225600", HCPSITE_ID_KEY="test-key-not-a-secret")
    env.pop("HCPSITE_DEBUG", None)
    return subprocess.Popen([sys.executable, "-m", "generator", *args], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, cwd=REPO, env=env)


@pytest.mark.skipif(not (REPO / "generator" / "cli.py").is_file(), reason="generator/cli.py not written yet")
@pytest.mark.parametrize("case", CLI_CASES, ids=[c.id for c in CLI_CASES])
def test_command_line_reports_and_writes_nothing(case: Case, tmp_path: Path) -> None:
    roots = {cmd: write_case(case, tmp_path / cmd) for cmd in ("check", "build")}
    before = {cmd: sorted(p.relative_to(r) for p in r.rglob("*")) for cmd, r in roots.items()}
    expected = sorted(f.format() for f in load_programme(roots["check"], today=TODAY).findings.errors)
    assert expected
    # the two commands run side by side to keep the suite quick
    procs = {cmd: _start_cli(cmd, str(root)) for cmd, root in roots.items()}
    for cmd, proc in procs.items():
        stdout, stderr = proc.communicate(timeout=180)
        out = stdout + stderr
        root = roots[cmd]
        assert proc.returncode == 1, f"{cmd}: {out}"
        assert "Traceback" not in out and "internal error" not in out, f"{cmd}: {out}"
        # one path:row:column: error: line per problem (the findings printed relative to the folder)
        lines = sorted(ln for ln in out.splitlines() if ": error: " in ln and not ln.startswith("error:"))
        assert lines == [e.replace(str(roots["check"]), str(root)) for e in expected], f"{cmd}: {out}"
        path, row, column, level, text = case.expect
        prefix = f"{path}:{'' if row is None else row}:{column or ''}: {level}: "
        assert any(ln.startswith(prefix) and text in ln for ln in out.splitlines()), f"{cmd}: {out}"
        assert not (root / "_site").exists(), f"{cmd} wrote an output folder"
        assert sorted(p.relative_to(root) for p in root.rglob("*")) == before[cmd], f"{cmd} wrote files"
