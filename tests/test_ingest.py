"""Reading data files in other dresses: ``files:`` in programme.yaml, wide audiograms, and
refusals that name the setting which would read the file.

The European export below is made by the test itself from site_example: semicolons
between cells, decimal commas, Windows code page 1252, DD.MM.YYYY dates and CRLF line
ends (how a spreadsheet set to a continental European locale saves CSV: common practice),
with the columns under a system's own names and the audiograms one row per test.
"""
from __future__ import annotations

import csv
import datetime as dt
import io
import json
import os
import re
import shutil
from pathlib import Path
from typing import Any

import pandas as pd
import pytest
import yaml

from generator.config import CONFIG_FILE, FileDress, load_config
from generator.export import export_results
from generator.findings import Findings
from generator.inputs.reader import load_programme
from generator.inputs.spec import AUDIO_FREQS, BY_NAME, FILES
from tests.conftest import EXAMPLE, FIXED_EPOCH, TEST_KEY, env
from tests.progkit import make_programme

TODAY = dt.date(2026, 1, 1)
REPO = Path(__file__).resolve().parent.parent

#: column names of an invented HR system (people) and an invented dosimetry package (noise)
PEOPLE_NAMES = {"person_id": "Employee N°", "group": "Exposure group", "sex": "Sex",
                "birth_date": "Date of birth", "hire_date": "Start date", "leave_date": "End date",
                "department": "Department", "job_title": "Job", "name": "Full name"}
NOISE_NAMES = {"measurement_id": "Measurement", "date": "Date", "kind": "Type", "person_id": "Employee N°",
               "group": "Exposure group", "location": "Place", "duration_h": "Run time (h)",
               "laeq": "LAeq dB(A)", "lcpeak": "LCpeak dB(C)", "lceq": "LCeq dB(C)", "instrument_class": "Class"}
#: an invented audiometric system: one row per test, both ears side by side
AUDIO_NAMES = {"person_id": "Employee N°", "date": "Test date", "kind": "Test type",
               "quiet_hours": "Quiet hours", "audiometer_id": "Audiometer"}
EAR_WORDS = {"l": "Left", "r": "Right"}
AUDIO_PATH = "exports/Hearing tests 2025.csv"

NUMBER_KINDS = ("float", "int", "level", "hours", "hl")


def load(root: Path):
    return load_programme(root, today=TODAY)


