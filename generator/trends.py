"""Trends: the headline figures (generator/figures.py) evaluated at each calendar year end.

A stage of its own, after compliance. It evaluates the same figure definitions the overview
shows on one snapshot per calendar year: the people in scope in that year, as of its 31
December (the last year: the review period, as of its end). The last row is the review
period's own evaluation, so a year's figure on the trends page is the figure the overview
shows for that year.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from . import figures as F
from .audiometers import AudiometerChecks
from .compliance import ComplianceInputs, ComplianceResult, clause_for, person_status, person_statuses
from .exposure import ExposureResult
from .frames import dates as _dates, table as _table
from .hearing import HearingResult
from .model import Programme


@dataclass(frozen=True)
class TrendsResult:
    """One row of headline figures per calendar year and what changed since last year."""

    #: one row per calendar year: year, as_of, then one column per yearly figure (figures.yearly())
    table: pd.DataFrame
    #: plain sentences "what changed since last year"
    changes: list[str]
    #: every headline figure of the review period (the overview's figures)
    figures: F.FigureSet | None = None
    #: the figure values of each year's row, by year (the table holds their values)
    years: dict[int, dict[str, F.FigureValue]] = field(default_factory=dict)


def snapshot(inp: ComplianceInputs, *, start: pd.Timestamp, as_of: pd.Timestamp, hearing: Any,
             exposure: Any, checks: AudiometerChecks | None, status: pd.DataFrame | None = None,
             actions: pd.DataFrame | None = None, hours: float | None = None,
             records: F.Records | None = None) -> F.Snapshot:
    """Return the snapshot of the people in scope between *start* and *as_of*.

    *records*: the records of *hearing*, *exposure* and *checks* when already made (snapshots of
    one build share them).
    """
    s = person_status(inp, as_of, start) if status is None else status
    empty = pd.DataFrame()
    audiograms = getattr(hearing, "audiograms", None) if hearing is not None else None
    cases = getattr(hearing, "cases", None) if hearing is not None else None
    test_days = checks.status if checks is not None else empty
    people = getattr(exposure, "people", None) if exposure is not None else None
    return F.Snapshot(
        start=start, as_of=as_of, rule=inp.rule, status=s, audiograms=audiograms, cases=cases,
        test_days=test_days, exposure_people=people, actions=actions, hours_worked=hours,
        records=records if records is not None else F.Records.of(audiograms, cases, test_days, people))


def compute_trends(inp: ComplianceInputs, period: F.Snapshot, *, hearing: Any, exposure: Any,
                   checks: AudiometerChecks | None, first_year: int | None
                   ) -> tuple[pd.DataFrame, dict[int, dict[str, F.FigureValue]]]:
    """Return one row of the yearly figures per calendar year (the last one: the review period)."""
    names = [f.name for f in F.yearly()]
    as_of = period.as_of
    if first_year is None or first_year > as_of.year:
        return pd.DataFrame(columns=["year", "as_of", *names]), {}
    years: dict[int, dict[str, F.FigureValue]] = {}
    ends = [(pd.Timestamp(year=y, month=12, day=31), pd.Timestamp(year=y, month=1, day=1))
            for y in range(first_year, as_of.year)]
    # every earlier year end's per-person status in one pass; each year then only counts
    for (end, start), status in zip(ends, person_statuses(inp, ends)):
        snap = snapshot(inp, start=start, as_of=end, hearing=hearing, exposure=exposure, checks=checks,
                        status=status, records=period.records)
        years[end.year] = F.evaluate(snap, F.yearly())
    years[as_of.year] = F.evaluate(period, F.yearly())
    rows = [{"year": y, "as_of": as_of if y == as_of.year else pd.Timestamp(year=y, month=12, day=31),
             **F.row(v)} for y, v in sorted(years.items())]
    return pd.DataFrame(rows, columns=["year", "as_of", *names]), years


def _fmt(value: Any, unit: str) -> str:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return "not known"
    if unit == F.SHARE:
        return f"{round(float(value) * 100):.0f} %"
    if unit == F.RATE:
        return f"{float(value):.2f}"
    return f"{int(value):,}"


def describe_changes(trends: pd.DataFrame, labels: dict[str, str] | None = None) -> list[str]:
    """Return plain sentences on what changed between the last two years of *trends*."""
    if len(trends) < 2:
        return ["Only one year of records: there is no earlier year to compare with."]
    prev, last = trends.iloc[-2], trends.iloc[-1]
    y0, y1 = int(prev["year"]), int(last["year"])
    out = []
    for fig in F.yearly():
        if fig.name not in trends.columns:
            continue
        label = (labels or {}).get(fig.name, fig.label)
        a, b = prev[fig.name], last[fig.name]
        fa, fb = _fmt(a, fig.unit), _fmt(b, fig.unit)
        if fa == "not known" and fb == "not known":
            continue
        if fa == "not known" or fb == "not known":
            out.append(f"{label}: {fa} in {y0}, {fb} in {y1}.")
        elif fa == fb:
            out.append(f"{label}: {fb} in {y1}, as in {y0}.")
        else:
            verb = "rose" if float(b) > float(a) else "fell"
            out.append(f"{label}: {verb} from {fa} in {y0} to {fb} in {y1}.")
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


def compute(programme: Programme, *, compliance: ComplianceResult, exposure: ExposureResult | Any,
            hearing: HearingResult | Any, checks: AudiometerChecks | None = None) -> TrendsResult:
    """Evaluate every headline figure for the review period and the yearly ones at each year end."""
    cfg = programme.config
    as_of, start = pd.Timestamp(cfg.period.end).normalize(), pd.Timestamp(cfg.period.start).normalize()
    inp = compliance.inputs
    assert inp is not None
    period = snapshot(inp, start=start, as_of=as_of, hearing=hearing, exposure=exposure, checks=checks,
                      status=compliance.people, actions=compliance.actions, hours=cfg.hours_worked)
    figs = F.figure_set(period, clause_for)
    table, years = compute_trends(inp, period, hearing=hearing, exposure=exposure, checks=checks,
                                  first_year=_first_record_year(programme))
    changes = describe_changes(table, figs.labels) if not table.empty else []
    return TrendsResult(table=table, changes=changes, figures=figs, years=years)
