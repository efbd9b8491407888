"""The programme page: enrolment, due audiograms, training, protector coverage, audiometer checks."""
from __future__ import annotations

import logging
from typing import Any

import pandas as pd

from .. import charts
from ..compliance import BOOTH_LIMITS
from ..hearing import LEFT_STATUS
from ..privacy import code_series
from . import figure_tiles
from .base import Chart, Page, SiteContext, Table

log = logging.getLogger(__name__)

SUPPRESSED = "suppressed"

KIND_LABELS = {"baseline": "baseline audiogram", "periodic": "annual audiogram", "exit": "exit audiogram",
               "training": "training"}
STATUS_LABELS = {"overdue": "overdue", "due_soon": "due soon", "open": "open", "late": "late",
                 "on_time": "on time", "done": "done", "current": "current", "scheduled": "scheduled",
                 "not_required": "not required"}
MISMATCH_LABELS = {"exposed_no_records": "exposed, no audiometry or training records",
                   "records_not_exposed": "records, but not judged exposed (information only)"}
#: rows of a per-person or per-item listing shown on a public page; counts, tiles and charts use every row
LIST_CAP = 200
#: where the rows left out of a capped listing can be found
IN_ACTIONS_CSV = "hcpsite export writes the full list to actions.csv"
IN_RESTRICTED = ("the counts above are complete and the full list is in the restricted build "
                 "(hcpsite build --restricted)")


def pct(value: Any) -> str:
    """Return a share 0..1 as a whole percentage ('88 %'), a dash when unknown."""
    if value is None or (isinstance(value, float) and pd.isna(value)):
        return charts.BLANK
    return f"{round(float(value) * 100):.0f} %"


def group_label(group: Any, suppressed: frozenset[str]) -> str:
    """Return the group code, or 'suppressed' for a small group."""
    return SUPPRESSED if str(group) in suppressed else str(group)


def coded(df: pd.DataFrame, ctx: SiteContext, column: str = "person_id") -> pd.Series:
    """Return the pseudonymous codes of a person-id column."""
    return code_series(df[column], ctx.code) if len(df) else pd.Series(dtype=object)


def cap_rows(df: pd.DataFrame, ctx: SiteContext, cap: int = LIST_CAP) -> pd.DataFrame:
    """Return the first *cap* rows of an already sorted listing (every row in a restricted build)."""
    return df if ctx.restricted else df.iloc[:cap]


def cap_caption(caption: str, shown: int, total: int, where: str) -> str:
    """Return *caption* followed by 'showing N of M; <where>' when a listing was cut."""
    if shown >= total:
        return caption
    return f"{caption}. Showing {shown:,} of {total:,}; {where}."


def person_table(df: pd.DataFrame, ctx: SiteContext, columns: dict[str, str],
                 formats: dict[str, Any] | None = None, caption: str = "", where: str = IN_RESTRICTED,
                 cap: int = LIST_CAP) -> Table:
    """Return a table of person rows with codes instead of ids and small groups suppressed.

    On a public page only the first *cap* rows of *df* (already sorted by what matters
    most) are listed; the caption then says how many there are and *where* the rest are.
    """
    d = cap_rows(df, ctx, cap).copy()
    caption = cap_caption(caption, len(d), len(df), where)
    d["code"] = coded(d, ctx)
    if "group" in d.columns:
        d["group"] = [group_label(g, ctx.suppressed_groups) for g in d["group"]]
    for c in ("status", "baseline_status"):
        if c in d.columns:
            d[c] = d[c].map(STATUS_LABELS).fillna(d[c])
    return charts.table_from_frame(d, {"code": "Person", **columns}, formats, caption=caption)


def enrolment_group_table(eg: pd.DataFrame, suppressed: frozenset[str]) -> Table:
    """Return enrolment counts per group (small groups suppressed)."""
    cols = ["n_in_scope", "n_must_enrol", "n_enrolled", "n_exposed_no_records", "n_records_not_exposed"]
    rows = []
    for g in eg.to_dict("records"):
        hidden = str(g["group"]) in suppressed
        rows.append([group_label(g["group"], suppressed)] + [SUPPRESSED if hidden else f"{int(g[c]):,}"
                                                             for c in cols])
    return Table(["Group", "People in scope", "Must be in the programme", "Enrolled", "Exposed without records",
                  "Records, not judged exposed"], rows, caption="Enrolment per similar exposure group",
                 classes=["", "num", "num", "num", "num", "num"])