def _rows(path: Path) -> list[dict[str, str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


def _european(value: str, kind: str) -> str:
    """Return one cell as a continental spreadsheet writes it."""
    if value and kind in NUMBER_KINDS:
        return value.replace(".", ",")
    if kind in ("date", "date_or_year") and re.fullmatch(r"\d{4}-\d{2}-\d{2}", value):
        y, m, d = value.split("-")
        return f"{d}.{m}.{y}"
    return value


def _write_european(path: Path, header: list[str], rows: list[list[str]]) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    buf = io.StringIO()
    w = csv.writer(buf, delimiter=";", lineterminator="\r\n")
    w.writerow(header)
    w.writerows(rows)
    path.write_bytes(buf.getvalue().encode("cp1252"))


def wide_rows(long: list[dict[str, str]], names: dict[str, str] | None = None,
              ear_name: Any = None) -> tuple[list[str], list[list[str]]]:
    """Return (header, rows) of per-ear audiogram rows gathered one row per person and date."""
    spec = BY_NAME["audiograms"]
    common = [c.name for c in spec.columns if c.name != "ear" and c.kind != "hl"]
    hl = [f"hl_{f}_{e}" for e in ("l", "r") for f in AUDIO_FREQS]
    tests: dict[tuple[str, str], dict[str, str]] = {}
    for r in long:
        t = tests.setdefault((r["person_id"], r["date"]), {c: r[c] for c in common})
        for f in AUDIO_FREQS:
            t[f"hl_{f}_{r['ear'].lower()}"] = r[f"hl_{f}"]
    names = names or {}
    label = ear_name or (lambda c: c)
    header = [names.get(c, c) for c in common] + [label(c) for c in hl]
    return header, [[t.get(c, "") for c in common + hl] for t in tests.values()]


def european_copy(src: Path, dst: Path) -> dict[str, Any]:
    """Write *src* re-dressed as a European export into *dst*; return the files: section."""
    shutil.copytree(src / "pages", dst / "pages")
    shutil.copytree(src / "data" / "noise_logs", dst / "data" / "noise_logs")
    files: dict[str, Any] = {}
    for spec in FILES:
        rows = _rows(src / spec.path)
        kinds = {c.name: c.kind for c in spec.columns}
        dress: dict[str, Any] = {"delimiter": ";", "decimal": ",", "encoding": "cp1252",
                                 "date_format": "%d.%m.%Y"}
        if spec.name == "audiograms":
            label = (lambda c: f"{EAR_WORDS[c[-1]]} {c.split('_')[1]} Hz")
            header, body = wide_rows(rows, AUDIO_NAMES, label)
            own = {**{v: k for k, v in AUDIO_NAMES.items()},
                   **{label(f"hl_{f}_{e}"): f"hl_{f}_{e}" for e in ("l", "r") for f in AUDIO_FREQS}}
            ours = [own.get(h, h) for h in header]
            body = [[_european(v, kinds.get(c) or ("hl" if c.startswith("hl_") else "text"))
                     for c, v in zip(ours, r)] for r in body]
            _write_european(dst / AUDIO_PATH, header, body)
            dress.update(path=AUDIO_PATH, columns=own)
        else:
            cols = list(rows[0].keys())
            names = PEOPLE_NAMES if spec.name == "people" else NOISE_NAMES if spec.name == "noise" else {}
            header = [names.get(c, c) for c in cols]
            body = [[_european(r[c], kinds[c]) for c in cols] for r in rows]
            _write_european(dst / spec.path, header, body)
            if names:
                dress["columns"] = {v: k for k, v in names.items() if k in cols}
        files[spec.name] = dress
    text = (src / CONFIG_FILE).read_text(encoding="utf-8")
    text = re.sub(r"(?m)^files:.*$", "", text)
    text += "\n" + yaml.safe_dump({"files": files}, allow_unicode=True, sort_keys=True)
    (dst / CONFIG_FILE).write_text(text, encoding="utf-8")
    return files


def _export(root: Path, to: Path) -> dict[str, bytes]:
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        written = export_results(root, to)
    return {p.name: p.read_bytes() for p in written}


def _without_digest(summary: bytes) -> dict[str, Any]:
    data = json.loads(summary)
    data.pop("input_digest")  # sha256 of the input bytes: other bytes, by design
    return data


# ---------------------------------------------------------------------------------------
# the European export of site_example


@pytest.fixture(scope="module")
def european(tmp_path_factory: pytest.TempPathFactory) -> Path:
    if not (EXAMPLE / CONFIG_FILE).is_file():
        pytest.skip("site_example is absent")
    root = tmp_path_factory.mktemp("european") / "prog"
    european_copy(EXAMPLE, root)
    return root


def test_the_european_copy_really_is_another_dress(european: Path) -> None:
    raw = (european / AUDIO_PATH).read_bytes()
    head = raw.split(b"\r\n", 1)[0]
    assert b";" in head and b"," not in head and b"\xb0" in head  # '°' in cp1252: not UTF-8
    with pytest.raises(UnicodeDecodeError):
        raw.decode("utf-8")
    assert re.search(rb";\d{2}\.\d{2}\.\d{4};", raw) and re.search(rb";\d+,\d;", raw)
    assert not (european / "data" / "audiograms.csv").exists()
    people = (european / "data" / "people.csv").read_bytes().decode("cp1252")
    assert people.startswith("Employee N°;Exposure group;")


def test_european_export_gives_the_same_exports(european: Path, tmp_path: Path) -> None:
    plain = _export(EXAMPLE, tmp_path / "plain")
    dressed = _export(european, tmp_path / "dressed")
    assert sorted(plain) == sorted(dressed)
    for name in sorted(plain):
        if name == "summary.json":
            assert _without_digest(dressed[name]) == _without_digest(plain[name])
        else:
            assert dressed[name] == plain[name], name
    assert len(plain["hearing_results.csv"].splitlines()) > 3000  # every ear of every test came through


def test_european_findings_name_the_real_file_line_and_column(european: Path, tmp_path: Path) -> None:
    root = tmp_path / "prog"
    shutil.copytree(european, root)
    path = root / AUDIO_PATH
    lines = path.read_bytes().decode("cp1252").split("\r\n")
    header = lines[0].split(";")
    cells = lines[4].split(";")
    cells[header.index("Right 4000 Hz")] = "55,5,5"
    cells[header.index("Test date")] = "31.02.2024"
    lines[4] = ";".join(cells)
    path.write_bytes("\r\n".join(lines).encode("cp1252"))
    found = {(f.path, f.row, f.column): f.message for f in load(root).findings.errors}
    assert (AUDIO_PATH, 5, "Right 4000 Hz") in found, found
    assert (AUDIO_PATH, 5, "Test date") in found, found
    assert "%d.%m.%Y" in found[(AUDIO_PATH, 5, "Test date")]


# ---------------------------------------------------------------------------------------
# wide audiograms


def test_wide_audiograms_without_settings_read_as_per_ear(tmp_path: Path) -> None:
    if not (EXAMPLE / CONFIG_FILE).is_file():
        pytest.skip("site_example is absent")
    root = tmp_path / "wide"
    shutil.copytree(EXAMPLE, root)
    header, body = wide_rows(_rows(EXAMPLE / "data" / "audiograms.csv"))
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(body)
    (root / "data" / "audiograms.csv").write_text(buf.getvalue(), encoding="utf-8")
    assert "ear" not in header and "hl_4000_r" in header
    plain, wide = load(EXAMPLE), load(root)
    a, b = plain.tables["audiograms"], wide.tables["audiograms"]
    assert list(a.columns) == list(b.columns)
    pd.testing.assert_frame_equal(a.drop(columns="_row"), b.drop(columns="_row"))
    # rows keep the line of the wide file: both ears of line 2 came from line 2
    assert b["_row"].tolist()[:4] == [2, 2, 3, 3]
    assert len(wide.findings.errors) == len(plain.findings.errors) == 0
    assert len(wide.findings.warnings) == len(plain.findings.warnings)
    exports_plain = _export(EXAMPLE, tmp_path / "e1")
    exports_wide = _export(root, tmp_path / "e2")
    assert exports_wide["hearing_results.csv"] == exports_plain["hearing_results.csv"]
    assert exports_wide["actions.csv"] == exports_plain["actions.csv"]


def _wide_prog(tmp_path: Path, text: str, config: dict | None = None) -> Path:
    return make_programme(tmp_path / "p", {"audiograms.csv": text}, config=config)


def test_an_ear_without_levels_is_not_a_test(tmp_path: Path) -> None:
    hl_l = ",".join(f"hl_{f}_l" for f in AUDIO_FREQS)
    hl_r = ",".join(f"hl_{f}_r" for f in AUDIO_FREQS)
    text = (f"person_id,date,kind,{hl_l},{hl_r},quiet_hours\n"
            f"E001,2025-02-01,baseline,{','.join(['10'] * 7)},{','.join([''] * 7)},16\n"
            f"E002,2025-02-01,,{','.join([''] * 6)},NR,{','.join(['5'] * 7)},\n"
            f"E001,2025-03-01,,{','.join([''] * 7)},{','.join([''] * 7)},\n")
    prog = load(_wide_prog(tmp_path, text))
    aud = prog.tables["audiograms"]
    assert list(zip(aud["person_id"], aud["ear"], aud["_row"])) == [("E001", "L", 2), ("E002", "L", 3),
                                                                      ("E002", "R", 3)]
    assert aud["kind"].tolist() == ["baseline", "periodic", "periodic"]
    assert aud["quiet_hours"].iloc[0] == 16.0 and bool(aud["nr_8000"].iloc[1]) and aud["hl_500"].iloc[2] == 5.0
    assert not prog.findings.errors
    [w] = [f for f in prog.findings.warnings if f.row == 4]
    assert w.path == "data/audiograms.csv" and "either ear" in w.message


def test_wide_findings_name_the_ear_column(tmp_path: Path) -> None:
    text = "person_id,date,HL_4000_R,hl_4000_l\nE001,2025-02-01,500,10\nE001,2025-02-01,20,10\n"
    prog = load(_wide_prog(tmp_path, text))
    errs = {(f.row, f.column) for f in prog.findings.errors}
    assert (2, "HL_4000_R") in errs  # out of range, named as the file names it
    assert (3, "person_id+date+ear") in errs  # the same test twice


def test_columns_map_a_systems_names_onto_wide_audiograms(tmp_path: Path) -> None:
    text = "Worker;Day;L4k;R4k\nE001;01.02.2025;25;30,5\n"
    cfg = {"files": {"audiograms": {"delimiter": ";", "decimal": ",", "date_format": "%d.%m.%Y",
                                    "columns": {"Worker": "person_id", "Day": "date", "L4k": "hl_4000_l",
                                                "R4k": "hl_4000_r"}}}}
    root = make_programme(tmp_path / "p", {"audiograms.csv": text.encode()}, config=cfg)
    prog = load(root)
    assert not prog.findings.errors, prog.findings.lines()
    aud = prog.tables["audiograms"]
    assert aud["ear"].tolist() == ["L", "R"] and aud["hl_4000"].tolist() == [25.0, 30.5]
    assert aud["date"].tolist() == [pd.Timestamp("2025-02-01")] * 2


# ---------------------------------------------------------------------------------------
# refusals that name the setting


def _suggested(message: str) -> dict[str, Any]:
    """Return the files: mapping a message suggests ('add files: {...} to programme.yaml')."""
    m = re.search(r"add (files: \{.*\}) to programme\.yaml", message)
    assert m, message
    return yaml.safe_load(m.group(1))["files"]


def _apply(root: Path, suggested: dict[str, Any]) -> None:
    cfg = yaml.safe_load((root / CONFIG_FILE).read_text(encoding="utf-8"))
    files = cfg.setdefault("files", {}) or {}
    for name, settings in suggested.items():
        entry = files.setdefault(name, {})
        for k, v in settings.items():
            if isinstance(v, dict):
                entry.setdefault(k, {}).update(v)
            else:
                entry[k] = v
    cfg["files"] = files
    (root / CONFIG_FILE).write_text(yaml.safe_dump(cfg, allow_unicode=True), encoding="utf-8")


NOISE_EU = ("measurement_id;date;kind;duration_h;laeq\n"
            "M1;2025-03-04;area;7,5;85,3\n"
            "M2;2025-03-05;area;8;90\n")


@pytest.mark.parametrize("case", ["semicolon", "tab", "decimal", "day-first", "slashes", "cp1252", "renamed",
                                  "european"])
def test_each_refused_dress_names_the_setting_that_reads_it(tmp_path: Path, case: str) -> None:
    files: dict[str, Any] = {}
    config: dict[str, Any] = {}
    expect: dict[str, Any]
    if case == "semicolon":
        files["noise.csv"] = NOISE_EU.replace("7,5", "7.5").replace("85,3", "85.3")
        expect = {"noise": {"delimiter": ";"}}
    elif case == "tab":
        files["noise.csv"] = NOISE_EU.replace(";", "\t").replace("7,5", "7.5").replace("85,3", "85.3")
        expect = {"noise": {"delimiter": "\t"}}
    elif case == "decimal":
        files["noise.csv"] = NOISE_EU
        config = {"files": {"noise": {"delimiter": ";"}}}
        expect = {"noise": {"decimal": ","}}
    elif case == "day-first":
        files["training.csv"] = "person_id,date\nE001,31.12.2025\nE002,01.02.2025\n"
        expect = {"training": {"date_format": "%d.%m.%Y"}}
    elif case == "slashes":
        files["training.csv"] = "person_id,date\nE001,31/12/2025\nE002,01/02/2025\n"
        expect = {"training": {"date_format": "%d/%m/%Y"}}
    elif case == "cp1252":
        files["training.csv"] = "person_id,date,topic\nE001,2025-02-01,Gehörschutz\n".encode("cp1252")
        expect = {"training": {"encoding": "cp1252"}}
    elif case == "european":
        files["noise.csv"] = NOISE_EU.replace("2025-03-04", "04.03.2025")
        expect = {"noise": {"delimiter": ";", "decimal": ",", "date_format": "%d.%m.%Y"}}
    else:
        files["training.csv"] = "Person ID,Training date,Topic\nE001,2025-02-01,annual\n"
        expect = {"training": {"columns": {"Person ID": "person_id", "Training date": "date"}}}
    root = make_programme(tmp_path / "p", files, config=config)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH):
        prog = load(root)
    errors = prog.findings.errors
    assert errors, case
    suggested: dict[str, Any] = {}
    for e in errors:
        assert "Traceback" not in e.message
        if "add files:" in e.message:
            for name, settings in _suggested(e.message).items():
                for k, v in settings.items():
                    if isinstance(v, dict):
                        suggested.setdefault(name, {}).setdefault(k, {}).update(v)
                    else:
                        suggested.setdefault(name, {})[k] = v
    assert suggested == expect, [e.format() for e in errors]
    if case in ("cp1252", "semicolon", "tab", "european"):  # one finding for the file's dress
        [e] = errors
        assert e.path == "data/" + next(iter(files)) and e.row in (1, 2)
    first = min(errors, key=lambda f: (f.row or 0))
    assert first.path.startswith("data/") and first.row in (1, 2, 3)
    # the suggested setting reads the file
    _apply(root, suggested)
    again = load(root)
    assert not again.findings.errors, again.findings.lines()


def test_semicolon_header_message(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"noise.csv": NOISE_EU.replace("7,5", "7.5").replace("85,3", "85.3")})
    [e] = load(root).findings.errors
    assert e.format() == ('data/noise.csv:1:: error: the header holds \';\' separated names; '
                          'add files: {noise: {delimiter: ";"}} to programme.yaml')


