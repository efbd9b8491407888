"""Hostile and careless inputs end in bounded time and memory with a located message.

Each input here once broke the reader: a line break in a cell forged a findings line, a
YAML alias bomb ran for minutes, an xlsx with one far-away cell took 40 s and 700 MB, a
named pipe hung the build, a template mistake was blamed on hcpsite. The command-line
checks run in a child process with a timeout (a regression fails instead of hanging) and
report the child's peak resident memory (VmHWM of ``/proc/self/status``, KiB).
"""
from __future__ import annotations

import io
import os
import re
import subprocess
import sys
import zipfile
from pathlib import Path
from typing import Any

import pytest

from generator.config import load_config
from generator.findings import ERROR, WARNING, Finding, Findings, escape
from generator.inputs import reader
from generator.inputs.reader import load_programme
from tests.progkit import make_programme
from tests.test_malformed import TODAY, TRAINING_HEAD

REPO = Path(__file__).resolve().parent.parent
LINE = re.compile(r"^[^\n]*:\d*:[^\n]*: (error|warning): [^\n]*$")
#: every input below must finish within this many seconds and this much memory
TIME_LIMIT_S = 60
RSS_LIMIT_MB = 700

# VmHWM of /proc/self/status is the peak of this process's own memory; ru_maxrss would also
# count the parent it was forked from (Linux keeps it across execve), so it is the fallback
_CHILD = ("import re, resource, sys\n"
          "from generator.cli import main\n"
          "rc = main(sys.argv[1:])\n"
          "try:\n"
          "    kb = int(re.search(r'VmHWM:\\s*(\\d+)', open('/proc/self/status').read()).group(1))\n"
          "except (OSError, AttributeError):\n"
          "    kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss\n"
          "sys.stderr.write('\\nPEAK_RSS_KB=%d\\n' % kb)\n"
          "sys.exit(rc)\n")


def run_cli(*args: str, timeout: float = TIME_LIMIT_S) -> tuple[int, str, str, float]:
    """Run ``hcpsite ARGS`` in a child; return (exit code, stdout, stderr, peak RSS in MiB)."""
    env = dict(os.environ, SOURCE_DATE_EPOCH="1767225600", HCPSITE_ID_KEY="test-key-not-a-secret")
    env.pop("HCPSITE_DEBUG", None)
    proc = subprocess.run([sys.executable, "-c", _CHILD, *args], capture_output=True, text=True, cwd=REPO,
                          env=env, timeout=timeout)
    m = re.search(r"PEAK_RSS_KB=(\d+)", proc.stderr)
    rss = int(m.group(1)) / 1024 if m else float("nan")
    return proc.returncode, proc.stdout, proc.stderr, rss


def assert_clean(rc: int, out: str, err: str, rss: float) -> None:
    """Exit 0 or 1, one well-formed line per finding, no traceback, memory within the limit."""
    assert rc in (0, 1), out + err
    assert "Traceback" not in out + err and "internal error" not in out + err, out + err
    for line in out.splitlines():
        assert LINE.match(line), f"not a findings line: {line[:200]!r}"
        assert len(line) < 2000, f"a findings line of {len(line)} characters"
    assert rss < RSS_LIMIT_MB, f"peak RSS {rss:.0f} MiB"


def findings_of(root: Path) -> list[Finding]:
    return list(load_programme(root, today=TODAY).findings)


def has(found: list[Finding], path: str, row: int | None, column: str | None, level: str, text: str) -> bool:
    return any((f.path, f.row, f.column, f.level) == (path, row, column, level) and text in f.message
               for f in found)


def show(found: list[Finding]) -> str:
    return "\n".join(f.format() for f in found)


# ---------------------------------------------------------------------------------------
# findings: one line each, bounded