def _tiles(ctx: SiteContext, summary: dict[str, Any]) -> list[dict[str, Any]]:
    """Return the page's tiles: the headline figures (generator/figures.py) and the items due soon."""
    def n(key: str) -> str:
        v = summary.get(key)
        return charts.BLANK if v is None else f"{int(v):,}"
    t = figure_tiles.tile
    return [
        t(ctx, "must_be_enrolled", label="Must be in the programme",
          note="at or above the action value, without protectors"),
        {"label": "Enrolled", "value": n("enrolled"), "note": "records, or in an exposed group"},
        t(ctx, "not_enrolled", label="Exposed without records", note=""),
        t(ctx, "current_audiogram_share", label="Current audiogram"),
        t(ctx, "trained_share", label="Trained within the interval"),
        t(ctx, "protector_share", label="Protector on record"),
        t(ctx, "fit_test_share", label="Fit-tested (PAR)"),
        t(ctx, "overdue_audiograms", label="Audiograms overdue", note="baseline, annual or exit"),
        {"label": "Audiograms due soon", "value": n("due_soon_audiograms"), "note": "within 60 days"},
        t(ctx, "overdue_training", label="Training overdue", note=""),
        t(ctx, "audiometer_days_ok_share", label="Test days with valid audiometer checks", note=None),
    ]


def training_chart(tg: pd.DataFrame, suppressed: frozenset[str], slug: str = "programme") -> Chart:
    """Return the bar chart of training completion per group (small groups suppressed)."""
    shown = tg[~tg["group"].astype(str).isin(sorted(suppressed))]
    fig = charts.bar(shown["group"], (shown["completion"] * 100).round(1), xaxis_title="similar exposure group",
                     yaxis_title="trained within 12 months, %", text=[pct(v) for v in shown["completion"]])
    fig.update_yaxes(range=[0, 105])
    rows = [[group_label(g["group"], suppressed),
             SUPPRESSED if str(g["group"]) in suppressed else f"{int(g['n_required'])}",
             SUPPRESSED if str(g["group"]) in suppressed else f"{int(g['n_trained'])}",
             SUPPRESSED if str(g["group"]) in suppressed else pct(g["completion"])]
            for g in tg.to_dict("records")]
    table = Table(["Group", "Must be trained", "Trained within 12 months", "Completion"], rows,
                  classes=["", "num", "num", "num"])
    if len(shown):
        low = shown.sort_values(["completion", "group"], kind="mergesort").iloc[0]
        total = _share_text(shown["n_trained"].sum(), shown["n_required"].sum())
        summary = (f"Across {len(shown)} groups {total} of the people in the programme were trained within "
                   f"the last 12 months; the lowest completion is {pct(low['completion'])} in group "
                   f"{low['group']}.")
    else:
        summary = "No group with people in the programme can be shown."
    return Chart(f"{slug}-1", fig, summary, table, title="People in the programme trained within the last 12 months, %, per similar exposure group")


def _share_text(num: float, den: float) -> str:
    return pct(num / den) if den else charts.BLANK


def protector_chart(pg: pd.DataFrame, suppressed: frozenset[str], slug: str = "programme") -> Chart:
    """Return the grouped bar of protector and fit-test coverage per group."""
    shown = pg[~pg["group"].astype(str).isin(sorted(suppressed))]
    fig = charts.grouped_bar(shown["group"], {
        "protector issued or fitted": (shown["protector_share"] * 100).round(1),
        "fit-tested (PAR on record)": (shown["fit_test_share"] * 100).round(1)},
        xaxis_title="similar exposure group", yaxis_title="share of people in the programme, %")
    fig.update_yaxes(range=[0, 105])
    rows = []
    for g in pg.to_dict("records"):
        hidden = str(g["group"]) in suppressed
        rows.append([group_label(g["group"], suppressed)] + ([SUPPRESSED] * 5 if hidden else [
            f"{int(g['n_required'])}", f"{int(g['n_with_protector'])}", pct(g["protector_share"]),
            f"{int(g['n_fit_tested'])}", pct(g["fit_test_share"])]))
    table = Table(["Group", "In the programme", "With protector", "Share", "Fit-tested", "Share"], rows,
                  classes=["", "num", "num", "num", "num", "num"])
    if len(shown):
        summary = (f"{_share_text(shown['n_with_protector'].sum(), shown['n_required'].sum())} of the people in "
                   f"the programme have a protector on record and "
                   f"{_share_text(shown['n_fit_tested'].sum(), shown['n_required'].sum())} have a fit test.")
    else:
        summary = "No group with people in the programme can be shown."
    return Chart(f"{slug}-2", fig, summary, table, title="People in the programme with a protector and with a fit test on record, %, "
                 "per similar exposure group")


