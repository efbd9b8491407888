"""The actions page: every open item of every stage in one list, sorted by due date."""
from __future__ import annotations

import logging

import pandas as pd

from .. import charts
from ..privacy import redactor
from .base import Chart, Page, SiteContext, Table

log = logging.getLogger(__name__)

STATUS_LABELS = {"overdue": "overdue", "due_soon": "due soon", "open": "open"}
SOURCE_LABELS = {"compliance": "programme", "exposure": "exposure", "protection": "protection",
                 "hearing": "hearing"}


def public_actions(actions: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the action list with person subjects coded and ids or names in the text withheld."""
    a = actions.copy()
    redact = redactor(ctx.programme.table("people"), ctx.code)
    person = a["subject_type"].astype(str).eq("person")
    a["subject_shown"] = [ctx.code(s) if p else str(s) for s, p in zip(a["subject"], person)]
    a["detail"] = [redact(str(d)) for d in a["detail"]]
    a["status"] = a["status"].map(STATUS_LABELS).fillna(a["status"])
    a["source"] = a["source"].map(SOURCE_LABELS).fillna(a["source"])
    a["kind_label"] = a["kind"].astype(str).str.replace("_", " ", regex=False)
    return a


def action_table(a: pd.DataFrame, caption: str = "") -> Table:
    """Return the table of (already public) actions."""
    return charts.table_from_frame(a, {"due_date": "Due", "status": "Status", "subject_shown": "Subject",
                                       "kind_label": "Kind", "detail": "Detail",
                                       "clause": "Clause", "source": "Section"}, caption=caption)


def kind_chart(a: pd.DataFrame, slug: str = "actions") -> Chart:
    """Return the bar chart of open actions per kind, split into overdue and other."""
    kinds = sorted(a["kind_label"].unique())
    over = a[a["status"].eq("overdue")]["kind_label"].value_counts()
    rest = a[~a["status"].eq("overdue")]["kind_label"].value_counts()
    series = {"overdue": [int(over.get(k, 0)) for k in kinds], "due soon or open": [int(rest.get(k, 0))
                                                                                  for k in kinds]}
    height = max(260, 60 + 30 * len(kinds))
    fig = charts.stacked_bar(kinds, series, horizontal=True, xaxis_title="actions", height=height,
                             colours={"overdue": charts.PALETTE[4], "due soon or open": charts.PALETTE[1]})
    rows = [[k, str(o), str(r), str(o + r)] for k, o, r in zip(kinds, series["overdue"], series["due soon or open"])]
    table = Table(["Kind", "Overdue", "Due soon or open", "All"], rows, classes=["", "num", "num", "num"])
    if kinds:
        totals = pd.DataFrame({"kind": kinds, "n": [o + r for o, r in zip(series["overdue"],
                                                                          series["due soon or open"])]})
        top = totals.sort_values(["n", "kind"], ascending=[False, True], kind="mergesort").iloc[0]
        summary = (f"{len(a)} open actions in {len(kinds)} kinds, {int(a['status'].eq('overdue').sum())} of "
                   f"them overdue; the most frequent kind is '{top['kind']}' with {int(top['n'])}.")
    else:
        summary = "No actions are open."
    return Chart(f"{slug}-1", fig, summary, table, height=height, title="Open actions by kind")


def build(ctx: SiteContext) -> list[Page]:
    """Return the actions page."""
    comp = ctx.results.get("compliance")
    if comp is None:
        return [Page(slug="actions", title="Actions", template="actions.html", section="actions", in_nav=True,
                     context={"available": False})]
    a = public_actions(comp.actions, ctx)
    counts = a.groupby("kind_label", sort=True).size()
    context = {
        "available": True,
        "as_of": comp.as_of.strftime("%Y-%m-%d"),
        "n_actions": int(len(a)),
        "n_overdue": int(a["status"].eq("overdue").sum()),
        "n_soon": int(a["status"].eq("due soon").sum()),
        "kind_counts": [{"kind": k, "n": int(n)} for k, n in counts.items()],
        "actions_table": action_table(a, caption=f"Open actions as of {comp.as_of:%Y-%m-%d}, by due date"),
    }
    return [Page(slug="actions", title="Actions", template="actions.html", section="actions", in_nav=True,
                 context=context, charts=[kind_chart(a)] if len(a) else [])]