def test_line_break_in_a_cell_or_file_name_cannot_forge_a_finding(tmp_path: Path) -> None:
    forged = "programme.yaml:1:title: error: forged"
    root = make_programme(tmp_path / "p", {"people.csv": f'person_id,group,sex\nE001,G1,"X\n{forged}"\n',
                                           "noise.csv": "measurement_id,date,kind,group,duration_h,laeq\n"
                                                        "M1,2025-03-01,area,G1,1,85\n"})
    (root / "data" / "noise_logs").mkdir()
    (root / "data" / "noise_logs" / f"a\n{forged}\x1b[2K.txt").write_text("x", encoding="utf-8")
    rc, out, err, rss = run_cli("check", str(root))
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert not [ln for ln in out.splitlines() if ln.startswith("programme.yaml")], out
    assert "data/people.csv:2:sex: error: 'X\\nprogramme.yaml:1:title: error: forged' is not one of" in out
    assert "data/noise_logs/a\\nprogramme.yaml:1:title: error: forged\\x1b[2K.txt::: warning:" in out


def test_escape_covers_terminal_and_bidirectional_controls() -> None:
    # C0/C1 controls (ISO/IEC 6429), DEL, U+2028/U+2029 and the bidirectional formatting
    # characters of Unicode Standard Annex #9 (U+202A..U+202E, U+2066..U+2069)
    assert escape("a\nb\r\tc\x00\x1b\x7f\x85\u2028\u2029\u202e\u2066d") == \
        "a\\nb\\r\\tc\\x00\\x1b\\x7f\\x85\\u2028\\u2029\\u202e\\u2066d"
    assert escape("plain text, é and 😀") == "plain text, é and 😀"
    findings = Findings()
    for row in range(2, 8):
        findings.error("data/x\n.csv", row, "col\nx", "bad")
    lines = findings.lines()
    assert lines[-1] == "data/x\\n.csv::col\\nx: error: and 3 more rows like this"
    assert all("\n" not in ln for ln in lines)


def test_finding_texts_are_capped() -> None:
    f = Finding("data/a.csv", 1, "c" * 10_000, ERROR, "m" * 50_000_000)
    assert len(f.message) < 1100 and "(50,000,000 characters)" in f.message
    assert len(f.column or "") < 200
    assert len(f.format()) < 1400


def test_huge_header_cell_gives_a_short_warning(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"training.csv": "person_id,date,topic," + "z" * 900_000
                                           + "\nE001,2025-01-01,x,y\n"})
    found = findings_of(root)
    unknown = [f for f in found if "unknown column" in f.message]
    assert unknown and all(len(f.format()) < 1200 for f in found), show(found)[:3000]


# ---------------------------------------------------------------------------------------
# programme.yaml and front matter


def _config_findings(tmp_path: Path, text: str) -> list[Finding]:
    root = tmp_path / "cfg"
    root.mkdir(exist_ok=True)
    (root / "programme.yaml").write_text(text, encoding="utf-8")
    findings = Findings()
    load_config(root, findings)
    return list(findings)


# YAML 1.1 float type (yaml.org/type/float.html) spells not-a-number .nan and infinity .inf;
# a setting such as a level in dB must be a finite number
YAML_CASES = [
    ("nan", "title: x\ncustom_rules:\n  criterion_level: .nan\n", (3, "20", "'.nan' is not a finite number")),
    ("inf", "title: x\nhours_worked: .inf\n", (2, "15", "'.inf' is not a finite number")),
    ("minus-inf", "title: x\nexposure:\n  map_grid: -.Inf\n", (3, "13", "'-.Inf' is not a finite number")),
    # 2025 is not a leap year: February has 28 days (Gregorian calendar, ISO 8601 section 3.2.1)
    ("feb-30", "title: x\nperiod:\n  start: 2025-02-30\n", (3, "10", "'2025-02-30' is not a date")),
    ("month-13", "title: x\nperiod:\n  end: 2025-13-01\n", (3, "8", "'2025-13-01' is not a date")),
    ("anchor", "title: &t x\norganisation: *t\n", (1, "8", "anchors and aliases")),
    ("alias-only", "title: *t\n", (1, "8", "alias '*t' refused")),
    ("deep-flow", "title: x\nexposure: " + "[" * 5000 + "]" * 5000 + "\n", (2, None, "")),
    ("deep-block", "title: x\n" + "".join("  " * i + f"k{i}:\n" for i in range(60)), (None, None, "")),
    ("two-documents", "title: x\n---\ntitle: y\n", (2, "1", "a second YAML document")),
    ("huge-int", "privacy:\n  min_group_size: " + "9" * 6000 + "\n", (2, "19", "is not a whole number")),
    ("python-tag", "title: !!python/object/apply:os.system ['true']\n", (1, "8", "could not determine")),
]


