"""The trends page: the programme's headline figures per calendar year, and what changed."""
from __future__ import annotations

import logging

import pandas as pd

from .. import charts
from .base import Chart, Page, SiteContext, Table
from .programme import pct

log = logging.getLogger(__name__)

SHARES = {"current_audiogram_share": "current audiogram", "trained_share": "trained within 12 months",
          "protector_share": "protector on record"}
COUNTS = {"sts": "people with a standard threshold shift", "recordables": "people with a recordable hearing loss"}
PEOPLE = {"must_be_enrolled": "must be in the programme", "enrolled": "enrolled",
          "open_actions": "open compliance items at year end"}


def _years(t: pd.DataFrame) -> list[str]:
    return [str(int(y)) for y in t["year"]]


def share_chart(t: pd.DataFrame, slug: str) -> Chart:
    """Return the line chart of the programme shares per year."""
    series = {label: (t[c] * 100).round(1) for c, label in SHARES.items() if c in t.columns}
    fig = charts.line(_years(t), series, xaxis_title="year (figures as of 31 December)", yaxis_title="%")
    fig.update_yaxes(range=[0, 105])
    fig.update_xaxes(type="category")
    rows = [[y] + [pct(t[c].iloc[i]) for c in SHARES if c in t.columns] for i, y in enumerate(_years(t))]
    table = Table(["Year"] + [SHARES[c] for c in SHARES if c in t.columns], rows,
                  classes=[""] + ["num"] * len(series))
    last = t.iloc[-1]
    summary = (f"In {int(last['year'])}, {pct(last['current_audiogram_share'])} of the people who must be in the "
               f"programme had a current audiogram and {pct(last['trained_share'])} were trained within 12 "
               f"months.")
    return Chart(f"{slug}-1", fig, summary, table, title="Audiograms, training and protectors: shares per year")


def people_chart(t: pd.DataFrame, slug: str) -> Chart:
    """Return the grouped bar of people in the programme and open items per year."""
    series = {label: t[c] for c, label in PEOPLE.items()}
    fig = charts.grouped_bar(_years(t), series, xaxis_title="year", yaxis_title="people or items")
    fig.update_xaxes(type="category")
    table = charts.table_from_frame(t.assign(y=_years(t)), {"y": "Year", **PEOPLE},
                                    {c: "d" for c in PEOPLE})
    last = t.iloc[-1]
    summary = (f"In {int(last['year'])}, {int(last['enrolled'])} people were enrolled against "
               f"{int(last['must_be_enrolled'])} who had to be, with {int(last['open_actions'])} compliance "
               f"items open at the year's end.")
    return Chart(f"{slug}-2", fig, summary, table, title="People in the programme per year")


def shift_chart(t: pd.DataFrame, slug: str) -> Chart:
    """Return the grouped bar of threshold shifts and recordables per year."""
    series = {label: t[c] for c, label in COUNTS.items()}
    fig = charts.grouped_bar(_years(t), series, xaxis_title="year", yaxis_title="people")
    fig.update_xaxes(type="category")
    table = charts.table_from_frame(t.assign(y=_years(t)), {"y": "Year", **COUNTS}, {c: "d" for c in COUNTS})
    summary = (f"Over {len(t)} years, {int(t['sts'].sum())} person-years with a standard threshold shift and "
               f"{int(t['recordables'].sum())} with a recordable hearing loss; counts of shifts are not a "
               f"judgement of any person's hearing.")
    return Chart(f"{slug}-3", fig, summary, table, title="Threshold shifts and recordables per year")


def band_chart(t: pd.DataFrame, slug: str) -> Chart | None:
    """Return the stacked bar of people per exposure band per year."""
    bands = [c for c in t.columns if c.startswith("band: ")]
    if not bands:
        return None
    series = {c[6:]: t[c] for c in bands}
    fig = charts.stacked_bar(_years(t), series, xaxis_title="year", yaxis_title="people")
    fig.update_xaxes(type="category")
    table = charts.table_from_frame(t.assign(y=_years(t)), {"y": "Year", **{c: c[6:] for c in bands}},
                                    {c: "d" for c in bands})
    last = t.iloc[-1]
    top = max(bands, key=lambda c: (int(last[c]), c))
    summary = (f"People by the exposure band of their latest measurement (or their group's) up to each year's "
               f"end; in {int(last['year'])} the largest band is {top[6:]} with {int(last[top])} people.")
    return Chart(f"{slug}-4", fig, summary, table, title="People per exposure band (dB) per year")


def trend_table(t: pd.DataFrame) -> Table:
    """Return the full table of yearly figures."""
    d = t.copy()
    for c in SHARES:
        if c in d.columns:
            d[c] = [pct(v) for v in d[c]]
    d["y"] = _years(t)
    cols = {"y": "Year", "as_of": "As of", "in_scope": "People in scope", **PEOPLE, **SHARES, **COUNTS}
    ints = {c: "d" for c in ("in_scope", *PEOPLE, *COUNTS)}
    return charts.table_from_frame(d, cols, ints, caption="Headline figures per year")


def build(ctx: SiteContext) -> list[Page]:
    """Return the trends page."""
    trends = ctx.results.trends
    t = trends.table
    if len(t) == 0:
        return [Page(slug="trends", title="Trends", template="trends.html", section="trends", in_nav=True,
                     context={"available": False, "changes": [], "table": None})]
    page_charts = [share_chart(t, "trends"), people_chart(t, "trends"), shift_chart(t, "trends")]
    bc = band_chart(t, "trends")
    if bc is not None:
        page_charts.append(bc)
    context = {
        "available": True,
        "changes": list(trends.changes),
        "first_year": int(t["year"].iloc[0]),
        "last_year": int(t["year"].iloc[-1]),
        "table": trend_table(t),
    }
    return [Page(slug="trends", title="Trends", template="trends.html", section="trends", in_nav=True,
                 context=context, charts=page_charts)]