def test_one_finding_names_every_setting_a_refused_file_needs(tmp_path: Path) -> None:
    text = "person_id;date;topic\r\nE001;31.01.2025;Gehörschutz\r\nE002;01.02.2025;Lärm, 8,5 h\r\n"
    root = make_programme(tmp_path / "p", {"training.csv": text.encode("cp1252")})
    [e] = load(root).findings.errors
    assert e.format() == (
        "data/training.csv:2:: error: byte 0xf6 on line 2 (byte 20 of the line, 42 of the file; in cp1252 it is 'ö') is not UTF-8, the header "
        "holds ';' separated names and dates are written day first ('31.01.2025' on line 2); add files: "
        '{training: {encoding: cp1252, delimiter: ";", date_format: "%d.%m.%Y"}} to programme.yaml '
        "(or encoding: latin-1), or save the file as UTF-8")
    _apply(root, _suggested(e.message))
    prog = load(root)
    assert not prog.findings.errors, prog.findings.lines()
    assert prog.tables["training"]["topic"].tolist() == ["Gehörschutz", "Lärm, 8,5 h"]


def test_missing_columns_list_the_files_columns_and_closest(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"noise.csv": "Measurement ID,Datum,kind,Run hours,LAeq dB\n"
                                                        "M1,2025-03-04,area,7.5,85\n"})
    errs = {f.column: f.message for f in load(root).findings.errors}
    msg = errs["measurement_id"]
    assert "the file's columns: 'Measurement ID', 'Datum', 'kind', 'Run hours', 'LAeq dB'" in msg
    assert "closest: 'Measurement ID'" in msg
    assert '{"Measurement ID": measurement_id}' in msg
    assert "closest: 'LAeq dB'" in errs["laeq"]
    assert "closest: 'Datum'" in errs["date"]


