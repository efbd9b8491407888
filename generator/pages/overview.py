"""The overview page (index.html): headline figures, data files present and missing, links."""
from __future__ import annotations

import logging
from typing import Any

import numpy as np
import pandas as pd

from .. import charts
from .. import figures as F
from ..exposure import action_value
from ..frames import person_codes
from ..inputs.spec import FILES
from ..pipeline import Results
from . import figure_tiles
from .actions import kind_words
from .base import Chart, Page, SiteContext

log = logging.getLogger(__name__)

#: data file -> sections whose figures come from it (said on the overview when it is missing).
USED_BY: dict[str, tuple[str, ...]] = {
    "groups": ("Exposure", "Protection"),
    "noise": ("Exposure", "Protection", "Trends"),
    "tasks": ("Exposure",),
    "audiograms": ("Hearing", "Enrolment and duties", "Trends"),
    "reviews": ("Hearing",),
    "notices": ("Hearing", "Enrolment and duties"),
    "training": ("Enrolment and duties",),
    "protectors": ("Protection",),
    "protector_fits": ("Protection",),
    "audiometers": ("Enrolment and duties",),
    "people": ("every section",),
}

#: one line under each section link.
BLURBS: dict[str, str] = {
    "exposure": "Noise measurements, dose, TWA and LEX,8h per person and similar exposure group.",
    "protection": "Hearing protectors, their ratings and whether the protected level meets the target.",
    "hearing": "Baselines, threshold shifts and follow-ups, shown by pseudonymous code.",
    "programme": "Enrolment, due audiograms, training and audiometer checks.",
    "noise-map": "Area measurements at their positions on a plan of the site.",
    "actions": "Every action the records call for, with due dates.",
    "trends": "How the programme's figures changed over the years.",
    "review": "All sections on one page for printing and sign-off.",
    "methods": "Formulas, parameters and the rule sets' values with their clauses.",
    "quality": "Every problem found in the input files, with file, row and column.",
}


#: headline figures on the overview, in order (names of generator/figures.py definitions)
OVERVIEW_FIGURES: tuple[str, ...] = tuple(f.name for f in F.FIGURES if "index" in f.shown_on)


def headline_tiles(ctx: SiteContext) -> list[dict[str, Any]]:
    """Return one tile per headline figure, each linked to the page that explains it."""
    return [figure_tiles.tile(ctx, name, link=True) for name in OVERVIEW_FIGURES]


def _part(text: str, figure: str = "") -> dict[str, str]:
    return {"text": text, "figure": figure}


def _fig(ctx: SiteContext, name: str) -> dict[str, str]:
    return _part(figure_tiles.text(ctx, name), name)


def _previous_year(ctx: SiteContext) -> tuple[int, dict[str, F.FigureValue]] | None:
    """Return the year before the review period's last year and its figures (None: no such row)."""
    years = ctx.results.trends.years
    last = pd.Timestamp(ctx.programme.config.period.end).year
    earlier = sorted(y for y in years if y < last)
    return (earlier[-1], years[earlier[-1]]) if earlier else None


def _was(prev: tuple[int, dict[str, F.FigureValue]] | None, name: str) -> str:
    """Return ' (2024: 135)' for figure *name* of the year before, '' when unknown."""
    if prev is None or name not in prev[1]:
        return ""
    fv = prev[1][name]
    if not fv.known:
        return ""
    return f" ({prev[0]}: {figure_tiles.value_text(fv, F.BY_NAME[name].unit)})"


