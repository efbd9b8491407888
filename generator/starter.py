"""``hcpsite new``: a starter programme folder generated from the declarations.

programme.yaml lists every option of :mod:`generator.config` with its documentation as a
comment; each data file of :mod:`generator.inputs.spec` gets its declared header and a
few example rows of an invented workplace (two, or as many as a sampling or calibration
rule needs), consistent with each other so that ``hcpsite check --strict`` passes on the
starter as written once the person-code key is set.
"""
from __future__ import annotations

import csv
import datetime as dt
import io
import logging
from pathlib import Path
from typing import Any

import yaml

from .config import CONFIG_FILE, Config, iter_options
from .findings import HcpsiteError
from .inputs.spec import FILES, NOISE_LOG, FileSpec

log = logging.getLogger(__name__)

#: Example values of the starter, two rows per file (more where a check needs them), by column (blank when not given).
EXAMPLES: dict[str, list[dict[str, Any]]] = {
    "groups": [
        {"group": "G01", "name": "Press line operators", "description": "stamping presses, part handling",
         "shift_hours": 8, "days_per_week": 5},
        {"group": "G02", "name": "Assembly", "description": "hand tools, conveyors", "shift_hours": 8,
         "days_per_week": 5},
    ],
    "people": [
        {"person_id": "E10001", "group": "G01", "sex": "M", "birth_date": "1981-04-12",
         "hire_date": "2016-03-01", "department": "Pressing", "job_title": "Press operator",
         "name": "Example Worker One"},
        {"person_id": "E10002", "group": "G02", "sex": "F", "birth_date": "1993",
         "hire_date": "2020-09-14", "department": "Assembly", "job_title": "Assembler",
         "name": "Example Worker Two"},
    ],
    "audiometers": [
        {"audiometer_id": "AUD1", "date": "2025-02-10", "check": "functional", "result": "pass"},
        {"audiometer_id": "AUD1", "date": "2024-06-03", "check": "acoustic", "result": "pass"},
        {"audiometer_id": "AUD1", "date": "2024-06-03", "check": "exhaustive", "result": "pass"},
        {"audiometer_id": "AUD1", "date": "2024-11-18", "check": "booth", "result": "pass",
         "ob_500": 22, "ob_1000": 24, "ob_2000": 28, "ob_4000": 33, "ob_8000": 36},
    ],
    "protectors": [
        {"protector_id": "PR1", "type": "foam_plug", "nrr": 29, "snr": 34, "h": 33, "m": 31, "l": 28,
         "name": "Foam plug (example)"},
        {"protector_id": "PR2", "type": "earmuff", "nrr": 25, "snr": 30, "h": 32, "m": 27, "l": 19,
         "name": "Earmuff (example)"},
    ],
    "noise": [
        {"measurement_id": "M0001", "date": "2025-03-04", "kind": "personal", "person_id": "E10001",
         "group": "G01", "location": "Press line 2", "duration_h": 7.5, "laeq": 88.6, "lcpeak": 128.4,
         "instrument_class": 2, "notes": "full shift"},
        {"measurement_id": "M0002", "date": "2025-03-04", "kind": "area", "group": "G02",
         "location": "Assembly hall centre", "duration_h": 0.5, "laeq": 82.1, "lcpeak": 112.0,
         "instrument_class": 1, "x_m": 24.0, "y_m": 9.5},
    ],
    "tasks": [
        {"group": "G01", "task": "Press operation", "task_hours": 6.5, "laeq": 89.4, "date": "2025-03-05",
         "sample_minutes": 15, "instrument_class": 1},
        {"group": "G01", "task": "Press operation", "task_hours": 6.5, "laeq": 88.7, "date": "2025-03-05",
         "sample_minutes": 15, "instrument_class": 1},
        {"group": "G01", "task": "Press operation", "task_hours": 6.5, "laeq": 90.1, "date": "2025-03-06",
         "sample_minutes": 15, "instrument_class": 1},
    ],
    "audiograms": [
        {"person_id": "E10001", "date": "2025-02-10", "ear": "L", "kind": "periodic", "hl_500": 10,
         "hl_1000": 10, "hl_2000": 15, "hl_3000": 20, "hl_4000": 25, "hl_6000": 25, "hl_8000": 20,
         "quiet_hours": 16, "audiometer_id": "AUD1"},
        {"person_id": "E10001", "date": "2025-02-10", "ear": "R", "kind": "periodic", "hl_500": 5,
         "hl_1000": 10, "hl_2000": 10, "hl_3000": 15, "hl_4000": 20, "hl_6000": 25, "hl_8000": 15,
         "quiet_hours": 16, "audiometer_id": "AUD1"},
    ],
    "reviews": [
        {"person_id": "E10001", "ear": "L", "date": "2025-02-24", "decision": "refer",
         "audiogram_date": "2025-02-10", "reviewer_role": "audiologist", "note": "example entry"},
        {"person_id": "E10001", "ear": "R", "date": "2025-02-24", "decision": "refer",
         "audiogram_date": "2025-02-10", "reviewer_role": "audiologist", "note": "example entry"},
    ],
    "notices": [
        {"person_id": "E10001", "date": "2025-02-28", "about": "results"},
        {"person_id": "E10002", "date": "2025-02-28", "about": "results"},
    ],
    "training": [
        {"person_id": "E10001", "date": "2025-01-20", "topic": "hearing conservation, annual"},
        {"person_id": "E10002", "date": "2025-01-20", "topic": "hearing conservation, annual"},
    ],
    "protector_fits": [
        {"person_id": "E10001", "protector_id": "PR1", "date": "2025-01-20", "par": 21},
        {"person_id": "E10002", "protector_id": "PR2", "date": "2025-01-20"},
    ],
}

