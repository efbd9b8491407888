"""Trends: the headline figures of the programme evaluated at each calendar year end.

A stage of its own, after compliance: it evaluates the compliance stage's per-person
status at every year end with the same rules and counts, so a year's figure on the trends
page is the figure the overview would have shown for that year.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .compliance import ComplianceInputs, ComplianceResult, _figures, person_status
from .exposure import ExposureResult
from .frames import col as _col, dates as _dates, lookup as _lookup, table as _table
from .hearing import HearingResult
from .model import Programme
from .rules import RuleSet


@dataclass(frozen=True)
class TrendsResult:
    """One row of headline figures per calendar year and what changed since last year."""

    #: one row per calendar year (see TREND_COLUMNS); band columns "band: <label>"
    table: pd.DataFrame
    #: plain sentences "what changed since last year"
    changes: list[str]


def _year_bands(measurements: pd.DataFrame, rule: RuleSet, people: pd.DataFrame, as_of: pd.Timestamp) -> dict[str, int]:
    """Count in-scope people per exposure band from the measurements up to *as_of*."""
    m = measurements
    col = f"band_{rule.id}"
    if m is None or col not in m.columns or people.empty:
        return {}
    mm = pd.DataFrame({"person_id": _col(m, "person_id", "").fillna("").astype(str),
                       "group": _col(m, "group", "").fillna("").astype(str),
                       "date": _dates(m), "band": _col(m, col, "").fillna("").astype(str)})
    mm = mm[(mm["date"] <= as_of) & mm["band"].ne("")].sort_values("date", kind="mergesort")
    personal = mm[mm["person_id"].ne("")].drop_duplicates("person_id", keep="last").set_index("person_id")["band"]
    group = mm.drop_duplicates("group", keep="last").set_index("group")["band"]
    band = _lookup(people["person_id"], personal)
    band = band.where(band.notna(), _lookup(people["group"], group)).fillna("not measured")
    counts = band.value_counts()
    labels = list(rule.band_labels()) + sorted(set(counts.index) - set(rule.band_labels()))
    return {lab: int(counts.get(lab, 0)) for lab in labels}


TREND_COLUMNS = ["year", "as_of", "in_scope", "must_be_enrolled", "enrolled", "current_audiogram_share",
                 "trained_share", "protector_share", "sts", "recordables", "open_actions"]


def compute_trends(inp: ComplianceInputs, exposure: ExposureResult, hearing: HearingResult,
                   start: pd.Timestamp, as_of: pd.Timestamp, first_year: int | None) -> pd.DataFrame:
    """Return one row of headline figures per calendar year, as of each 31 Dec (as_of last)."""
    if first_year is None or first_year > as_of.year:
        return pd.DataFrame(columns=TREND_COLUMNS)
    audiograms = hearing.audiograms
    rows = []
    for year in range(first_year, as_of.year + 1):  # one pass per calendar year (a handful), not per row
        y_end = as_of if year == as_of.year else pd.Timestamp(year=year, month=12, day=31)
        y_start = start if year == as_of.year else pd.Timestamp(year=year, month=1, day=1)
        s = person_status(inp, y_end, y_start)
        f = _figures(s, audiograms, y_start, y_end)
        row = {"year": year, "as_of": y_end, **{k: f[k] for k in TREND_COLUMNS[2:-1]},
               "open_actions": f["overdue_audiograms"] + f["overdue_training"]
               + int((s["protector_required"] & ~s["has_protector"]).sum())}
        for label, n in _year_bands(exposure.measurements, inp.rule, s, y_end).items():
            row[f"band: {label}"] = n
        rows.append(row)
    out = pd.DataFrame(rows)
    bands = [c for c in out.columns if c.startswith("band: ")]
    out[bands] = out[bands].fillna(0).astype(int)
    return out


_TREND_WORDS = {
    "enrolled": ("People enrolled", False),
    "current_audiogram_share": ("Share with a current audiogram", True),
    "trained_share": ("Share trained within the last 12 months", True),
    "protector_share": ("Share with a hearing protector on record", True),
    "sts": ("People with a standard threshold shift", False),
    "recordables": ("People with a recordable hearing loss", False),
    "open_actions": ("Open compliance items at year end", False),
}


def _fmt(value: Any, share: bool) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "not known"
    return f"{round(float(value) * 100):.0f} %" if share else f"{int(value)}"


def describe_changes(trends: pd.DataFrame) -> list[str]:
    """Return plain sentences on what changed between the last two years of *trends*."""
    if len(trends) < 2:
        return ["Only one year of records: there is no earlier year to compare with."]
    prev, last = trends.iloc[-2], trends.iloc[-1]
    out = []
    for col, (label, share) in _TREND_WORDS.items():
        if col not in trends.columns:
            continue
        a, b = prev[col], last[col]
        if a is None or b is None or pd.isna(a) or pd.isna(b):
            continue
        fa, fb = _fmt(a, share), _fmt(b, share)
        if fa == fb:
            out.append(f"{label} stayed at {fb}.")
        else:
            verb = "rose" if float(b) > float(a) else "fell"
            out.append(f"{label} {verb} from {fa} in {int(prev['year'])} to {fb} in {int(last['year'])}.")
    bands = [c for c in trends.columns if c.startswith("band: ")]
    for c in bands:
        a, b = int(prev[c]), int(last[c])
        if a != b:
            out.append(f"People in exposure band {c[6:]} dB: {a} in {int(prev['year'])}, {b} in "
                       f"{int(last['year'])}.")
    return out


def _first_record_year(programme: Programme) -> int | None:
    """Return the first calendar year the programme's records cover.

    Noise measurements, training and protector issues mark the years the programme kept
    records; audiograms count only when none of those exist, because baselines taken at
    hiring may date from decades before the records begin. Audiometer checks never count:
    an audiometer is calibrated before its first test, so its records predate the programme's.
    """
    def first(names: tuple[str, ...]) -> int | None:
        years = [int(d.min().year) for d in (_dates(_table(programme, n)).dropna() for n in names) if not d.empty]
        return min(years) if years else None
    return first(("noise", "training", "protector_fits")) or first(("audiograms",))


def compute(programme: Programme, *, compliance: ComplianceResult, exposure: ExposureResult,
            hearing: HearingResult) -> TrendsResult:
    """Evaluate the headline figures at each year end from the first year of records."""
    cfg = programme.config
    as_of, start = pd.Timestamp(cfg.period.end).normalize(), pd.Timestamp(cfg.period.start).normalize()
    assert compliance.inputs is not None
    table = compute_trends(compliance.inputs, exposure, hearing, start, as_of, _first_record_year(programme))
    changes = describe_changes(table) if not table.empty else []
    return TrendsResult(table=table, changes=changes)