def audiometer_chart(status: pd.DataFrame, slug: str = "programme") -> Chart | None:
    """Return the stacked bar of test days per audiometer with and without valid checks."""
    if status is None or status.empty:
        return None
    s = status.assign(audiometer_id=status["audiometer_id"].replace("", "not recorded"))
    g = s.groupby("audiometer_id", sort=True)["ok"].agg(["sum", "size"]).reset_index()
    g["not_ok"] = g["size"] - g["sum"]
    fig = charts.stacked_bar(g["audiometer_id"], {"all checks valid": g["sum"], "a check missing or failed":
                                                  g["not_ok"]}, xaxis_title="audiometer", yaxis_title="test days",
                             colours={k: charts.STATUS_COLOURS[k] for k in
                                      ("all checks valid", "a check missing or failed")})
    table = charts.table_from_frame(g.rename(columns={"sum": "ok_days", "size": "days"}),
                                    {"audiometer_id": "Audiometer", "days": "Test days",
                                     "ok_days": "All checks valid", "not_ok": "Check missing or failed"},
                                    {"days": "d", "ok_days": "d", "not_ok": "d"})
    named = g[g["audiometer_id"] != "not recorded"]
    unnamed = int(g.loc[g["audiometer_id"] == "not recorded", "size"].sum())
    summary = (f"In the review period, {int(named['sum'].sum())} of {int(named['size'].sum())} test days on "
               f"{len(named)} named audiometers had a functional check that day, calibrations in date and a booth "
               f"within App. D Table D-1."
               + (f" On {unnamed} further test day{'s' if unnamed != 1 else ''} no audiometer is recorded, so the "
                  "checks cannot be looked up." if unnamed else ""))
    return Chart(f"{slug}-3", fig, summary, table, title="Audiometric test days in the review period with valid audiometer checks, "
                 "number of test days per audiometer")


