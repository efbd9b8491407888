"""The actions page: every open action of every stage in one list, overdue first by due date."""
from __future__ import annotations

import logging

import pandas as pd

from .. import charts
from ..privacy import SUPPRESSED, WITHHELD_DETAIL, WITHHELD_KIND
from .base import Chart, Page, SiteContext, Table
from .programme import IN_ACTIONS_CSV, LIST_CAP, cap_caption, cap_rows

log = logging.getLogger(__name__)

STATUS_LABELS = {"overdue": "overdue", "due_soon": "due soon", "open": "open"}
SOURCE_LABELS = {"compliance": "enrolment and duties", "exposure": "exposure", "protection": "protection",
                 "hearing": "hearing"}
#: the kinds of action in words where the code alone would not say what is to be done
KIND_WORDS = {"protector": "no protector on record", "audiogram conditions": "no valid audiometer check on the test day"}
#: listing order of the statuses (overdue first); any other status comes after these
STATUS_ORDER = ("overdue", "due_soon", "open")
#: actions the printable review lists (the most urgent ones; the counts are complete)
PRINT_TOP = 50


def label_actions(actions: pd.DataFrame) -> pd.DataFrame:
    """Return the action list with status, section and kind as the page words them (no redaction)."""
    a = actions.copy()
    a["status"] = a["status"].map(STATUS_LABELS).fillna(a["status"])
    a["source"] = a["source"].map(SOURCE_LABELS).fillna(a["source"])
    a["kind_label"] = kind_words(a["kind"])
    return a


def kind_words(kinds: pd.Series) -> pd.Series:
    """Return the kinds of action as the pages word them."""
    k = kinds.astype(str)
    return k.map(KIND_WORDS).fillna(k.str.replace("_", " ", regex=False))