def answers(ctx: SiteContext) -> list[list[dict[str, str]]]:
    """Return the plain sentences above the tiles, each a list of parts (text, and the figure it shows)."""
    figs = ctx.results.figures
    head = ctx.headline
    prev = _previous_year(ctx)
    act = action_value(head)
    edge = F.top_edge(head)
    out: list[list[dict[str, str]]] = []
    out.append([_part("Of the "), _fig(ctx, "in_scope"), _part(" people in the programme's scope in the period, "),
                _fig(ctx, "must_be_enrolled"),
                _part(f" were exposed at or above the action value of {act:g} dB(A) under {head.short}, without "
                      "protectors" + _was(prev, "must_be_enrolled") + ", and "),
                _fig(ctx, "exposed_top_band"),
                _part(f" at or above {edge:g} dB(A)" + _was(prev, "exposed_top_band") + "; ")
                if edge is not None else _part(""),
                _fig(ctx, "not_enrolled"), _part(" of the exposed have no audiometry or training records.")])
    rate = figs.values.get("recordable_rate")
    sent = [_fig(ctx, "people_with_sts"), _part(" people had a standard threshold shift in the period"
                                                + _was(prev, "people_with_sts") + " and there "
                                                + ("was " if figs["recordable_cases"].value == 1 else "were ")),
            _fig(ctx, "recordable_cases"),
            _part(" recordable hearing-loss case" + ("" if figs["recordable_cases"].value == 1 else "s")
                  + _was(prev, "recordable_cases"))]
    if rate is not None and rate.known:
        sent += [_part(", "), _fig(ctx, "recordable_rate"), _part(" per 200,000 hours worked")]
        was_rate = _was(prev, "recordable_rate")
        if was_rate:
            sent.append(_part(was_rate))
        elif prev is not None:
            sent.append(_part(f"; the rate of {prev[0]} is not known, as hours worked are recorded for the review "
                              "period only"))
    else:
        sent.append(_part("; no rate per 200,000 hours, as hours worked are not recorded (hours_worked)"))
    sent.append(_part("."))
    out.append(sent)
    out.append([_fig(ctx, "open_actions"), _part(" actions are open and "), _fig(ctx, "overdue_actions"),
                _part(" of them overdue, among them "), _fig(ctx, "overdue_audiograms"),
                _part(" audiograms" + _was(prev, "overdue_audiograms") + " and "), _fig(ctx, "overdue_training"),
                _part(" people's training" + _was(prev, "overdue_training") + ".")])
    if prev is not None:
        moved: list[dict[str, str]] = []
        for name in ("current_audiogram_share", "trained_share", "protector_share", "audiometer_days_ok_share"):
            before, now = prev[1].get(name), figs.values.get(name)
            if before is None or now is None or not before.known or not now.known:
                continue
            unit = F.BY_NAME[name].unit
            a, b = figure_tiles.value_text(before, unit), figure_tiles.value_text(now, unit)
            label = figs.labels[name][:1].lower() + figs.labels[name][1:]
            if a == b:
                how = "stayed at "
            else:
                how = ("rose" if float(now.value or 0) > float(before.value or 0) else "fell") + f" from {a} to "
            moved += [_part(("; " if moved else "") + f"{label} {how}"), _fig(ctx, name)]
        if moved:
            out.append([_part(f"Since {prev[0]}: ")] + moved + [_part(".")])
    return out


def count_tiles(ctx: SiteContext) -> list[dict[str, str]]:
    """Return tiles counting the records read."""
    prog = ctx.programme
    people = prog.table("people")
    tiles = [{"label": "People in the records", "value": f"{len(people):,}", "note": ""}]
    if "leave_date" in people.columns:
        end = pd.Timestamp(prog.config.period.end)
        employed = people["leave_date"].isna() | (people["leave_date"] > end)
        if "hire_date" in people.columns:
            employed &= people["hire_date"].isna() | (people["hire_date"] <= end)
        current = int(employed.sum())
        tiles.append({"label": "Employed at the end of the period", "value": f"{current:,}", "note": ""})
    groups = people["group"].nunique() if "group" in people.columns else 0
    tiles.append({"label": "Similar exposure groups", "value": f"{groups:,}",
                  "note": f"{len(ctx.suppressed_groups)} suppressed (small)" if ctx.suppressed_groups else ""})
    if prog.has("noise"):
        tiles.append({"label": "Noise measurements", "value": f"{len(prog.table('noise')):,}", "note": ""})
    if prog.has("audiograms"):
        a = prog.table("audiograms")
        tests = _distinct_tests(a, person_codes(prog, "audiograms")[0]) if len(a) else 0
        tiles.append({"label": "Audiograms", "value": f"{tests:,}", "note": "one per person and date"})
    return tiles