def build(ctx: SiteContext) -> list[Page]:
    """Return the programme page."""
    comp = ctx.results.compliance
    if comp is None:
        return [Page(slug="programme", title="Enrolment and duties", template="programme.html", section="programme",
                     in_nav=True, context={"available": False})]
    sup = ctx.suppressed_groups
    start = pd.Timestamp(ctx.programme.config.period.start)
    s = comp.people
    late = s[s["baseline_status"].eq("late")]
    due = comp.due.copy()
    due["kind"] = due["kind"].map(KIND_LABELS).fillna(due["kind"])
    enrol = comp.enrolment.copy()
    enrol["mismatch"] = enrol["mismatch"].map(MISMATCH_LABELS).fillna(enrol["mismatch"])
    meters = comp.audiometers.copy()
    if len(meters):
        meters["booth"] = [("within Table D-1" if ok else str(d)) for ok, d in zip(meters["booth_ok"],
                                                                                   meters["booth_detail"])]
    all_flagged = comp.audiograms_flagged
    flagged = all_flagged[pd.to_datetime(all_flagged["date"]) >= start].copy()
    # counted once per person and test date (audiograms.csv has a row per ear)
    earlier = all_flagged[pd.to_datetime(all_flagged["date"]) < start].drop_duplicates(["person_id", "date"])

    def no_meter(df: pd.DataFrame) -> pd.Series:
        return df["audiometer_id"].fillna("").astype(str).eq("")

    refits = comp.refits
    if len(refits):  # open ones, and those of shifts found in the period
        # a refit not due because the person left is shown only when its shift is in the period
        still_due = refits["done_date"].isna() & refits["status"].astype(str).ne(LEFT_STATUS)
        refits = refits[still_due | (pd.to_datetime(refits["trigger_date"]) >= start)]
        # open refits first (by due date), then the done ones of the period, latest shift first
        still_due = refits["done_date"].isna() & refits["status"].astype(str).ne(LEFT_STATUS)
        refits = refits.assign(_open=(~still_due).astype(int).to_numpy(),
                               _t=pd.to_datetime(refits["trigger_date"]))
        refits = refits.sort_values(["_open", "due_date", "_t"], ascending=[True, True, False], kind="mergesort")
        refits = refits.drop(columns=["_open", "_t"])
    flagged = flagged.sort_values("date", ascending=False, kind="mergesort")
    enrol_mm = comp.enrolment["mismatch"]
    exposed_no_records = enrol[enrol_mm.eq("exposed_no_records").to_numpy()]
    info = enrol[enrol_mm.eq("records_not_exposed").to_numpy()]
    page_charts = [training_chart(comp.training_groups, sup), protector_chart(comp.protector_groups, sup)]
    st = comp.audiometer_status
    ac = audiometer_chart(st[pd.to_datetime(st["date"]) >= start] if len(st) else st)
    if ac is not None:
        page_charts.append(ac)
    overdue = due[due["status"].eq("overdue")]
    soon = due[due["status"].eq("due_soon")]
    context = {
        "available": True,
        "as_of": comp.as_of.strftime("%Y-%m-%d"),
        "rules_name": ctx.headline.name,
        "tiles": _tiles(ctx, comp.summary),
        "notes": list(comp.notes),
        "n_overdue": int(len(overdue)),
        "n_soon": int(len(soon)),
        "enrolment_groups_table": enrolment_group_table(comp.enrolment_groups, sup),
        "enrolment_table": person_table(exposed_no_records, ctx, {"group": "Group"},
                                        caption="Exposed at or above the action value, without audiometry or "
                                                "training records",
                                        where="the counts per group above are complete; hcpsite export writes "
                                              "the open enrolment items to actions.csv"),
        "info_table": person_table(info, ctx, {"group": "Group"},
                                   caption="With records, but not judged exposed (information only)",
                                   where="the counts per group above are complete and the full list is in the "
                                         "restricted build (hcpsite build --restricted)"),
        "n_info": int(len(info)),
        "overdue_table": person_table(overdue, ctx, {"group": "Group", "kind": "Due", "due_date": "Due date",
                                                     "clause": "Clause"},
                                      caption=f"Overdue at {comp.as_of:%Y-%m-%d}, oldest due date first",
                                      where=IN_ACTIONS_CSV),
        "soon_table": person_table(soon, ctx, {"group": "Group", "kind": "Due", "due_date": "Due date",
                                               "clause": "Clause"},
                                   caption="Due within the next 60 days, earliest first", where=IN_ACTIONS_CSV),
        "late_table": person_table(late, ctx, {"group": "Group", "first_exposed_date": "First exposure",
                                               "baseline_due": "Baseline due by",
                                               "first_audiogram": "First audiogram"},
                                   caption="Baselines taken after the time limit (information)"),
        "n_late": int(len(late)),
        "refit_table": person_table(refits, ctx, {"ear": "Ear", "trigger_date": "Shift found",
                                                  "due_date": "Due", "done_date": "Done", "status": "Status",
                                                  "clause": "Clause"},
                                    caption="Protector refits after a standard threshold shift: open ones (by due "
                                            "date) first, then those of shifts found in the period",
                                    where="hcpsite export writes the open ones to actions.csv and the full list "
                                          "is in the restricted build (hcpsite build --restricted)"),
        "audiometer_table": charts.table_from_frame(meters, {
            "audiometer_id": "Audiometer", "last_used": "Last used", "last_functional": "Last functional check",
            "last_acoustic": "Last acoustic calibration", "acoustic_due": "Acoustic due",
            "last_exhaustive": "Last exhaustive calibration", "exhaustive_due": "Exhaustive due",
            "last_booth": "Last booth measurement", "booth": "Booth"},
            caption="Audiometers: latest checks and next calibrations") if len(meters) else None,
        "flagged_table": person_table(flagged, ctx, {"date": "Test date", "ear": "Ear",
                                                     "audiometer_id": "Audiometer", "reason": "Why flagged"},
                                      caption="Audiograms of the review period taken without valid checks or "
                                              "in a booth over the limits, latest first",
                                      where="the counts below are complete; hcpsite export writes one item per "
                                            "person and test date to actions.csv"),
        "n_flagged": int(len(flagged)),
        # "no audiometer recorded" (older records) is told apart from "audiometer named but
        # no valid check that day"
        "n_flagged_no_meter": int(no_meter(flagged.drop_duplicates(["person_id", "date"])).sum()),
        "n_flagged_tests": int(len(flagged.drop_duplicates(["person_id", "date"]))),
        "n_flagged_before": int(len(earlier)),
        "n_before_no_meter": int(no_meter(earlier).sum()),
        "n_before_invalid": int((~no_meter(earlier)).sum()),
        "period_start": start.strftime("%Y-%m-%d"),
        "booth_limits": [{"band": f, "limit": v} for f, v in sorted(BOOTH_LIMITS.items())],
    }
    return [Page(slug="programme", title="Enrolment and duties", template="programme.html", section="programme",
                 in_nav=True, context=context, charts=page_charts)]


