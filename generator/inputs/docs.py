"""Write the data-format reference (docs/data-format.md) from the declarations in spec.py.

Regenerate with ``python -m generator.inputs.docs > docs/data-format.md``; a test fails
while the file in docs/ differs from :func:`data_format_markdown`.
"""
from __future__ import annotations

import dataclasses
import sys

from ..config import DATA_FILES, FileDress
from .dress import LISTED_COLUMNS, SUGGESTED_ENCODINGS
from .reader import DEFAULT_PAGE_ORDER, HIRE_AGE_MAX, HIRE_AGE_MIN, LOG_INTERVAL_TOLERANCE_S, \
    RESERVED_SLUGS, YEAR_MAX, YEAR_MIN
from .reader import MAX_COLUMNS, MAX_FILE_BYTES, MAX_LINE_BYTES, MAX_PAGE_BYTES, MAX_XLSX_UNPACKED
from ..config import MAX_CONFIG_BYTES
from ..inputfile import size_text
from ..yamltext import MAX_DEPTH
from .spec import AUDIO_FREQS, FILES, NOISE_LOG, Column, FileSpec

#: How each declared kind is read, in words.
KIND_TEXT = {
    "id": "identifier (text, matched exactly)",
    "text": "text",
    "choice": "one of the listed values (case-insensitive)",
    "date": "date `YYYY-MM-DD` (an Excel date cell in .xlsx)",
    "datetime": "date-time, ISO 8601 (`2025-03-04T08:00:00`)",
    "date_or_year": "date `YYYY-MM-DD` or a bare year (read as 1 July)",
    "float": "number",
    "int": "whole number",
    "level": "sound level, dB",
    "hl": "hearing level, dB HL, or `NR` (no response)",
    "hours": "hours",
}


def _cell(text: object) -> str:
    """Return *text* safe for one markdown table cell."""
    return str(text).replace("|", "\\|").replace("\n", " ")


def _num(x: float) -> str:
    return f"{x:g}"


def _range(c: Column) -> str:
    """Return the allowed values of column *c* in words."""
    if c.kind == "choice":
        return ", ".join(f"`{ch}`" for ch in c.choices if ch) + (" or blank" if "" in c.choices else "")
    if c.lo is None and c.hi is None:
        return ""
    lo = "" if c.lo is None else (f"> {_num(c.lo)}" if c.lo_open else f"≥ {_num(c.lo)}")
    hi = "" if c.hi is None else f"≤ {_num(c.hi)}"
    return " and ".join(p for p in (lo, hi) if p)


def _notes(c: Column) -> str:
    parts = []
    if c.default is not None:
        parts.append(f"default `{c.default:g}`" if isinstance(c.default, float) else f"default `{c.default}`")
    if c.ref is not None:
        parts.append(f"must match `{c.ref[1]}` of {c.ref[0]}")
    if c.kind in ("date", "datetime", "date_or_year") and c.past_only:
        parts.append("not in the future")
    if c.private:
        parts.append("never published")
    return "; ".join(parts)


def file_section(spec: FileSpec) -> str:
    """Return the markdown section documenting one data file."""
    lines = [f"### `{spec.path}`", "", spec.doc, ""]
    status = "Required." if spec.required else "Optional."
    if spec.key:
        status += f" Each {' + '.join(f'`{k}`' for k in spec.key)} may appear only once."
    lines += [status, "", "| column | kind | required | allowed | notes | meaning |",
              "| --- | --- | --- | --- | --- | --- |"]
    for c in spec.columns:
        lines.append(f"| `{c.name}` | {_cell(KIND_TEXT[c.kind])} | {'yes' if c.required else ''} | "
                     f"{_cell(_range(c))} | {_cell(_notes(c))} | {_cell(c.doc)} |")
    lines.append("")
    return "\n".join(lines)