def test_unknown_columns_hint_at_known_names(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"noise.csv": "measurement_id,date,kind,duration_h,laeq,Peak dB(C)\n"
                                                        "M1,2025-03-04,area,7.5,85,120\n"})
    [w] = [f for f in load(root).findings.warnings if f.key == "unknown columns"]
    assert '{"Peak dB(C)": lcpeak}' in w.message


def test_a_mix_of_settings_is_read(tmp_path: Path) -> None:
    """Thousands separators, ISO dates beside day-first ones, a BOM under utf-8-sig."""
    text = "\ufeffmeasurement_id;date;kind;duration_h;laeq;osha_dose_pct\n" \
           "M1;04.03.2025;area;7,5;85,3;1.234,5\nM2;2025-03-05;area;8;90;\n"
    cfg = {"files": {"noise": {"delimiter": ";", "decimal": ",", "date_format": "%d.%m.%Y"}}}
    prog = load(make_programme(tmp_path / "p", {"noise.csv": text.encode("utf-8")}, config=cfg))
    assert not prog.findings.errors, prog.findings.lines()
    n = prog.tables["noise"]
    assert n["laeq"].tolist() == [85.3, 90.0] and n["osha_dose_pct"].iloc[0] == 1234.5
    assert n["date"].dt.strftime("%Y-%m-%d").tolist() == ["2025-03-04", "2025-03-05"]


