"""``hcpsite export``: the computed results as CSV and JSON files for records and other tools.

The tables come from the compute stages' results (the stage that computes a figure also
produces its export column); this module only selects, pseudonymises and serialises.
Person ids are replaced by pseudonymous codes unless the export is restricted; cells that
a spreadsheet would run as a formula are neutralised; floats have a fixed format and JSON
keys are sorted, so two exports of the same inputs are byte-identical.
"""
from __future__ import annotations

import json
import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from .pipeline import Results
from .pages.base import SiteContext
from .privacy import redactor

log = logging.getLogger(__name__)

EXPOSURE_COLUMNS = ["measurement_id", "person_id", "group", "date", "duration_h", "laeq", "lex_8h",
                    "osha_dose_pct", "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa",
                    "lcpeak", "basis"]
GROUP_COLUMNS = ["group", "n_people", "n_samples", "lex_8h", "u_expanded", "lex_8h_upper", "band"]
HEARING_COLUMNS = ["person_id", "ear", "date", "kind", "baseline_date", "avg_234", "shift_234",
                   "shift_234_age_corrected", "osha_sts", "osha_sts_age_corrected", "niosh_shift",
                   "recordable"]
ACTION_COLUMNS = ["subject", "kind", "detail", "due_date"]
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


def frame_to_csv(frame: pd.DataFrame) -> bytes:
    """Return *frame* as UTF-8 CSV with fixed formats and neutralised formula cells."""
    import csv
    import io
    cols: dict[str, list[str]] = {}
    for c in frame.columns:
        s = frame[c]
        if pd.api.types.is_datetime64_any_dtype(s):
            texts = s.dt.strftime("%Y-%m-%d").fillna("").tolist()
        elif pd.api.types.is_float_dtype(s):
            arr = s.to_numpy(dtype=float)
            texts = np.where(np.isnan(arr), "", np.char.mod(f"%.{FLOAT_DECIMALS}f", np.nan_to_num(arr))).tolist()
        else:
            texts = [_format_cell(v) for v in s.tolist()]
        cols[str(c)] = [neutralise(t) for t in texts]
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([neutralise(str(c)) for c in frame.columns])
    w.writerows(zip(*cols.values()) if cols else [])
    return buf.getvalue().encode("utf-8")


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


def summary_json(ctx: SiteContext) -> bytes:
    """Return the headline figures of the overview as sorted JSON."""
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
    }
    return (json.dumps(_json_ready(data), sort_keys=True, indent=2, ensure_ascii=False) + "\n").encode("utf-8")


def export_files(ctx: SiteContext) -> dict[str, bytes]:
    """Return every export file as name -> bytes (tables of stages that did not run are left out)."""
    people = ctx.programme.table("people")
    ids = set(people["person_id"].astype(str)) if "person_id" in people.columns else set()
    files: dict[str, bytes] = {}
    for spec in EXPORTS:
        frame = stage_frame(ctx.results, spec)
        if frame is None:
            log.warning("%s: stage %s did not run; not exported", spec.file, spec.stage)
            continue
        table = select_columns(frame, spec)
        if not ctx.restricted:
            if "subject_type" in frame.columns and spec.file == "actions.csv":
                table = pseudonymise(table.assign(subject_type=frame["subject_type"].to_numpy()), ctx.code, ids)
                table = table.drop(columns=["subject_type"])
            else:
                table = pseudonymise(table, ctx.code, ids)
            if "detail" in table.columns:
                clean = redactor(people, ctx.code)
                texts = table["detail"].astype("string").fillna("")
                table["detail"] = texts.map({t: clean(t) for t in sorted(set(texts.tolist()))}).astype(object)
        files[spec.file] = frame_to_csv(table)
    files["summary.json"] = summary_json(ctx)
    return files


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
