"""The trends page: the headline figures (generator/figures.py) per calendar year, and what changed."""
from __future__ import annotations

import logging
from typing import Any

import pandas as pd

from .. import charts
from .. import figures as F
from ..exposure import action_value
from .exposure import value_name
from . import figure_tiles
from .base import Chart, Page, SiteContext, Table

log = logging.getLogger(__name__)

#: the charts of the page: (title, y-axis, figure names)
SHARES = ("current_audiogram_share", "trained_share", "protector_share", "fit_test_share")
DAYS = ("audiometer_days_ok_share",)
PEOPLE = ("in_scope", "must_be_enrolled", "exposed_top_band", "people_tested")
SHIFTS = ("people_with_sts", "recordable_cases")
OVERDUE = ("overdue_audiograms", "overdue_baselines", "overdue_training", "not_enrolled")


def _years(t: pd.DataFrame) -> list[str]:
    return [str(int(y)) for y in t["year"]]


def _cells(t: pd.DataFrame, name: str) -> list[str]:
    unit = F.BY_NAME[name].unit
    return [figure_tiles.value_text(F.FigureValue(name, None if pd.isna(v) else v), unit) for v in t[name]]


def _series_chart(t: pd.DataFrame, names: tuple[str, ...], labels: dict[str, str], cid: str, title: str,
                  yaxis: str, summary: str, share: bool = False) -> Chart:
    names = tuple(n for n in names if n in t.columns)
    years = _years(t)
    if share:
        series = {labels[n]: [None if pd.isna(v) else round(float(v) * 100, 1) for v in t[n]] for n in names}
        fig = charts.line(years, series, xaxis_title="year (figures as of 31 December)", yaxis_title=yaxis)
        fig.update_yaxes(range=[0, 105])
    else:
        series = {labels[n]: [None if pd.isna(v) else int(v) for v in t[n]] for n in names}
        fig = charts.grouped_bar(years, series, xaxis_title="year (figures as of 31 December)", yaxis_title=yaxis)
    fig.update_xaxes(type="category")
    rows = [[y] + [_cells(t, n)[i] for n in names] for i, y in enumerate(years)]
    table = Table(["Year"] + [labels[n] for n in names], rows, classes=[""] + ["num"] * len(names))
    return Chart(cid, fig, summary, table, title=title)


#: a figure resting on the programme's own setting rather than a rule set
OWN = "the programme's own setting"


def _rules_words(ctx: SiteContext, names: tuple[str, ...]) -> str:
    """Return the rule set the figures *names* are evaluated under (the headline one), and the own setting if any."""
    said = {F.BY_NAME[n].described(ctx.headline)["rules"] for n in names if n in F.BY_NAME}
    return ctx.headline.name + (f"; {OWN}" if OWN in said else "")


def _judged(rule: Any) -> str:
    """Return the metric *rule* judges exposure on."""
    metric = "LEX,8h" if rule.metric == "lex" else "8-h TWA"
    return f"{metric} + U" if rule.judge_with_uncertainty else metric


def _last(t: pd.DataFrame, name: str) -> str:
    return _cells(t, name)[-1]


def trend_table(t: pd.DataFrame, labels: dict[str, str]) -> Table:
    """Return the yearly figures as a table: one row per figure definition, one column per year."""
    names = [f.name for f in F.yearly() if f.name in t.columns]
    years = _years(t)
    rows = [[labels[n]] + _cells(t, n) for n in names]
    return Table(["Figure"] + years, rows, caption="Headline figures per year, each as of 31 December (the last year: "
                 "the review period)", classes=[""] + ["num"] * len(years))


def figure_rows(t: pd.DataFrame, labels: dict[str, str], period_year: int) -> dict[str, object]:
    """Return the screen table: one row per figure, one column per year; the period's cells carry the marker."""
    names = [f.name for f in F.yearly() if f.name in t.columns]
    years = [int(y) for y in t["year"]]
    rows = []
    for n in names:
        cells = _cells(t, n)
        rows.append({"label": labels[n], "href": F.BY_NAME[n].explained,
                     "cells": [{"text": c, "figure": n if y == period_year else ""} for c, y in zip(cells, years)]})
    return {"years": years, "rows": rows}