def test_a_decimal_point_under_a_comma_setting_is_an_error(tmp_path: Path) -> None:
    text = "measurement_id;date;kind;duration_h;laeq\nM1;2025-03-04;area;7,5;85.3\n"
    cfg = {"files": {"noise": {"delimiter": ";", "decimal": ","}}}
    [e] = load(make_programme(tmp_path / "p", {"noise.csv": text}, config=cfg)).findings.errors
    assert (e.path, e.row, e.column) == ("data/noise.csv", 2, "laeq") and "decimal is ','" in e.message


def test_wrong_encoding_setting_names_the_line(tmp_path: Path) -> None:
    text = "person_id,date,topic\nE001,2025-02-01,a\nE001,2025-02-02,\x81\n"
    root = make_programme(tmp_path / "p", {"training.csv": text.encode("latin-1")},
                          config={"files": {"training": {"encoding": "cp1252"}}})
    [e] = load(root).findings.errors
    assert (e.path, e.row) == ("data/training.csv", 3) and "cp1252" in e.message


# ---------------------------------------------------------------------------------------
# the files: schema


def _config_errors(tmp_path: Path, files: Any) -> list[str]:
    root = make_programme(tmp_path / "p", config={"files": files})
    findings = Findings()
    load_config(root, findings)
    return [f.format() for f in findings]