@pytest.mark.parametrize("name,text,expect", YAML_CASES, ids=[c[0] for c in YAML_CASES])
def test_programme_yaml_problems_are_located(tmp_path: Path, name: str, text: str, expect: tuple) -> None:
    found = _config_findings(tmp_path, text)
    errors = [f for f in found if f.level == ERROR]
    assert errors, f"{name}: no error"
    line, col, msg = expect
    assert all(f.path == "programme.yaml" for f in errors)
    if line is None:
        assert all(f.row is not None for f in errors), show(found)
    else:
        assert any(f.row == line and (col is None or f.column == col) and msg in f.message for f in errors), show(found)


def test_every_value_problem_is_reported_at_once(tmp_path: Path) -> None:
    found = _config_findings(tmp_path, "period:\n  start: 2025-02-30\n  end: 2025-13-01\nhours_worked: .nan\n")
    assert sorted((f.row, f.column) for f in found if f.level == ERROR) == [(2, "10"), (3, "8"), (4, "15")]


BILLION_LAUGHS = ('a: &a ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]\n'
                  + "".join(f"{x}: &{x} [{', '.join(['*' + p] * 9)}]\n"
                            for p, x in zip("abcdefgh", "bcdefghi")))


def test_alias_bomb_in_programme_yaml_is_refused_fast(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", config="title: x\n" + BILLION_LAUGHS + "organisation: *i\n")
    rc, out, err, rss = run_cli("check", str(root), timeout=30)
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert out.startswith("programme.yaml:2:4: error: anchor '&a' refused"), out


def test_alias_bomb_in_front_matter_is_refused_with_a_short_line(tmp_path: Path) -> None:
    page = "---\n" + BILLION_LAUGHS + "order: *i\ntitle: *i\n---\nText.\n"
    assert len(page.encode()) < 1000
    root = make_programme(tmp_path / "p", pages={"about.md": page})
    rc, out, err, rss = run_cli("check", str(root), timeout=30)
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert "pages/about.md:2:4: error: front matter anchor '&a' refused" in out, out


def test_front_matter_nan_and_bad_date_are_located(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", pages={"a.md": "---\ntitle: About\norder: .nan\n---\nx\n",
                                                 "b.md": "---\ntitle: 2025-02-30\n---\nx\n"})
    found = findings_of(root)
    assert has(found, "pages/a.md", 3, "8", ERROR, "'.nan' is not a finite number"), show(found)
    assert has(found, "pages/b.md", 2, "8", ERROR, "'2025-02-30' is not a date"), show(found)


def test_many_unknown_keys_are_linear_and_counted(tmp_path: Path) -> None:
    n = 90_000  # just under the size cap of programme.yaml
    root = make_programme(tmp_path / "p", config="title: x\nprivacy:\n"
                          + "".join(f" k{i}: 1\n" for i in range(n)))
    assert (root / "programme.yaml").stat().st_size < 1024 * 1024
    rc, out, err, rss = run_cli("check", str(root), timeout=40)
    assert_clean(rc, out, err, rss)
    lines = out.splitlines()
    assert len(lines) <= 25, out[:2000]
    assert f"programme.yaml:{3 + 20}:privacy: warning: {n - 20:,} more unknown options in privacy are ignored" \
        in out


