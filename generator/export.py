"""``hcpsite export``: the computed results as CSV and JSON files for records and other tools.

The tables come from the compute stages' results (the stage that computes a figure also
produces its export column); this module only selects, pseudonymises and serialises.
Person ids are replaced by pseudonymous codes unless the export is restricted; cells that
a spreadsheet would run as a formula are neutralised; floats have a fixed format and JSON
keys are sorted, so two exports of the same inputs are byte-identical.
"""
from __future__ import annotations

import datetime as dt
import json
import logging
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np
import pandas as pd

from .pipeline import Results
from .pages.base import SiteContext
from .privacy import SUPPRESSED

log = logging.getLogger(__name__)

EXPOSURE_COLUMNS = ["measurement_id", "person_id", "group", "date", "duration_h", "laeq", "lex_8h",
                    "osha_dose_pct", "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa",
                    "lcpeak", "basis"]
GROUP_COLUMNS = ["group", "n_people", "n_samples", "lex_8h", "u_expanded", "lex_8h_upper", "band"]
HEARING_COLUMNS = ["person_id", "ear", "date", "kind", "baseline_date", "avg_234", "shift_234",
                   "shift_234_age_corrected", "osha_sts", "osha_sts_age_corrected", "niosh_shift",
                   "recordable"]
ACTION_COLUMNS = ["subject", "kind", "detail", "due_date", "status", "clause", "section"]
#: decimals written for float columns
FLOAT_DECIMALS = 2
#: characters that make a spreadsheet treat a cell as a formula (OWASP "CSV injection").
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


@dataclass(frozen=True)
class ExportSpec:
    """One exported table: file name, stage, candidate attribute names and leading columns."""

    file: str
    stage: str
    attributes: tuple[str, ...]
    columns: tuple[str, ...]
    #: further columns of the stage frame whose names start with these prefixes are kept
    extra_prefixes: tuple[str, ...] = ()


EXPORTS: tuple[ExportSpec, ...] = (
    ExportSpec("exposure_results.csv", "exposure", ("exposure_results", "measurements"), tuple(EXPOSURE_COLUMNS)),
    ExportSpec("group_exposure.csv", "exposure", ("group_exposure", "groups"), tuple(GROUP_COLUMNS),
               ("osha_", "niosh_")),
    ExportSpec("hearing_results.csv", "hearing", ("hearing_results", "audiograms"), tuple(HEARING_COLUMNS)),
    ExportSpec("actions.csv", "compliance", ("actions",), tuple(ACTION_COLUMNS)),
)

#: columns holding a person id (coded unless restricted)
PERSON_COLUMNS = ("person_id",)


def stage_frame(results: Results, spec: ExportSpec) -> pd.DataFrame | None:
    """Return the DataFrame a stage result holds for *spec*."""
    res = getattr(results, spec.stage)
    for attr in spec.attributes:
        frame = getattr(res, attr, None)
        if callable(frame) and not isinstance(frame, pd.DataFrame):
            frame = frame()
        if isinstance(frame, pd.DataFrame):
            return frame
    raise AttributeError(f"stage {spec.stage!r} result has none of {spec.attributes}")


def select_columns(frame: pd.DataFrame, spec: ExportSpec) -> pd.DataFrame:
    """Return the export columns of *frame* in contract order (plus prefixed extras)."""
    missing = [c for c in spec.columns if c not in frame.columns]
    if missing:
        raise KeyError(f"{spec.file}: the {spec.stage} result lacks columns {missing}")
    extra = sorted(c for c in frame.columns if c not in spec.columns
                   and any(c.startswith(p) for p in spec.extra_prefixes))
    return frame.loc[:, list(spec.columns) + extra].reset_index(drop=True)