@pytest.mark.parametrize("files, expected", [
    ({"audiograms": {"path": "/etc/hosts"}}, "files.audiograms.path: error: '/etc/hosts' is an absolute path"),
    ({"audiograms": {"path": "../outside.csv"}}, "files.audiograms.path: error: '../outside.csv' leaves the "
                                                 "programme folder"),
    ({"audiograms": {"path": "C:\\exports\\a.csv"}}, "is an absolute path"),
    ({"audiogram": {"delimiter": ";"}}, "files.audiogram: warning: 'audiogram' is not a data file (did you "
                                        "mean 'audiograms'?); the entry is ignored"),
    ({"noise": {"delimiter": ";;"}}, "files.noise.delimiter: error: ';;' must be one character"),
    ({"noise": {"decimal": ";"}}, "files.noise.decimal: error: ';' must be '.' or ','"),
    ({"noise": {"encoding": "cp1525"}}, "files.noise.encoding: error: 'cp1525' is not a known text encoding "
                                        "(did you mean 'cp1252'?)"),
    ({"noise": {"encoding": "base64"}}, "is not a known text encoding"),
    ({"noise": {"date_format": "%d.%m"}}, "files.noise.date_format: error: '%d.%m' does not hold a whole date"),
    ({"noise": {"date_format": "DD.MM.YYYY"}}, "has no % directive"),
    ({"noise": {"columns": {"Level": "leq"}}}, "files.noise.columns: error: 'leq' is not a column of noise"),
    ({"noise": {"columns": {"A": "laeq", "B": "laeq"}}}, "both 'A' and 'B' are mapped to 'laeq'"),
    ({"noise": {"colums": {}}}, "files.noise.colums: warning: unknown setting 'colums' (did you mean "
                                "'columns'?) is ignored"),
    ({"noise": {"path": "x.csv"}, "tasks": {"path": "X.csv"}}, "'X.csv' is also the path of files.noise"),
    ("audiograms", "files: error: expected a mapping"),
])
def test_files_settings_are_checked_with_their_line(tmp_path: Path, files: Any, expected: str) -> None:
    lines = _config_errors(tmp_path, files)
    assert any(expected in line for line in lines), lines
    assert all(re.match(r"^programme\.yaml:\d+:files", line) for line in lines), lines


def test_good_files_settings_load(tmp_path: Path) -> None:
    files = {"audiograms": {"path": "exports\\Hearing tests 2025.csv", "delimiter": "tab", "decimal": ",",
                            "encoding": "latin-1", "date_format": "%d/%m/%Y",
                            "columns": {"Employee No": "person_id", 4000: "hl_4000_l"}},
             "people": None}
    root = make_programme(tmp_path / "p", config={"files": files})
    findings = Findings()
    cfg = load_config(root, findings)
    assert not list(findings)
    a = cfg.files["audiograms"]
    assert (a.path, a.delimiter, a.decimal, a.encoding, a.date_format) == (
        "exports/Hearing tests 2025.csv", "\t", ",", "latin-1", "%d/%m/%Y")
    assert a.columns == {"Employee No": "person_id", "4000": "hl_4000_l"}
    assert cfg.files["people"] == FileDress()
    assert a.where["path"][0] is not None