def _distinct_tests(a: pd.DataFrame, person: np.ndarray) -> int:
    """Return the number of distinct (person, date) pairs of the audiogram rows, given each row's
    person code (integer codes, no frame copy)."""
    day, days = pd.factorize(a["date"].to_numpy("datetime64[ns]").view(np.int64))
    return len(pd.unique(person * len(days) + day))


def all_actions(results: Results) -> pd.DataFrame:
    """Return the one action list (the compliance stage merges every stage's actions)."""
    return results.compliance.actions


def file_rows(ctx: SiteContext) -> list[dict[str, Any]]:
    """Return one entry per declared data file: present or missing, rows, sections affected."""
    prog = ctx.programme
    out = []
    for spec in FILES:
        present = prog.has(spec.name)
        out.append({
            "name": spec.name,
            "path": prog.present.get(spec.name, spec.path),
            "present": present,
            "required": spec.required,
            "rows": len(prog.table(spec.name)) if present else 0,
            "doc": spec.doc,
            "used_by": ", ".join(USED_BY.get(spec.name, ())),
        })
    return out


def stage_rows(results: Results) -> list[dict[str, Any]]:
    """Return per computed stage: name, findings and actions counts."""
    rows = []
    stages = (("noise exposure", results.exposure), ("hearing", results.hearing),
              ("hearing protection", results.protection), ("enrolment and duties", results.compliance))
    for name, res in stages:
        acts = getattr(res, "actions", None)
        rows.append({"stage": name, "findings": len(getattr(res, "findings", []) or []),
                     "actions": len(acts) if isinstance(acts, pd.DataFrame) else 0})
    return rows


def overview_chart(actions: pd.DataFrame | None, files: list[dict[str, Any]]) -> Chart:
    """Return the overview chart: open actions by kind, or records per data file when there are none."""
    if actions is not None and len(actions) and "kind" in actions.columns:
        counts = kind_words(actions["kind"]).value_counts()
        df = pd.DataFrame({"kind": counts.index, "n": counts.values}).sort_values(
            ["n", "kind"], ascending=[False, True], kind="mergesort")
        fig = charts.bar(df["kind"], df["n"], horizontal=True, xaxis_title="open actions",
                         height=max(240, 40 + 28 * len(df)))
        top = df.iloc[0]
        summary = (f"{int(df['n'].sum())} open actions in {len(df)} kinds; the most frequent is "
                   f"'{top['kind']}' with {int(top['n'])}.")
        table = charts.table_from_frame(df, {"kind": "Kind of action", "n": "Open"}, {"n": "d"})
        return Chart("index-1", fig, summary, table, height=max(240, 40 + 28 * len(df)),
                     title="Open actions by kind, number of actions")
    df = pd.DataFrame([f for f in files if f["present"]], columns=["name", "rows"])
    fig = charts.bar(df["name"], df["rows"], horizontal=True, xaxis_title="rows",
                     height=max(240, 40 + 28 * len(df)))
    summary = f"{len(df)} data files were read with {int(df['rows'].sum()):,} rows in all; no actions are open."
    table = charts.table_from_frame(df, {"name": "File", "rows": "Rows"}, {"rows": "d"})
    return Chart("index-1", fig, summary, table, height=max(240, 40 + 28 * len(df)),
                 title="Records per data file, rows")


def build(ctx: SiteContext) -> list[Page]:
    """Return the overview page: plain answers first, then the headline figures and the records read."""
    results = ctx.results
    actions = all_actions(results)
    files = file_rows(ctx)
    missing = [f for f in files if not f["present"]]
    findings = ctx.programme.findings
    page = Page(
        slug="index", title="Overview", template="overview.html", section="index", in_nav=True,
        context={
            "answers": answers(ctx),
            "headline": headline_tiles(ctx),
            "counts": count_tiles(ctx),
            "missing": missing,
            "blurbs": BLURBS,
            "n_errors": len(findings.errors),
            "n_warnings": len(findings.warnings),
            "rule_names": [r.name for r in ctx.rules.values()],
        },
        charts=[overview_chart(actions, files)],
    )
    return [page]