def pseudonymise(frame: pd.DataFrame, code: Callable[[str], str], person_ids: set[str]) -> pd.DataFrame:
    """Return *frame* with person ids (and person subjects of actions) replaced by codes."""
    out = frame.copy()
    for col in PERSON_COLUMNS:
        if col in out.columns:
            out[col] = _code_values(out[col], code)
    if "subject" in out.columns:
        subj = out["subject"].astype("string").fillna("")
        is_person = subj.isin(person_ids)
        if "subject_type" in frame.columns:
            is_person = is_person | frame["subject_type"].astype("string").fillna("").eq("person")
        coded = _code_values(subj, code)
        out["subject"] = np.where(is_person.to_numpy(), coded.to_numpy(), subj.to_numpy())
    return out


def _code_values(values: pd.Series, code: Callable[[str], str]) -> pd.Series:
    s = values.astype("string").fillna("")
    mapping = {u: (code(u) if u else "") for u in sorted(set(s.tolist()))}
    return s.map(mapping).astype(object)


def _format_cell(v: Any) -> str:
    """Return the text of one cell: fixed float format, ISO dates, blank for missing."""
    if v is None or v is pd.NaT:
        return ""
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if math.isnan(v):
            return ""
        return f"{v:.{FLOAT_DECIMALS}f}"
    if isinstance(v, pd.Timestamp):
        return v.strftime("%Y-%m-%d")
    if isinstance(v, int):
        return str(v)
    if isinstance(v, (list, tuple, dict, set)):
        return str(v)
    return "" if pd.isna(v) else str(v)


def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False


def neutralise(text: str) -> str:
    """Return *text* prefixed with ' when a spreadsheet would read it as a formula (plain numbers stay)."""
    if text and text.startswith(FORMULA_START) and not _is_number(text):
        return "'" + text
    return text


#: rows turned into text at a time: bounds the memory a large table's text takes
CHUNK_ROWS = 20_000


def _column_texts(frame: pd.DataFrame) -> list[list[str]]:
    """Return the cells of *frame* as text, column by column: fixed formats, formula cells neutralised."""
    cols: list[list[str]] = []
    for c in frame.columns:
        s = frame[c]
        if pd.api.types.is_datetime64_any_dtype(s):
            texts = s.dt.strftime("%Y-%m-%d").fillna("").tolist()
        elif pd.api.types.is_float_dtype(s):
            arr = s.to_numpy(dtype=float)
            texts = np.where(np.isnan(arr), "", np.char.mod(f"%.{FLOAT_DECIMALS}f", np.nan_to_num(arr))).tolist()
        else:
            texts = [_format_cell(v) for v in s.tolist()]
        cols.append([neutralise(t) for t in texts])
    return cols


def text_header(frame: pd.DataFrame) -> list[str]:
    """Return the header row of *frame* as the exports write it."""
    return [neutralise(str(c)) for c in frame.columns]


def text_rows(frame: pd.DataFrame, start: int = 0, stop: int | None = None) -> Iterator[list[tuple[str, ...]]]:
    """Yield rows *start* to *stop* of *frame* as text (as the CSV writes them), CHUNK_ROWS rows at a time."""
    if not len(frame.columns):
        return
    stop = len(frame) if stop is None else min(stop, len(frame))
    for at in range(start, stop, CHUNK_ROWS):
        yield list(zip(*_column_texts(frame.iloc[at:min(at + CHUNK_ROWS, stop)])))


def frame_to_csv(frame: pd.DataFrame) -> bytes:
    """Return *frame* as UTF-8 CSV with fixed formats and neutralised formula cells.

    Each chunk of rows is encoded as soon as it is written, so the whole table is held
    once, as bytes, not also as text.
    """
    import csv
    import io
    out = io.BytesIO()
    text = io.StringIO()
    w = csv.writer(text, lineterminator="\n")
    w.writerow(text_header(frame))
    for rows in text_rows(frame):
        w.writerows(rows)
        out.write(text.getvalue().encode("utf-8"))
        text.seek(0)
        text.truncate()
    out.write(text.getvalue().encode("utf-8"))
    return out.getvalue()