def test_paths_stay_inside_the_folder(tmp_path: Path) -> None:
    outside = tmp_path / "outside.csv"
    outside.write_text("person_id,date\nE001,2025-02-01\n", encoding="utf-8")
    root = make_programme(tmp_path / "p", config={"files": {"training": {"path": "exports/t.csv"},
                                                            "notices": {"path": "exports/missing.csv"}}})
    (root / "exports").mkdir()
    os.symlink(outside, root / "exports" / "t.csv")
    prog = load(root)
    lines = [f.format() for f in prog.findings.errors]
    assert any(re.match(r"programme\.yaml:\d+:files\.training\.path: error: 'exports/t.csv' resolves outside",
                        line) for line in lines), lines
    assert any(re.match(r"programme\.yaml:\d+:files\.notices\.path: error: 'exports/missing.csv' does not exist",
                        line) for line in lines), lines
    assert "training" not in prog.present and "exports/t.csv" not in prog.present.values()


def test_a_named_file_replaces_the_default_and_is_not_unknown(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "p", {"training.csv": "person_id,date\nE001,2025-01-01\n",
                                           "Training export.csv": "person_id,date\nE002,2025-02-01\n"},
                          config={"files": {"training": {"path": "data/Training export.csv"}}})
    prog = load(root)
    assert prog.present["training"] == "data/Training export.csv"
    assert prog.tables["training"]["person_id"].tolist() == ["E002"]
    warned = {(f.path, f.key) for f in prog.findings.warnings}
    assert ("data/training.csv", "replaced data file") in warned
    assert not any(f.path == "data/Training export.csv" for f in prog.findings)


def test_a_workbook_sheet_is_chosen_by_name(tmp_path: Path) -> None:
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    book.active.title = "Notes"
    book.active.append(["exported by an invented system"])
    sheet = book.create_sheet("Tests")
    sheet.append(["Employee No", "Test date", "L 4000", "R 4000"])
    sheet.append(["E001", dt.datetime(2025, 2, 1), 20, "NR"])
    root = make_programme(tmp_path / "p", config={"files": {"audiograms": {
        "path": "exports/tests.xlsx", "sheet": "tests",
        "columns": {"Employee No": "person_id", "Test date": "date", "L 4000": "hl_4000_l",
                    "R 4000": "hl_4000_r"}}}})
    (root / "exports").mkdir()
    book.save(root / "exports" / "tests.xlsx")
    prog = load(root)
    assert not prog.findings.errors, prog.findings.lines()
    aud = prog.tables["audiograms"]
    assert aud["ear"].tolist() == ["L", "R"] and aud["hl_4000"].iloc[0] == 20 and bool(aud["nr_4000"].iloc[1])
    cfg = yaml.safe_load((root / CONFIG_FILE).read_text(encoding="utf-8"))
    cfg["files"]["audiograms"]["encoding"] = "cp1252"
    (root / CONFIG_FILE).write_text(yaml.safe_dump(cfg), encoding="utf-8")
    [w] = load(root).findings.warnings
    assert (w.path, w.column) == (CONFIG_FILE, "files.audiograms.encoding") and "workbook" in w.message
    cfg["files"]["audiograms"]["sheet"] = "Results"
    (root / CONFIG_FILE).write_text(yaml.safe_dump(cfg), encoding="utf-8")
    [e] = load(root).findings.errors
    assert e.path == CONFIG_FILE and e.column == "files.audiograms.sheet" and "'Notes', 'Tests'" in e.message


# ---------------------------------------------------------------------------------------
# starter and documentation


def test_starter_holds_the_section_commented_out(tmp_path: Path) -> None:
    from generator.starter import programme_yaml
    text = programme_yaml()
    assert "\nfiles:" not in text  # not active
    block = text[text.index("# files:"):]
    uncommented = "\n".join(line[2:] if line.startswith("# ") else "" for line in block.splitlines())
    data = yaml.safe_load(uncommented)
    assert set(data["files"]) >= {"audiograms", "people"}
    root = make_programme(tmp_path / "p", config=text + "\n" + uncommented)
    findings = Findings()
    cfg = load_config(root, findings)
    assert not findings.errors, [f.format() for f in findings]
    assert cfg.files["audiograms"].date_format == "%d.%m.%Y"


def test_readme_and_data_format_describe_every_setting() -> None:
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    reference = (REPO / "docs" / "data-format.md").read_text(encoding="utf-8")
    import dataclasses
    keys = [f.name for f in dataclasses.fields(FileDress) if not f.metadata.get("internal")]
    for key in keys:
        assert f"`{key}`" in reference, key
        assert f"{key}:" in readme, key
    assert "hl_<f>_l" in readme and "hl_<f>_l" in reference
    assert "%d.%m.%Y" in readme and "cp1252" in readme