#: The worked example of the files: section: a continental European spreadsheet export.
FILES_EXAMPLE = """\
files:
  audiograms:
    path: "exports/Hearing tests 2025.csv"   # instead of data/audiograms.csv
    delimiter: ";"
    decimal: ","
    encoding: cp1252
    date_format: "%d.%m.%Y"
    columns:
      "Employee N°": person_id
      "Test date": date
      "Test type": kind
      "Left 500 Hz": hl_500_l
      "Right 500 Hz": hl_500_r
      # ... one line per frequency and ear
  people:
    delimiter: ";"
    encoding: cp1252
    date_format: "%d.%m.%Y"
    columns: {"Employee N°": person_id, "Exposure group": group, "Date of birth": birth_date,
              "Start date": hire_date, "End date": leave_date}
  noise:
    path: "exports/Dosimetry.xlsx"
    sheet: "Results"
    columns: {"Measurement": measurement_id, "Run time (h)": duration_h, "LAeq dB(A)": laeq}
"""

#: The start of such an audiogram export, as the file holds it.
FILES_EXAMPLE_DATA = """\
Employee N°;Test date;Test type;Left 500 Hz;...;Left 8000 Hz;Right 500 Hz;...;Right 8000 Hz;Quiet hours
P00001;11.01.1990;baseline;10;...;5;5;...;10;19,9
"""


def _dress_value(value: object) -> str:
    if value is None:
        return "(not set)"
    if value == {}:
        return "(none)"
    return f"`{value}`"


def files_section() -> str:
    """Return the reference of the ``files:`` section of programme.yaml."""
    fields = [f for f in dataclasses.fields(FileDress) if not f.metadata.get("internal")]
    lines = [
        "## Reading other dresses (`files:` in programme.yaml)",
        "",
        "Records rarely come in the dress above. An audiometric system exports one row per test",
        "with both ears side by side under its own column names; dosimetry software uses its own",
        "headers; a spreadsheet set to a continental European locale saves CSV with `;` between",
        "cells, decimal commas, a Windows code page and `DD.MM.YYYY` dates. The `files:` section of",
        "`programme.yaml` says how each file is written, so the export is read as it is, every",
        "year, without rewriting it by hand. It has one entry per data file",
        f"({', '.join(f'`{n}`' for n in DATA_FILES)}); every setting is optional:",
        "",
        "| setting | default | meaning |",
        "| --- | --- | --- |",
    ]
    for f in fields:
        default = f.default if f.default is not dataclasses.MISSING else (
            f.default_factory() if f.default_factory is not dataclasses.MISSING else None)
        doc = f.metadata.get("doc", "")
        if f.metadata.get("choices"):
            doc += " (one of: " + ", ".join(f"`{c}`" for c in f.metadata["choices"]) + ")"
        lines.append(f"| `{f.name}` | {_cell(_dress_value(default))} | {_cell(doc)} |")
    lines += [
        "",
        "A worked example, a European export of the audiograms, the people and the noise results:",
        "",
        "```yaml",
        FILES_EXAMPLE.rstrip(),
        "```",
        "",
        "where `exports/Hearing tests 2025.csv` starts like this (in code page 1252):",
        "",
        "```",
        FILES_EXAMPLE_DATA.rstrip(),
        "```",
        "",
        "* `path` is relative to the programme folder and must stay inside it: an absolute path, a",
        "  path through `..` and a symbolic link that leads outside are errors located in",
        "  `programme.yaml`. A name ending in `.xlsx` is read as a workbook, any other as CSV. When",
        "  `path` names another file, `data/NAME.csv` is not read (a warning says so if it exists).",
        "* `encoding` and `delimiter` apply to CSV files; the file is decoded and split line for",
        "  line, so findings keep the file's own line numbers. `delimiter: tab` is the same as",
        "  `delimiter: \"\\t\"`.",
        "* `decimal: \",\"` reads `85,3` as 85.3 in the number and hearing-level columns (and",
        "  `1.234,5` as 1234.5); a number with a lone `.` is then an error, since it is ambiguous.",
        "* `date_format` is a strftime pattern (`%d` day, `%m` month, `%Y` four-digit year, `%y`",
        "  two-digit year, `%b` month name). ISO dates and bare years (for `birth_date`) are read",
        "  as well; a workbook's own date cells need no setting.",
        "* `columns` maps the file's column names (matched without regard to case or surrounding",
        "  spaces) onto hcpsite's. Findings still name the file, its line and the file's own",
        "  column name.",
        "* The noise logs (`data/noise_logs/ID.csv`) are always read in hcpsite's own dress.",
        "",
        "### Wide audiograms",
        "",
        "An audiogram file with columns `hl_<f>_l` and `hl_<f>_r` (f = "
        + ", ".join(str(f) for f in AUDIO_FREQS) + ") and",
        "no `ear` column holds one test per row with both ears side by side. It is recognised",
        "without any setting; `columns:` maps a system's names onto `hl_<f>_l` and `hl_<f>_r`.",
        "`NR` reads as in the per-ear file. Every other column (`person_id`, `date`, `kind`,",
        "`quiet_hours`, `audiometer_id`, unknown ones) applies to both ears. An ear without any",
        "level is not a test and is left out; a row without any level for either ear is warned",
        "about. Both ears keep the file's line number in findings.",
        "",
        "### When a file looks like another dress",
        "",
        "A file that no setting describes, but that looks like another dress, is refused with a",
        "finding that says what was seen and which setting would read it, for example",
        "",
        "```",
        "data/noise.csv:1:: error: the header holds ';' separated names; add files: {noise: {delimiter: \";\"}} to programme.yaml",
        "```",
        "",
        "* a header that is one cell holding names separated by `;`, a tab, `|` (or `,` under",
        "  another delimiter) suggests `delimiter`;",
        "* bytes that are not UTF-8 suggest `encoding: "
        + f"{SUGGESTED_ENCODINGS[0]}` (or `{SUGGESTED_ENCODINGS[1]}`), with the line of the first such byte;",
        "* numbers such as `85,3` in a number column suggest `decimal: \",\"`;",
        "* dates such as `31.12.2025` or `31/12/2025` in a date column suggest the `date_format`",
        "  that reads them (month first, `%m/%d/%Y`, only when a middle part exceeds 12);",
        "* a missing required column lists the file's columns (the first "
        + f"{LISTED_COLUMNS}) and the closest ones,",
        "  with the `columns:` entry that would map them; unknown columns that look like known",
        "  ones under other names (such as `Left 500 Hz` for `hl_500_l`) get the same hint.",
        "",
        "When a file is refused for its encoding or its delimiter, its first lines are also",
        "looked at for decimal commas and other date patterns, so one finding names every",
        "setting the file needs.",
        "",
    ]
    return "\n".join(lines)