def _json_ready(v: Any) -> Any:
    if isinstance(v, dict):
        return {str(k): _json_ready(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_json_ready(x) for x in v]
    if isinstance(v, np.generic):
        v = v.item()
    if isinstance(v, float):
        return None if math.isnan(v) else round(v, 6)
    if isinstance(v, pd.Timestamp):
        return None if pd.isna(v) else v.strftime("%Y-%m-%d")
    if v is pd.NaT:
        return None
    return v


def figures_json(ctx: SiteContext) -> dict[str, Any]:
    """Return every headline figure (generator/figures.py) with its value and its definition."""
    from . import figures as F
    figs = ctx.results.figures
    out: dict[str, Any] = {}
    for fig in F.FIGURES:
        fv = figs.values[fig.name]
        out[fig.name] = {**fig.described(ctx.headline), "label": figs.labels[fig.name],
                         "source": figs.sources[fig.name], "value": fv.value, "numerator": fv.numerator,
                         "denominator": fv.denominator,
                         "as_of": figs.as_of.strftime("%Y-%m-%d"), "from": figs.start.strftime("%Y-%m-%d")}
    return out


def summary_json(ctx: SiteContext) -> bytes:
    """Return the headline figures of the overview (``figures``: one entry per definition) as sorted JSON."""
    prog = ctx.programme
    comp = ctx.results.compliance
    data: dict[str, Any] = {
        "title": prog.config.title,
        "organisation": prog.config.organisation,
        "period": {"start": prog.config.period.start.isoformat(), "end": prog.config.period.end.isoformat()},
        "rules": list(ctx.rules),
        "input_digest": prog.digest,
        "people": int(len(prog.table("people"))),
        "files_present": sorted(prog.present),
        "findings": {"errors": len(prog.findings.errors), "warnings": len(prog.findings.warnings)},
        "summary": dict(getattr(comp, "summary", None) or {}),
        "figures": figures_json(ctx),
    }
    return (json.dumps(_json_ready(data), sort_keys=True, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


#: value columns of each record-level table withheld for the people of a small group
RECORD_VALUES = {
    "exposure_results.csv": ("measurement_id", "date", "duration_h", "laeq", "lex_8h", "osha_dose_pct", "osha_twa",
                             "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa", "lcpeak", "basis"),
    "hearing_results.csv": ("ear", "date", "kind", "baseline_date", "avg_234", "shift_234",
                            "shift_234_age_corrected", "osha_sts", "osha_sts_age_corrected", "niosh_shift",
                            "recordable"),
}


def category_columns(groups: pd.DataFrame, rules: dict[str, Any]) -> pd.DataFrame:
    """Return per rule set the group's exposure category and the figure it rests on.

    ``category_<rule>`` is the category the rule set judges (on the value plus U where the
    rule set judges with the uncertainty and U is known, else on the value);
    ``category_level_<rule>`` is that figure, dB(A); ``category_basis_<rule>`` says which
    (``value`` or ``value + U``).
    """
    out = pd.DataFrame(index=groups.index)
    for rid, rule in rules.items():
        band, upper = f"band_{rid}", f"band_upper_{rid}"
        if band not in groups.columns:
            continue
        level = groups.get(f"level_{rid}", pd.Series(np.nan, index=groups.index)).astype(float)
        with_u = groups.get(upper, pd.Series("", index=groups.index)).astype("string").fillna("").ne("") \
            if getattr(rule, "judge_with_uncertainty", False) else pd.Series(False, index=groups.index)
        up = groups.get(f"level_upper_{rid}", level).astype(float)
        out[f"category_{rid}"] = np.where(with_u, groups.get(upper, groups[band]).astype(object),
                                          groups[band].astype(object))
        out[f"category_level_{rid}"] = np.where(with_u, up, level)
        out[f"category_basis_{rid}"] = np.where(with_u, "value + U", np.where(level.notna(), "value", ""))
    return out


def public_table(spec: ExportSpec, frame: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the rows and columns of one exported table (before pseudonyms and redaction)."""
    if spec.file == "actions.csv":
        # the same rows, order and words as the actions page
        from .pages.actions import export_actions
        return export_actions(frame, ctx)
    table = select_columns(frame, spec)
    sup = ctx.sup
    if spec.file == "group_exposure.csv":
        table = pd.concat([table, category_columns(frame.reset_index(drop=True), ctx.rules)], axis=1)
        n = pd.Series([sup.group_n(g) for g in table["group"]], index=table.index, dtype=float)
        values = [c for c in table.columns if c != "group"]
        table = sup.suppress_frame(table.assign(_n=n), "_n", values).drop(columns="_n")
    elif spec.file in RECORD_VALUES:
        table = sup.withhold_groups(table, RECORD_VALUES[spec.file], person_col="person_id")
    return table


def _holds_text(col: pd.Series) -> bool:
    """Return True when *col* is a column of texts, whatever pandas stores them as: Python objects,
    the string dtype (pandas 3's default, Arrow-backed with pyarrow) or a categorical of texts."""
    kind = col.dtype
    if isinstance(kind, pd.CategoricalDtype):
        return _holds_text(pd.Series(kind.categories))
    if not (kind == object or isinstance(kind, pd.StringDtype)):
        return False
    return all(isinstance(v, str) for v in col.dropna().tolist())


def redact_texts(table: pd.DataFrame, redact: Callable[[str], str]) -> pd.DataFrame:
    """Return *table* with every text column but the person columns (already coded) passed through
    *redact*, each distinct text once; such a column comes back as Python text objects."""
    out = table.copy(deep=False)
    for col in out.columns:
        if col in PERSON_COLUMNS or not _holds_text(out[col]):
            continue
        texts = out[col].astype(object).where(out[col].notna(), "").astype(str)
        out[col] = texts.map({t: redact(t) for t in sorted(set(texts.tolist()))}).astype(object)
    return out


def export_tables(ctx: SiteContext) -> dict[str, pd.DataFrame]:
    """Return every exported table as name -> frame, as the export writes it (coded, redacted, suppressed)."""
    people = ctx.programme.table("people")
    ids = set(people["person_id"].astype(str)) if "person_id" in people.columns else set()
    tables: dict[str, pd.DataFrame] = {}
    for spec in EXPORTS:
        frame = stage_frame(ctx.results, spec)
        if frame is None:
            log.warning("%s: stage %s did not run; not exported", spec.file, spec.stage)
            continue
        table = public_table(spec, frame, ctx)
        if not ctx.restricted:
            table = redact_texts(pseudonymise(table, ctx.code, ids), ctx.redact)
        tables[spec.file] = table.drop(columns=[c for c in ("subject_type",) if c in table.columns])
    return tables


def export_files(ctx: SiteContext) -> dict[str, bytes]:
    """Return every export file as name -> bytes: the CSVs, the same tables as one workbook, the summary."""
    tables = export_tables(ctx)
    files = {name: frame_to_csv(t) for name, t in tables.items()}
    files[WORKBOOK] = workbook_bytes(tables, ctx, text_bytes={name: len(files[name]) for name in tables})
    files["summary.json"] = public_summary(summary_json(ctx), ctx)
    return files


#: summary.json keys that carry a headline figure (generator/figures.py) under another name
SUMMARY_FIGURES = {"sts_this_period": "people_with_sts", "recordables_this_period": "recordable_cases",
                   "recordable_rate_per_200k": "recordable_rate", "must_be_enrolled": "must_be_enrolled",
                   "not_enrolled": "not_enrolled"}


def public_summary(raw: bytes, ctx: SiteContext) -> bytes:
    """Return summary.json with the figures the pages withhold (figure_tiles.withheld) replaced by "suppressed"."""
    from .pages.figure_tiles import withheld
    hidden = withheld(ctx)
    if not hidden:
        return raw
    data = json.loads(raw)
    summary = data.get("summary")
    if isinstance(summary, dict):
        data["summary"] = {k: (SUPPRESSED if SUMMARY_FIGURES.get(k) in hidden else v) for k, v in summary.items()}
    figs = data.get("figures")
    if isinstance(figs, dict):
        for name in hidden:
            if name in figs:
                figs[name] = {**figs[name], "value": SUPPRESSED, "numerator": None, "denominator": None}
    return (json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


# ---------------------------------------------------------------------------------------
# the workbook

#: the workbook written beside the CSVs
WORKBOOK = "results.xlsx"
#: column width bounds, characters
WIDTH_MIN, WIDTH_MAX = 8, 60
#: rows of one worksheet, the header included (the most an .xlsx sheet holds)
SHEET_MAX_ROWS = 1_048_576


def workbook_stamp(ctx: SiteContext) -> dt.datetime:
    """Return the fixed time written into the workbook: SOURCE_DATE_EPOCH, else the end of the review period."""
    raw = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    try:
        if raw:
            return dt.datetime.fromtimestamp(int(raw), tz=dt.timezone.utc).replace(tzinfo=None)
    except (ValueError, OverflowError, OSError):
        pass
    end = ctx.programme.config.period.end
    return dt.datetime(end.year, end.month, end.day)


def sheet_titles(name: str, parts: int) -> list[str]:
    """Return the worksheet titles of table *name* written in *parts* sheets (31 characters at most)."""
    base = name.rsplit(".", 1)[0]
    titles = [base[:31]]
    for k in range(2, parts + 1):
        suffix = f" ({k})"
        titles.append(base[:31 - len(suffix)] + suffix)
    return titles


#: characters an XML document may not hold (control characters other than tab, newline, return)
XML_ILLEGAL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f]")


def _xml_text(text: str) -> str:
    """Return *text* escaped for an XML text node, illegal control characters left out."""
    text = XML_ILLEGAL.sub("", text)
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _sheet_rows(rows: list[tuple[str, ...]], numeric: list[bool], letters: list[str], first: int) -> str:
    """Return worksheet XML for *rows* (text cells; numbers where *numeric* and the text is one), from row *first*.

    The cells are written as openpyxl writes them: numbers as ``t="n"`` with ``%.16g``,
    text inline, leading or trailing spaces preserved, blank text as an empty inline cell.
    """
    out: list[str] = []
    for r, row in enumerate(rows, start=first):
        cells = []
        for v, num, col in zip(row, numeric, letters):
            ref = f"{col}{r}"
            if num and v != "" and _is_number(v):
                number = float(v)
                cells.append(f'<c r="{ref}" t="n"><v>{"%.16g" % number}</v></c>'
                             if math.isfinite(number) else f'<c r="{ref}" t="n" />')
            elif v == "":
                cells.append(f'<c r="{ref}" t="inlineStr" />')
            else:
                space = ' xml:space="preserve"' if v.strip() and v != v.strip() else ""
                cells.append(f'<c r="{ref}" t="inlineStr"><is><t{space}>{_xml_text(v)}</t></is></c>')
        out.append(f'<row r="{r}">{"".join(cells)}</row>')
    return "".join(out)


#: the most bytes of sheet XML one row adds besides its cells (``<row r="1048576"></row>``)
ROW_XML_MAX = 23
#: the most bytes of sheet XML one cell adds besides its escaped text (a preserved-space
#: inline string at the last column and row; a number's ``%.16g`` text is 24 bytes at most)
CELL_XML_MAX = 100
#: the most bytes one byte of text becomes in XML (``&`` -> ``&amp;``)
XML_ESCAPE_MAX = 5


def _sheet_xml_bound(rows: int, columns: int, text_bytes: int, skeleton: int) -> int:
    """Return an upper bound of the bytes of a sheet: *rows* body rows whose cell texts take *text_bytes* at most."""
    return skeleton + rows * (ROW_XML_MAX + columns * CELL_XML_MAX) + XML_ESCAPE_MAX * text_bytes


@dataclass(frozen=True)
class _SheetPlan:
    """The body rows of one worksheet: rows *start* to *stop* of *frame*."""

    frame: pd.DataFrame
    numeric: list[bool]
    letters: list[str]
    start: int
    stop: int
    #: an upper bound of the UTF-8 bytes of the table's cell texts
    text_bytes: int

    def bodies(self) -> Iterator[bytes]:
        """Yield the body XML of the sheet, CHUNK_ROWS rows at a time."""
        for at, rows in zip(range(self.start, self.stop, CHUNK_ROWS), text_rows(self.frame, self.start, self.stop)):
            yield _sheet_rows(rows, self.numeric, self.letters, 2 + at - self.start).encode("utf-8")


def workbook_bytes(tables: dict[str, pd.DataFrame], ctx: SiteContext, *,
                   text_bytes: dict[str, int] | None = None) -> bytes:
    """Return the tables as one .xlsx workbook: a sheet each, frozen header row, fitted column widths.

    Numbers are written as numbers, everything else as the CSV's text (formula-like text
    keeps its neutralising quote). A table longer than a worksheet holds (SHEET_MAX_ROWS
    with the header) continues on sheets titled "name (2)", "name (3)" ..., each with the
    header. openpyxl writes the workbook, its sheets and their header rows; the body rows,
    CHUNK_ROWS at a time, are written straight into each sheet's zip entry as they are
    made (openpyxl's cell objects would cost minutes and gigabytes for a million rows, and
    a whole sheet's XML hundreds of megabytes). *text_bytes* gives, per table, an upper
    bound of its cell texts' UTF-8 bytes (the size of its CSV); it is computed when not
    given. The bytes are fixed: workbook times come from :func:`workbook_stamp` and every
    zip entry carries that date.
    """
    import io
    import zipfile
    from openpyxl import Workbook
    from openpyxl.utils import get_column_letter

    wb = Workbook(write_only=True)
    per_sheet = SHEET_MAX_ROWS - 1
    plans: list[_SheetPlan] = []  # the body of each sheet, in the order the sheets are made
    for name in sorted(tables):
        frame = tables[name]
        header = text_header(frame)
        numeric = [pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
                   for c in frame.columns]
        letters = [get_column_letter(i) for i in range(1, len(header) + 1)]
        first = next(text_rows(frame, 0, 1000), [])
        widths = [max(WIDTH_MIN, min(WIDTH_MAX, max([len(col)] + [len(r[i]) for r in first]) + 2))
                  for i, col in enumerate(header)]
        size = text_bytes[name] if text_bytes is not None else len(frame_to_csv(frame))
        parts = max(1, -(-len(frame) // per_sheet))  # a header-only sheet when the table has no rows
        for title, at in zip(sheet_titles(name, parts), range(0, parts * per_sheet, per_sheet)):
            ws = wb.create_sheet(title=title)
            ws.freeze_panes = "A2"
            for col, width in zip(letters, widths):
                ws.column_dimensions[col].width = width
            ws.append(header)
            plans.append(_SheetPlan(frame, numeric, letters, at, min(len(frame), at + per_sheet), size))
    stamp = workbook_stamp(ctx)
    wb.properties.creator = "hcpsite"
    wb.properties.created = stamp
    raw = io.BytesIO()
    wb.save(raw)
    # openpyxl stamps the save time: write the fixed time instead, and fixed dates on every entry
    when = stamp.strftime("%Y-%m-%dT%H:%M:%SZ")
    out = io.BytesIO()
    date_time = (max(1980, stamp.year), stamp.month, stamp.day, stamp.hour, stamp.minute, stamp.second)
    with zipfile.ZipFile(raw) as src, zipfile.ZipFile(out, "w", zipfile.ZIP_DEFLATED) as dst:
        for info in src.infolist():
            data = src.read(info.filename)
            entry = zipfile.ZipInfo(info.filename, date_time=date_time)
            entry.compress_type = zipfile.ZIP_DEFLATED
            entry.external_attr = 0o600 << 16
            sheet = re.fullmatch(r"xl/worksheets/sheet(\d+)\.xml", info.filename)
            plan = plans[int(sheet.group(1)) - 1] if sheet else None
            if plan is not None and plan.stop > plan.start and len(plan.letters):
                _write_sheet(dst, entry, data, plan)
                continue
            if info.filename == "docProps/core.xml":
                text = data.decode("utf-8")
                text = re.sub(r"(<dcterms:modified[^>]*>)[^<]*(</dcterms:modified>)", rf"\g<1>{when}\g<2>", text)
                text = re.sub(r"(<dcterms:created[^>]*>)[^<]*(</dcterms:created>)", rf"\g<1>{when}\g<2>", text)
                data = text.encode("utf-8")
            dst.writestr(entry, data)
    return out.getvalue()


def _write_sheet(dst: Any, entry: Any, skeleton: bytes, plan: _SheetPlan) -> None:
    """Write the sheet *skeleton* (openpyxl's, header only) with *plan*'s body rows as zip entry *entry*.

    The entry is written as ``ZipFile.writestr`` writes the whole XML: that takes the ZIP64
    form when the size times 1.05 passes ``ZIP64_LIMIT``. Where an upper bound of the size
    rules that out, the rows go straight into the entry; otherwise they go through a
    temporary file first, so the exact size is known before the entry starts.
    """
    import shutil
    import tempfile
    import zipfile

    end = skeleton.index(b"</sheetData>")
    bound = _sheet_xml_bound(plan.stop - plan.start, len(plan.letters), plan.text_bytes, len(skeleton))
    if bound * 1.05 <= zipfile.ZIP64_LIMIT:
        with dst.open(entry, "w") as w:
            w.write(skeleton[:end])
            for body in plan.bodies():
                w.write(body)
            w.write(skeleton[end:])
        return
    with tempfile.TemporaryFile() as spool:
        spool.write(skeleton[:end])
        for body in plan.bodies():
            spool.write(body)
        spool.write(skeleton[end:])
        entry.file_size = spool.tell()
        spool.seek(0)
        with dst.open(entry, "w") as w:
            shutil.copyfileobj(spool, w, 1 << 20)


#: marker file of an export folder: only a folder carrying it (or a new or empty one) is replaced.
EXPORT_MARKER = ".hcpsite-export"
EXPORT_MARKER_TEXT = b"This folder was made by hcpsite export and is replaced as a whole by each export.\n"


def export_results(root: Path, to: Path, *, restricted: bool = False, strict: bool = False) -> list[Path]:
    """Compute the programme at *root* and write the export files into folder *to*.

    The files are written as the site is: into a temporary sibling folder, swapped in at
    the end. *to* must be new, empty or an earlier export (it carries ``EXPORT_MARKER``);
    a restricted export is readable by the user only.
    """
    from .build import check_output, clean_stale, prepare, write_site
    to = Path(to)
    check_output(root, to, marker=EXPORT_MARKER, what="export")
    clean_stale(to.resolve(), EXPORT_MARKER)
    ctx = prepare(root, strict=strict, restricted=restricted)
    files = export_files(ctx)
    write_site(files, to, private=restricted, marker=EXPORT_MARKER, marker_text=EXPORT_MARKER_TEXT)
    written = [to / name for name in sorted(files)]
    log.info("exported %d files into %s", len(written), to)
    return written