def withhold_small_groups(a: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the labelled actions with those about a withheld group reduced to 'withheld' (kind, text, clause)."""
    hide = a["subject_type"].astype(str).eq("group") & a["subject"].astype(str).map(ctx.sup.hides_group)
    if not hide.any():
        return a
    a = a.copy()
    a.loc[hide, "subject"] = SUPPRESSED
    a.loc[hide, "kind"] = WITHHELD_KIND
    a.loc[hide, "kind_label"] = WITHHELD_KIND
    a.loc[hide, "detail"] = WITHHELD_DETAIL.format(n=ctx.sup.min_size)
    a.loc[hide, "clause"] = ""
    return a


def page_actions(actions: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the action list as the page and the export show it: labelled, small groups withheld, urgent first."""
    return urgent_first(withhold_small_groups(label_actions(actions), ctx))


def export_actions(actions: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the rows of actions.csv: the page's rows in the page's order, with its words.

    Columns: subject, kind, detail, due_date, status, clause, section (subject_type is kept
    for the pseudonyms and dropped before writing).
    """
    a = page_actions(actions, ctx)
    out = pd.DataFrame({"subject": a["subject"].astype(str).to_numpy(), "kind": a["kind_label"].to_numpy(),
                        "detail": a["detail"].astype(str).to_numpy(),
                        "due_date": pd.to_datetime(a["due_date"]).to_numpy(),
                        "status": a["status"].astype(str).to_numpy(), "clause": a["clause"].astype(str).to_numpy(),
                        "section": a["source"].astype(str).to_numpy(),
                        "subject_type": a["subject_type"].astype(str).to_numpy()})
    return out


def urgent_first(actions: pd.DataFrame) -> pd.DataFrame:
    """Return the actions overdue first, then due soon, then open, each by due date (blank last)."""
    order_of = {s: i for i, s in enumerate(STATUS_ORDER)}
    order_of.update({STATUS_LABELS[s]: i for i, s in enumerate(STATUS_ORDER)})
    rank = actions["status"].map(order_of).fillna(len(STATUS_ORDER))
    due = pd.to_datetime(actions["due_date"], errors="coerce")
    order = pd.DataFrame({"rank": rank.to_numpy(), "due": due.to_numpy(), "pos": range(len(actions))})
    order = order.sort_values(["rank", "due", "pos"], kind="mergesort", na_position="last")
    return actions.iloc[order["pos"].to_numpy()]


def public_actions(actions: pd.DataFrame, ctx: SiteContext) -> pd.DataFrame:
    """Return the (already labelled) action list with person subjects coded and ids or names in the text withheld."""
    a = actions.copy()
    person = a["subject_type"].astype(str).eq("person")
    a["subject_shown"] = [ctx.code(s) if p else str(s) for s, p in zip(a["subject"], person)]
    a["detail"] = [ctx.redact(str(d)) for d in a["detail"]]
    return a


def action_table(a: pd.DataFrame, caption: str = "") -> Table:
    """Return the table of (already public) actions."""
    return charts.table_from_frame(a, {"due_date": "Due", "status": "Status", "subject_shown": "Subject",
                                       "kind_label": "Kind", "detail": "Detail",
                                       "clause": "Clause", "source": "Section"}, caption=caption)


def listings(actions: pd.DataFrame, ctx: SiteContext, caption: str, print_caption: str) -> tuple[Table, Table]:
    """Return the page's listing (LIST_CAP most urgent; all in a restricted build) and the PRINT_TOP one.

    Both captions say how many actions there are and where the full list is; only the
    listed rows are coded and redacted.
    """
    ordered = page_actions(actions, ctx)
    shown = public_actions(cap_rows(ordered, ctx, max(LIST_CAP, PRINT_TOP)), ctx)
    top = shown.iloc[:PRINT_TOP]
    return (action_table(shown, cap_caption(caption, len(shown), len(ordered), IN_ACTIONS_CSV)),
            action_table(top, cap_caption(print_caption, len(top), len(ordered), IN_ACTIONS_CSV)))


def kind_chart(a: pd.DataFrame, slug: str = "actions") -> Chart:
    """Return the bar chart of open actions per kind, split into overdue and other."""
    kinds = sorted(a["kind_label"].unique())
    over = a[a["status"].eq("overdue")]["kind_label"].value_counts()
    rest = a[~a["status"].eq("overdue")]["kind_label"].value_counts()
    series = {"overdue": [int(over.get(k, 0)) for k in kinds], "due soon or open": [int(rest.get(k, 0))
                                                                                  for k in kinds]}
    height = max(260, 60 + 30 * len(kinds))
    fig = charts.stacked_bar(kinds, series, horizontal=True, xaxis_title="actions", height=height,
                             colours={k: charts.STATUS_COLOURS[k] for k in ("overdue", "due soon or open")})
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
    return Chart(f"{slug}-1", fig, summary, table, height=height, title="Open actions by kind and status (overdue; due soon or open), number of actions")


def build(ctx: SiteContext) -> list[Page]:
    """Return the actions page."""
    comp = ctx.results.compliance
    if comp is None:
        return [Page(slug="actions", title="Actions", template="actions.html", section="actions", in_nav=True,
                     context={"available": False})]
    labelled = withhold_small_groups(label_actions(comp.actions), ctx)
    counts = labelled.groupby("kind_label", sort=True).size()
    as_of = f"{comp.as_of:%Y-%m-%d}"
    listing, top = listings(comp.actions, ctx, f"Open actions as of {as_of}: overdue first, then due soon, then "
                            "open, each by due date", f"The most urgent open actions as of {as_of}")
    context = {
        "available": True,
        "as_of": as_of,
        # the headline figures (generator/figures.py): the same numbers as on the overview
        "n_actions": int(ctx.results.figures["open_actions"].value or 0),
        "n_overdue": int(ctx.results.figures["overdue_actions"].value or 0),
        "n_soon": int(labelled["status"].eq("due soon").sum()),
        "kind_counts": [{"kind": k, "n": int(n)} for k, n in counts.items()],
        "actions_table": listing,
        # the printable review lists the most urgent ones only (its own key, left out of the screen page)
        "print_actions_table": top,
    }
    return [Page(slug="actions", title="Actions", template="actions.html", section="actions", in_nav=True,
                 context=context, charts=[kind_chart(labelled)] if len(labelled) else [])]