def test_oversized_programme_yaml_names_the_cap(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", config="title: x\n" + "".join(f"key_{i}: 1\n" for i in range(200_000)))
    rc, out, err, rss = run_cli("check", str(root), timeout=30)
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert re.search(r"^programme.yaml::: error: is [\d.]+ MiB, more than the 1 MiB this file may have; not read$",
                     out, re.M), out


# ---------------------------------------------------------------------------------------
# data files: caps, non-regular files


def test_fifo_as_data_file_config_and_log_is_refused(tmp_path: Path) -> None:
    if not hasattr(os, "mkfifo"):
        pytest.skip("no named pipes on this system")
    root = make_programme(tmp_path / "p", {"noise.csv": "measurement_id,date,kind,group,duration_h,laeq\n"
                                                        "M1,2025-03-01,area,G1,1,85\n"})
    os.mkfifo(root / "data" / "training.csv")
    (root / "data" / "noise_logs").mkdir()
    os.mkfifo(root / "data" / "noise_logs" / "M1.csv")
    (root / "pages").mkdir()
    os.mkfifo(root / "pages" / "about.md")
    rc, out, err, rss = run_cli("check", str(root), timeout=30)
    assert_clean(rc, out, err, rss)
    assert rc == 1
    for rel in ("data/training.csv", "data/noise_logs/M1.csv", "pages/about.md"):
        assert f"{rel}::: error: is a named pipe (FIFO), not a regular file; not read" in out, out
    root2 = make_programme(tmp_path / "q")
    (root2 / "programme.yaml").unlink()
    os.mkfifo(root2 / "programme.yaml")
    rc, out, err, rss = run_cli("check", str(root2), timeout=30)
    assert_clean(rc, out, err, rss)
    assert "programme.yaml::: error: is a named pipe (FIFO), not a regular file; not read" in out, out
    root3 = make_programme(tmp_path / "t")
    (root3 / "templates").mkdir()
    os.mkfifo(root3 / "templates" / "overview.html")
    rc, out, err, rss = run_cli("build", str(root3), "--out", str(tmp_path / "site"), timeout=60)
    assert_clean(rc, out, err, rss)
    assert "templates/overview.html::: error: is a named pipe (FIFO), not a regular file; not read" in out, out


def test_file_over_the_size_cap_is_refused_naming_the_cap(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(reader, "MAX_FILE_BYTES", 1000)
    root = make_programme(tmp_path / "p", {"training.csv": TRAINING_HEAD + "E001,2025-01-01,x\n" * 100})
    found = findings_of(root)
    assert has(found, "data/training.csv", None, None, ERROR,
               "is 1.78 KiB, more than the 1000 bytes this file may have; not read"), show(found)


def test_very_long_cell_is_refused_before_parsing(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p")
    with open(root / "data" / "training.csv", "w", encoding="utf-8") as fh:
        fh.write(TRAINING_HEAD + "E001,2025-01-01,x\nE001,2025-01-02,=" + "x" * 20_000_000 + "\n")
    rc, out, err, rss = run_cli("check", str(root))
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert "data/training.csv:3:: error: line 3 is 20,000,017 bytes long, more than the 1 MiB a line may have" \
        in out, out
    assert rss < 250, f"peak RSS {rss:.0f} MiB for a 20 MB file"


def test_too_many_csv_columns_are_refused(tmp_path: Path) -> None:
    for name, head in (("plain", ",".join(f"c{i}" for i in range(5000))),
                       ("quoted", ",".join(f'"c{i}"' for i in range(5000)))):
        root = make_programme(tmp_path / name, {"training.csv": head + "\n" + "1," * 4999 + "1\n"})
        found = findings_of(root)
        assert has(found, "data/training.csv", 1, None, ERROR, "the header has 5,000 columns, more than the 1,024"), \
            show(found)


def _xlsx_bytes(rows: list[list[Any]], setup: Any = None) -> bytes:
    import openpyxl
    wb = openpyxl.Workbook()
    for r in rows:
        wb.active.append(r)
    if setup is not None:
        setup(wb.active)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def test_xlsx_cell_in_the_last_column_is_refused_fast(tmp_path: Path) -> None:
    # XFD is column 16,384, the last column of an Excel sheet (common practice; openpyxl's
    # column-letter conversion is the oracle)
    from openpyxl.utils import get_column_letter
    assert get_column_letter(16384) == "XFD"
    root = make_programme(tmp_path / "p")
    raw = _xlsx_bytes([["person_id", "date", "topic"]] + [["E001", "2025-01-01", "x"]] * 200,
                      lambda ws: ws.cell(row=1, column=16384, value="z"))
    (root / "data" / "training.xlsx").write_bytes(raw)
    assert len(raw) < 40_000
    rc, out, err, rss = run_cli("check", str(root), timeout=30)
    assert_clean(rc, out, err, rss)
    assert rc == 1
    assert "data/training.xlsx::: error: the sheet spans 16,384 columns (to column XFD), more than the 1,024" in out


def test_xlsx_far_cell_is_refused_when_the_dimension_lies(tmp_path: Path) -> None:
    raw = _xlsx_bytes([["person_id", "date", "topic"], ["E001", "2025-01-01", "x"]],
                      lambda ws: ws.cell(row=2, column=16384, value="z"))
    src = zipfile.ZipFile(io.BytesIO(raw))
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            data = src.read(info.filename)
            if info.filename == "xl/worksheets/sheet1.xml":
                assert b'<dimension ref="A1:XFD2"' in data
                data = data.replace(b'<dimension ref="A1:XFD2" />', b"")
            dst.writestr(info, data)
    root = make_programme(tmp_path / "p")
    (root / "data" / "training.xlsx").write_bytes(buf.getvalue())
    found = findings_of(root)
    assert has(found, "data/training.xlsx", 2, None, ERROR, "cell XFD2 lies beyond column AMJ"), show(found)


def test_xlsx_unpacking_to_more_than_the_cap_is_refused(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(reader, "MAX_XLSX_UNPACKED", 20_000)
    root = make_programme(tmp_path / "p")
    (root / "data" / "training.xlsx").write_bytes(_xlsx_bytes([["person_id", "date", "topic"]]
                                                              + [["E001", "2025-01-01", "x" * 50]] * 400))
    found = findings_of(root)
    assert has(found, "data/training.xlsx", None, None, ERROR, "more than the 19.5 KiB a workbook may have"), \
        show(found)


# ---------------------------------------------------------------------------------------
# separators-only rows, merged headers, formulas without a value


def test_rows_of_only_separators_are_skipped_in_csv_and_xlsx(tmp_path: Path) -> None:
    body = "E001,2025-01-01,x\n,,\n,,,,,,\r\n\nE002,2025-01-02,y\n,,\n"
    csv_root = make_programme(tmp_path / "csv", {"training.csv": TRAINING_HEAD + body})
    quoted_root = make_programme(tmp_path / "quoted", {"training.csv": TRAINING_HEAD + body.replace("x", '"x"')})
    xlsx_root = make_programme(tmp_path / "xlsx")
    (xlsx_root / "data" / "training.xlsx").write_bytes(_xlsx_bytes(
        [["person_id", "date", "topic"], ["E001", "2025-01-01", "x"], [None, None, None], [None] * 7, [],
         ["E002", "2025-01-02", "y"], [None] * 3]))
    for root in (csv_root, quoted_root, xlsx_root):
        prog = load_programme(root, today=TODAY)
        assert not list(prog.findings), show(list(prog.findings))
        assert prog.tables["training"]["_row"].tolist() == [2, 6]
        assert prog.tables["training"]["person_id"].tolist() == ["E001", "E002"]


def test_merged_xlsx_header_is_reported(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p")
    (root / "data" / "training.xlsx").write_bytes(_xlsx_bytes(
        [["person_id", "date", None, "topic"], ["E001", "2025-01-01", "2025-01-02", "x"]],
        lambda ws: ws.merge_cells("B1:C1")))
    found = findings_of(root)
    assert has(found, "data/training.xlsx", 1, "date", ERROR,
               "header cells B1:C1 are merged: only column B is named; column C under it has no label"), show(found)


def test_formula_without_saved_value_is_reported(tmp_path: Path) -> None:
    # openpyxl writes formulas without the value a spreadsheet program would have saved
    root = make_programme(tmp_path / "p")
    (root / "data" / "training.xlsx").write_bytes(_xlsx_bytes(
        [["person_id", "date", "topic", "remark"], ["E001", "2025-01-01", '=A2&"x"', "=1+1"],
         ["E002", "2025-01-02", "ok", "#DIV/0!"]]))
    found = findings_of(root)
    assert has(found, "data/training.xlsx", 2, "topic", ERROR,
               "cell C2 holds the formula '=A2&\"x\"' without a saved value"), show(found)
    assert has(found, "data/training.xlsx", 2, "remark", WARNING, "cell D2 holds the formula '=1+1'"), show(found)
    # #DIV/0! is the error value a spreadsheet stores for a division by zero (common practice)
    assert has(found, "data/training.xlsx", 3, "remark", WARNING, "cell D3 holds the spreadsheet error #DIV/0!"), \
        show(found)


# ---------------------------------------------------------------------------------------
# byte-order mark


def test_bad_byte_after_a_byte_order_mark_is_located(tmp_path: Path) -> None:
    # EF BB BF is the UTF-8 byte-order mark (Unicode Standard ch. 23.8); E9 followed by an ASCII
    # letter is ill-formed UTF-8 (Unicode Standard Table 3-7)
    raw = b"\xef\xbb\xbfperson_id,group\n\xe9E,G1\n"
    root = make_programme(tmp_path / "p", {"people.csv": raw})
    found = findings_of(root)
    assert has(found, "data/people.csv", 2, None, ERROR,
               "byte 0xe9 on line 2 (byte 1 of the line, 20 of the file;"), show(found)
    root = make_programme(tmp_path / "q", {"people.csv": b"person_id,group\nE1,G1\nE2,\xe9\n"})
    found = findings_of(root)
    assert has(found, "data/people.csv", 3, None, ERROR, "byte 0xe9 on line 3 (byte 4 of the line, 26 of the file;"), \
        show(found)


# ---------------------------------------------------------------------------------------
# the programme's own templates


TEMPLATE_CASES = [
    ("syntax", "{% extends 'base.html' %}{% block content %}\n\n{% if %}{% endblock %}\n",
     "templates/overview.html:3:: error: template syntax: "),
    ("undefined", "{% extends 'base.html' %}{% block content %}\n<p>\n{{ nosuch.attr }}</p>{% endblock %}\n",
     "templates/overview.html:3:: error: template: 'nosuch' is undefined"),
    ("not-utf8", "{% extends 'base.html' %}\n{# caf\xe9 #}\n".encode("latin-1"),
     "templates/overview.html:2:: error: not UTF-8 text: byte 0xe9 on line 2"),
]


@pytest.mark.parametrize("name,text,expect", TEMPLATE_CASES, ids=[c[0] for c in TEMPLATE_CASES])
def test_template_mistake_is_the_users_not_an_internal_error(tmp_path: Path, name: str, text: Any,
                                                             expect: str) -> None:
    root = make_programme(tmp_path / "p")
    (root / "templates").mkdir()
    (root / "templates" / "overview.html").write_bytes(text if isinstance(text, bytes) else text.encode())
    rc, out, err, rss = run_cli("build", str(root), "--out", str(tmp_path / "site"), timeout=120)
    assert rc == 1, out + err
    assert "internal error" not in out + err and "Traceback" not in out + err, out + err
    assert expect in out, out + err
    assert not (tmp_path / "site").exists()


def test_separator_rows_in_noise_logs_are_skipped(tmp_path: Path) -> None:
    noise = "measurement_id,date,kind,group,duration_h,laeq\nM1,2025-03-01,area,G1,1,85\nM2,2025-03-01,area,G1,1,85\n"
    log = "start,laeq\n2025-03-01T08:00:00,85\n,\n2025-03-01T08:01:00,86\n2025-03-01T08:02:00,87\n,\n"
    root = make_programme(tmp_path / "p", {"noise.csv": noise, "noise_logs/M1.csv": log, "noise_logs/M2.csv": log})
    prog = load_programme(root, today=TODAY)
    assert not list(prog.findings), show(list(prog.findings))
    assert prog.noise_logs["M1"]["_row"].tolist() == [2, 4, 5]