def data_format_markdown() -> str:
    """Return the whole data-format reference as markdown."""
    out = [
        "# Data format",
        "",
        "<!-- generated by `python -m generator.inputs.docs > docs/data-format.md`; do not edit -->",
        "",
        "A programme folder holds `programme.yaml`, a `data/` folder with the files below, and",
        "optionally `data/noise_logs/`, `pages/` and `templates/`.",
        "",
        "## Reading rules",
        "",
        "* Each file is a CSV (`data/NAME.csv`) or an Excel workbook (`data/NAME.xlsx`, first sheet);",
        "  giving both is an error. Files exported in another dress (another place, encoding,",
        "  delimiter, decimal mark, date pattern or column names, audiograms with both ears on",
        "  one row) are described in `files:` (see below).",
        "* CSV files are UTF-8, with or without a byte-order mark (or the file's `encoding`).",
        "  Another encoding is reported with the line of the first byte that does not decode;",
        "  nothing is guessed.",
        "* The first line names the columns; names are case-insensitive and surrounding spaces are",
        "  ignored. Unknown columns are kept and warned about once per file; a missing required",
        "  column is an error. A line with more or fewer cells than the header is an error.",
        "* Empty lines and lines of separators only (`,,,,`, which spreadsheets write) are",
        "  skipped, in CSV as in xlsx.",
        "* In an xlsx sheet, merged header cells, formulas without a saved value (a workbook",
        "  written by a program and never opened in a spreadsheet) and error values such as",
        "  `#DIV/0!` are reported where they are; such cells are read as blank.",
        "* Every cell is read as text, stripped of surrounding spaces and converted according to",
        "  the column's kind. A blank cell means \"not given\" (or the column's default).",
        "* Numbers use a decimal point (or the file's `decimal`); `inf`, `nan` and values outside the allowed range are",
        "  errors that name the value and the range.",
        f"* Dates are `YYYY-MM-DD` (or the file's `date_format`) between the years {YEAR_MIN} and {YEAR_MAX}; a date after the",
        "  build date is an error (the build date comes from `SOURCE_DATE_EPOCH` when set).",
        "* Text cells that start with `=`, `+`, `-` or `@` followed by a letter look like",
        "  spreadsheet formulas: they are kept as text and warned about.",
        "* Identifiers that refer to another file (a person, a group, an audiometer, a",
        "  protector) must exist there. When `data/groups.csv` is absent, the groups are the",
        "  distinct groups of `data/people.csv` with an 8-hour shift and a 5-day week.",
        "* Rows are reported by their line in the file (the header is line 1).",
        "* Inputs are only read, never changed. Files that resolve outside the programme",
        "  folder (for example through a symbolic link) are reported and not read.",
        "* What is read is capped, and a file over a cap is refused with a message naming it: a",
        f"  data file or noise log of at most {size_text(MAX_FILE_BYTES)}, lines of at most",
        f"  {size_text(MAX_LINE_BYTES)}, at most {MAX_COLUMNS:,} columns, an xlsx workbook unpacking",
        f"  to at most {size_text(MAX_XLSX_UNPACKED)}; a page or template of at most {size_text(MAX_PAGE_BYTES)}",
        f"  and `programme.yaml` of at most {size_text(MAX_CONFIG_BYTES)}. Only regular files are read (a",
        "  named pipe or a device is refused). Text quoted in a message is shortened, and control",
        "  characters in it are shown as escapes (`\\n`), so a finding is always one line.",
        "* `programme.yaml` and the front matter of pages are YAML without anchors and aliases",
        f"  (`&name`, `*name`), nested at most {MAX_DEPTH} levels; `.nan`, `.inf` and impossible dates",
        "  (`2025-02-30`) are errors at their line and column.",
        "",
        "Cross-checks that only warn: a personal measurement without `person_id`; an",
        f"age at hire below {HIRE_AGE_MIN:g} or above {HIRE_AGE_MAX:g} years; a `leave_date`",
        "before the `hire_date`; an audiogram dated before the person's birth or more than one day",
        "after their `leave_date`. A blank `group` in `data/noise.csv` is taken from the person.",
        "",
        "## Data files",
        "",
    ]
    for spec in FILES:
        out.append(file_section(spec))
    out.append(files_section())
    out += [
        "## Noise logs",
        "",
        file_section(NOISE_LOG),
        "`data/noise_logs/ID.csv` holds the logged time history of the measurement whose",
        "`measurement_id` is `ID` in `data/noise.csv` (a log without such a measurement is warned",
        "about and ignored). Rows are sorted by `start`; timestamps must increase; the interval is",
        f"the median step, and a step more than {LOG_INTERVAL_TOLERANCE_S:g} s away from it is warned about.",
        "",
        "## Narrative pages",
        "",
        "`pages/NAME.md` are markdown pages added to the site. They may start with YAML front",
        "matter between two `---` lines:",
        "",
        "```",
        "---",
        "title: About our programme",
        "order: 10",
        "---",
        "```",
        "",
        f"`title` defaults to the first `# ` heading, `order` (a whole number) to {DEFAULT_PAGE_ORDER};",
        "pages are listed by order, then by name. The page's address is the file name in lower",
        "case with characters other than `a-z`, `0-9` and `-` replaced by `-`; a name the site uses",
        f"itself ({', '.join(f'`{s}`' for s in sorted(RESERVED_SLUGS))}) gets the prefix `page-`.",
        "",
        "## Template overrides",
        "",
        "Files in the programme's `templates/` folder are used instead of the stock templates of",
        "the same name.",
        "",
    ]
    return "\n".join(out)


if __name__ == "__main__":
    sys.stdout.write(data_format_markdown())