INTRODUCTION = """---
title: About this review
order: 1
---
# About this review

Write here what readers of the site should know first: who runs the programme, which
sites and groups it covers, and whom to ask. This page comes from `pages/about.md`;
add more markdown pages beside it. Front matter sets the title and the order in the
navigation.
"""


def example_rows(spec: FileSpec) -> list[dict[str, Any]]:
    """Return the example rows of a data file, with every declared column (blank when unset)."""
    rows = EXAMPLES.get(spec.name, [{}, {}])
    return [{c.name: r.get(c.name, "") for c in spec.columns} for r in rows]


def csv_text(spec: FileSpec) -> str:
    """Return the starter CSV of *spec*: header and its example rows."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=[c.name for c in spec.columns], lineterminator="\n")
    w.writeheader()
    for row in example_rows(spec):
        w.writerow(row)
    return buf.getvalue()


def _yaml_value(value: Any) -> str:
    """Return a YAML scalar or flow list for one option value."""
    if isinstance(value, dt.date):
        return value.isoformat()
    text = yaml.safe_dump(value, default_flow_style=True, allow_unicode=True, width=1000).strip()
    if text.endswith("\n..."):
        text = text[: -len("\n...")]
    if text.endswith("..."):
        text = text[:-3].strip()
    return text


#: starter values that differ from the defaults (to show the shape of the option).
STARTER_VALUES: dict[str, Any] = {
    "title": "Hearing conservation review 2025",
    "organisation": "Example Works (an invented workplace)",
    "compare_rules": ["niosh-rel", "eu-2003-10"],
}

#: example values of options that are unset by default (written as comments).
COMMENTED_EXAMPLES: dict[str, Any] = {"hours_worked": 412000}


#: the files: section of the starter, commented out: a worked example of a European export.
FILES_EXAMPLE = """
# Without an entry a file is read from data/NAME.csv (or .xlsx) as UTF-8 with commas,
# decimal points, YYYY-MM-DD dates and hcpsite's column names. Remove the '# ' to use:
# files:
#   audiograms:
#     path: "exports/Hearing tests 2025.csv"   # inside the programme folder
#     delimiter: ";"                           # default ","
#     decimal: ","                             # default "."
#     encoding: cp1252                         # default utf-8, with or without BOM
#     date_format: "%d.%m.%Y"                  # default YYYY-MM-DD
#     columns:                                 # the file's column name -> hcpsite's
#       "Employee No": person_id
#       "Test date": date
#       "Left 4000 Hz": hl_4000_l              # both ears on one row: hl_<f>_l, hl_<f>_r
#       "Right 4000 Hz": hl_4000_r
#   people:
#     sheet: "Staff"                           # for data/people.xlsx: the sheet to read
#     columns: {"Employee No": person_id, "Exposure group": group}
"""


def programme_yaml() -> str:
    """Return programme.yaml with every option, its documentation as a comment and its default."""
    files_doc = ""
    lines = ["# programme.yaml: settings of one hearing-conservation programme review.",
             "# Every option is listed with its documentation and its default value;",
             "# change what differs for your programme. Run 'hcpsite check .' after editing.",
             "# Data files are in data/ (see each file's header). A logged time history of a",
             f"# measurement goes in {NOISE_LOG.path} (ID = its measurement_id) with the columns",
             f"# {', '.join(c.name for c in NOISE_LOG.columns)}, fixed intervals, covering the whole run.", ""]
    for name, kind, default, doc in iter_options(Config):
        if name == "files":
            files_doc = doc
            continue  # written commented out at the end (FILES_EXAMPLE)
        depth = name.count(".")
        indent = "  " * depth
        key = name.rsplit(".", 1)[-1]
        if kind == "section":
            if depth == 0 and lines[-1] != "":
                lines.append("")
            lines.append(f"{indent}# {doc}")
            lines.append(f"{indent}{key}:")
            continue
        lines.append(f"{indent}# {doc}")
        value = STARTER_VALUES.get(name, default)
        if value is None:
            example = COMMENTED_EXAMPLES.get(name)
            lines.append(f"{indent}# (not set by default; remove the '# ' below to set it)")
            lines.append(f"{indent}# {key}: {'' if example is None else _yaml_value(example)}")
        else:
            lines.append(f"{indent}{key}: {_yaml_value(value)}")
        if depth == 0:
            lines.append("")
    return "\n".join(lines).rstrip() + "\n\n# " + files_doc + FILES_EXAMPLE


def starter_files() -> dict[str, str]:
    """Return every starter file as relative path -> text."""
    files = {CONFIG_FILE: programme_yaml(), "pages/about.md": INTRODUCTION}
    for spec in FILES:
        files[spec.path] = csv_text(spec)
    return files


def write_starter(folder: Path) -> list[Path]:
    """Write a starter programme folder; refuse a folder that exists and is not empty."""
    folder = Path(folder)
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())):
        raise HcpsiteError(f"{folder}: exists and is not empty; 'new' only writes into a new or empty folder")
    written = []
    for rel, text in sorted(starter_files().items()):
        path = folder / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(text, encoding="utf-8")
        written.append(path)
    log.info("wrote %d starter files into %s", len(written), folder)
    return written