def definitions_table(ctx: SiteContext) -> Table:
    """Return how each headline figure is defined: population, period, denominator, rule set and source."""
    figs = ctx.results.figures
    rows = []
    for f in F.FIGURES:
        d = f.described(ctx.headline)
        rows.append([figs.labels[f.name], d["population"], d["period"], d["denominator"] or "(a count)",
                     d["rules"], figs.sources[f.name], "every year end" if f.yearly else "review period only"])
    return Table(["Figure", "Who or what is counted", "Period", "Share or rate of", "Rule set", "Answers to",
                  "On this page"], rows, caption="How each headline figure of this review is defined (the same "
                  "definition on every page, in the printable review and in summary.json)")


def build(ctx: SiteContext) -> list[Page]:
    """Return the trends page."""
    trends = ctx.results.trends
    t = trends.table
    if len(t) == 0:
        return [Page(slug="trends", title="Trends", template="trends.html", section="trends", in_nav=True,
                     context={"available": False, "changes": [], "table": None})]
    labels = ctx.results.figures.labels
    last = int(t["year"].iloc[-1])
    head = ctx.headline
    action, limit = action_value(head), head.limit_value
    limit_text = f" and the {value_name(head, limit) or 'limit value'} {limit:g} dB(A)" if limit is not None else ""
    page_charts = [
        _series_chart(t, SHARES, labels, "trends-1", "People in the programme with a current audiogram, trained, "
                      "with a protector and fit-tested, % of people in the programme, at each 31 December "
                      f"(rule set: {_rules_words(ctx, SHARES)})", "% of people in the programme",
                      f"In {last}, {_last(t, 'current_audiogram_share')} of the people who must be in the programme "
                      f"had a current audiogram and {_last(t, 'trained_share')} of those in it were trained within "
                      "the interval.", share=True),
        _series_chart(t, PEOPLE, labels, "trends-2", "People in scope: all, exposed at or above the "
                      f"{value_name(head, action) or 'action value'} {action:g} dB(A){limit_text} ({head.name}, {_judged(head)}, without protectors) "
                      "and tested, per year, people", "people in scope",
                      f"In {last}, {_last(t, 'must_be_enrolled')} of {_last(t, 'in_scope')} people in scope were "
                      f"exposed at or above the {value_name(head, action) or 'action value'} and "
                      f"{_last(t, 'exposed_top_band')} at or above the {value_name(head, limit) or 'limit value'}."),
        _series_chart(t, SHIFTS, labels, "trends-3", "People with a standard threshold shift and recordable "
                      f"hearing-loss cases per year, people or cases (rule set: {_rules_words(ctx, SHIFTS)})",
                      "people or cases",
                      f"Over {len(t)} years, {int(t['people_with_sts'].sum())} person-years with a standard threshold "
                      f"shift and {int(t['recordable_cases'].sum())} recordable cases; counts of shifts are not a "
                      "judgement of any person's hearing."),
        _series_chart(t, OVERDUE, labels, "trends-4", "Overdue audiograms and training of people in scope, and people "
                      "without records, at each 31 December, people or audiograms "
                      f"(rule set: {_rules_words(ctx, OVERDUE)})", "people or audiograms",
                      f"At the end of {last}, {_last(t, 'overdue_audiograms')} audiograms and "
                      f"{_last(t, 'overdue_training')} people's training were overdue."),
        _series_chart(t, DAYS, labels, "trends-5", "Audiometric test days with valid audiometer checks, % of the "
                      f"year's test days (rule set: {_rules_words(ctx, DAYS)})", "% of test days",
                      f"In {last}, {_last(t, 'audiometer_days_ok_share')} of the test days had a functional check "
                      "that day, calibrations in date and a booth within its limits.", share=True),
    ]
    context = {
        "available": True,
        "changes": list(trends.changes),
        "first_year": int(t["year"].iloc[0]),
        "last_year": last,
        "table": trend_table(t, labels),
        "figure_table": figure_rows(t, labels, last),
        "definitions_table": definitions_table(ctx),
    }
    return [Page(slug="trends", title="Trends", template="trends.html", section="trends", in_nav=True,
                 context=context, charts=page_charts)]