def test_semicolon_files_keep_commas_inside_cells(tmp_path: Path) -> None:
    plain = "measurement_id;date;kind;duration_h;laeq;notes\nM1;2025-03-04;area;7,5;85,3;near press, east side\n"
    quoted = ('measurement_id;date;kind;duration_h;laeq;notes\n'
              'M1;2025-03-04;area;7,5;85,3;"near press, east side"\n')
    cfg = {"files": {"noise": {"delimiter": ";", "decimal": ","}}}
    got = []
    for i, text in enumerate((plain, quoted)):
        prog = load(make_programme(tmp_path / str(i), {"noise.csv": text}, config=cfg))
        assert not prog.findings.errors, prog.findings.lines()
        n = prog.tables["noise"]
        got.append((n["notes"].tolist(), n["laeq"].tolist(), n["duration_h"].tolist(), n["_row"].tolist()))
    assert got[0] == got[1] == (["near press, east side"], [85.3], [7.5], [2])


def test_a_setting_that_does_not_fit_names_the_one_that_does(tmp_path: Path) -> None:
    text = "measurement_id,date,kind,duration_h,laeq\nM1,2025-03-04,area,7.5,85.3\n"
    root = make_programme(tmp_path / "p", {"noise.csv": text}, config={"files": {"noise": {"delimiter": ";"}}})
    [e] = load(root).findings.errors
    assert e.format() == ("data/noise.csv:1:: error: the header holds ',' separated names (files.noise.delimiter "
                          "is \";\"); add files: {noise: {delimiter: \",\"}} to programme.yaml")


def test_line_numbers_stay_the_files_own_after_re_separation(tmp_path: Path) -> None:
    text = ("measurement_id;date;kind;duration_h;laeq\r\n\r\nM1;04.03.2025;area;7,5;85,3\r\n"
            "M2;05.03.2025;area;8;abc\r\n")
    cfg = {"files": {"noise": {"delimiter": ";", "decimal": ",", "date_format": "%d.%m.%Y",
                               "encoding": "latin-1", "columns": {"LAeq": "laeq"}}}}
    root = make_programme(tmp_path / "p", {"noise.csv": text.replace("laeq", "LAeq").encode("latin-1")},
                          config=cfg)
    prog = load(root)
    [e] = prog.findings.errors
    assert (e.path, e.row, e.column) == ("data/noise.csv", 4, "LAeq") and "'abc' is not a number" in e.message
    assert prog.tables["noise"]["_row"].tolist() == [3, 4]


def test_a_wide_export_under_its_own_names_gets_a_mapping_to_paste(tmp_path: Path) -> None:
    text = "Worker ID,Test date,Left 500 Hz,Right 500 Hz,L4k,R4k\nE001,2025-02-01,10,15,30,NR\n"
    root = make_programme(tmp_path / "p", {"audiograms.csv": text})
    prog = load(root)
    errs = {f.column: f.message for f in prog.findings.errors}
    assert set(errs) == {"person_id", "date", "ear"}, errs
    assert '"Left 500 Hz": hl_500_l' in errs["ear"] and "L4k: hl_4000_l" in errs["ear"]
    [w] = [f for f in prog.findings.warnings if f.key == "unknown columns"]
    _apply(root, _suggested(w.message))
    prog = load(root)
    assert not prog.findings.errors, prog.findings.lines()
    aud = prog.tables["audiograms"]
    assert aud["ear"].tolist() == ["L", "R"] and aud["hl_4000"].tolist()[0] == 30.0
    assert aud["hl_500"].tolist() == [10.0, 15.0] and bool(aud["nr_4000"].iloc[1])


def test_a_workbook_keeps_its_number_cells_under_a_decimal_comma(tmp_path: Path) -> None:
    openpyxl = pytest.importorskip("openpyxl")
    book = openpyxl.Workbook()
    book.active.append(["measurement_id", "date", "kind", "duration_h", "laeq", "osha_dose_pct"])
    book.active.append(["M1", "04.03.2025", "area", 7.5, "85,3", 1.234])
    root = make_programme(tmp_path / "p", config={"files": {"noise": {"decimal": ",", "date_format": "%d.%m.%Y"}}})
    book.save(root / "data" / "noise.xlsx")
    prog = load(root)
    assert not prog.findings.errors, prog.findings.lines()
    n = prog.tables["noise"]
    assert (n["duration_h"].iloc[0], n["laeq"].iloc[0], n["osha_dose_pct"].iloc[0]) == (7.5, 85.3, 1.234)
