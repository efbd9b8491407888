"""The exposure pages: overview, one page per similar exposure group, and the noise map."""
from __future__ import annotations

from collections.abc import Mapping

import logging
from typing import Any

import numpy as np
import pandas as pd

from .. import charts
from .. import levels as lv
from ..exposure import BASIS_LABELS, PARAMETERS, ExposureResult, LogHistories, action_value, band_names
from ..privacy import WITHHELD_DETAIL, WITHHELD_KIND
from . import figure_tiles
from .base import Chart, Page, SiteContext, Table, group_slugs

log = logging.getLogger(__name__)

SUPPRESSED = "suppressed"
SECTION = "exposure"
BASIS_TEXT = {
    "log": "logged time history (exact dose for every rule set)",
    "dosimeter": "dose/TWA reported by the dosimeter (other doses: estimate from LAeq)",
    "steady_level": "estimate from LAeq: LAeq and run time only, the level assumed steady, no threshold "
                    "(3-dB figures exact)",
}
#: the measurement strategies of ISO 9612:2009 in words
STRATEGY_WORDS = {"job": "job-based", "task": "task-based", "full_day": "full-day", "none": "no measurement"}
MAP_NOTE = "interpolated, for orientation only"
#: rows of a group's measurement table (the most recent ones); the export has them all
MEASUREMENT_ROWS = 100
#: time-history charts per group page (the logged measurements with the highest headline dose)
HISTORY_CHARTS = 4
#: points per time-history chart at most (energy means of consecutive logged intervals)
HISTORY_POINTS = 300
#: rows of the list of the other logged measurements of a group (highest dose first)
LOG_ROWS = 100
#: rows of the overview's weekly, action and warning tables at most
OVERVIEW_ROWS = 200


def _num(v: Any, digits: int = 1) -> str:
    if v is None or v is pd.NaT or (isinstance(v, (float, np.floating)) and np.isnan(v)):
        return charts.BLANK
    return f"{float(v):.{digits}f}"


def _list(values: pd.Series) -> list[float | None]:
    """Return floats rounded to 0.01 dB, None where missing (for plotly traces)."""
    return [None if np.isnan(v) else round(float(v), 2) for v in values.to_numpy(dtype=float)]


def _chart_id(slug: str, n: int) -> str:
    return f"{slug.replace('/', '-')}-{n}"


#: the trade's name of each value of a rule set (lower action, upper action, limit value), by its short name
VALUE_WORDS: dict[str, tuple[str, str, str]] = {
    "OSHA": ("lower action value", "action level", "PEL"),
    "NIOSH": ("lower action value", "action value", "REL"),
    "EU": ("lower exposure action value", "upper exposure action value", "exposure limit value"),
}
DEFAULT_VALUE_WORDS = ("lower action value", "upper action value", "limit value")


def value_words(rule: Any) -> tuple[str, str, str]:
    """Return the names of the lower action, upper action and limit value of *rule*."""
    return VALUE_WORDS.get(rule.short, DEFAULT_VALUE_WORDS)


def value_name(rule: Any, level: float | None) -> str:
    """Return the trade's name of *level* in *rule* ("PEL", "upper exposure action value" ...), or "" if none."""
    lower, upper, limit = value_words(rule)
    for value, word in ((rule.limit_value, limit), (rule.upper_action_value, upper), (rule.lower_action_value, lower)):
        if value is not None and level is not None and float(value) == float(level):
            return word
    return ""


def _reference_values(rule: Any) -> dict[str, float | None]:
    """Return the rule set's action and limit values, each labelled with its name, value and unit."""
    lower, upper, limit = value_words(rule)
    vals: dict[str, float | None] = {}
    if rule.lower_action_value is not None:
        vals[f"{rule.short} {lower} {rule.lower_action_value:g} dB(A)"] = rule.lower_action_value
    if rule.upper_action_value is not None and rule.upper_action_value != rule.limit_value:
        vals[f"{rule.short} {upper} {rule.upper_action_value:g} dB(A)"] = rule.upper_action_value
    if rule.limit_value is not None:
        vals[f"{rule.short} {limit} {rule.limit_value:g} dB(A)"] = rule.limit_value
    return vals


def lex_rule(ctx: SiteContext) -> Any:
    """Return the rule set judged on LEX,8h (the headline one first), or None when no rule set is."""
    ordered = [ctx.headline] + [r for r in ctx.rules.values() if r.id != ctx.headline.id]
    return next((r for r in ordered if r.metric == "lex"), None)


def _hlines(fig: charts.Figure, values: Mapping[str, float | None]) -> charts.Figure:
    """Add labelled dashed horizontal lines at *values* in one layout update (cheaper than add_hline)."""
    shapes, notes = [], []
    for i, (label, y) in enumerate(sorted(values.items(), key=lambda kv: (kv[1] is None, kv[1] or 0.0, kv[0]))):
        if y is None:
            continue
        shapes.append(dict(type="line", xref="paper", x0=0, x1=1, yref="y", y0=float(y), y1=float(y),
                           line=dict(color=charts.REFERENCE_COLOUR, dash="dash", width=1)))
        # labels alternate left and right so that close values stay readable
        notes.append(dict(xref="paper", x=float(i % 2), xanchor="right" if i % 2 else "left", yref="y", y=float(y),
                          yanchor="bottom",
                          text=label, showarrow=False, font=dict(color=charts.REFERENCE_COLOUR, size=11)))
    fig.update_layout(shapes=shapes, annotations=notes)
    return fig


def _judged_band_col(rule: Any) -> str:
    return f"band_upper_{rule.id}" if rule.judge_with_uncertainty else f"band_{rule.id}"


# ---------------------------------------------------------------------------------------
# overview


def distribution_chart(res: ExposureResult, ctx: SiteContext) -> Chart:
    """Return per group the spread of measured LEX,8h (quartiles) with the group LEX,8h.

    The reference lines are those of the rule set judged on LEX,8h (none when no rule set
    is); the bar of U is drawn only when that rule set judges on LEX,8h + U.
    """
    head = ctx.headline
    ref = lex_rule(ctx)
    with_u = ref is not None and bool(ref.judge_with_uncertainty)
    g = res.groups[~res.groups["group"].isin(sorted(ctx.suppressed_groups))]
    g = g[g["lex_8h"].notna()]
    m = res.measurements
    m = m[(m["kind"] == "personal") & m["group"].isin(g["group"]) & m["lex_8h"].notna()]
    stats = m.groupby("group")["lex_8h"].describe()
    fig = charts.Figure()
    if len(stats):
        st = stats.reindex(g["group"]).dropna(subset=["count"])
        fig.add_trace(charts.trace("box", x=list(st.index), q1=st["25%"].tolist(), median=st["50%"].tolist(),
                                   q3=st["75%"].tolist(), lowerfence=st["min"].tolist(),
                                   upperfence=st["max"].tolist(), name="measurements (LEX,8h)", boxpoints=False,
                                   marker=dict(color=charts.category_colour(6))))
    point: dict[str, Any] = dict(x=g["group"].tolist(), y=_list(g["lex_8h"]), mode="markers",
                                 marker=dict(size=10, color=charts.category_colour(0)))
    if with_u:
        point.update(name="group LEX,8h, bar up to LEX,8h + U",
                     error_y=dict(type="data", symmetric=False, array=_list(g["u_expanded"]),
                                  arrayminus=[0.0] * len(g), color=charts.category_colour(0)))
    else:
        point.update(name="group LEX,8h")
    fig.add_trace(charts.trace("scatter", **point))
    charts.base_layout(fig, None, 440, "similar exposure group", "LEX,8h, dB(A)")
    if ref is not None:
        _hlines(fig, _reference_values(ref))
    rows = []
    for r in res.groups.itertuples(index=False):
        if r.group in ctx.suppressed_groups:
            rows.append([r.group, SUPPRESSED, SUPPRESSED, SUPPRESSED, SUPPRESSED, SUPPRESSED])
            continue
        rows.append([r.group, str(int(r.n_samples)), _num(r.lex_8h), _num(r.u_expanded), _num(r.lex_8h_upper),
                     r.band or charts.BLANK])
    table = Table(columns=["Group", "Samples", "LEX,8h, dB(A)", "U, dB", "LEX,8h + U, dB(A)",
                           f"Exposure category ({head.short})"], rows=rows,
                  caption="Group LEX,8h with its expanded uncertainty (ISO 9612, k = 1.65)",
                  classes=["", "num", "num", "num", "num", ""])
    n_exp = int(g["exposed"].sum())
    judged = "LEX,8h + U" if head.judge_with_uncertainty else ("LEX,8h" if head.metric == "lex" else "8-h TWA")
    summary = (f"Boxes show the spread of the measured LEX,8h of {len(g)} group{'s' if len(g) != 1 else ''}, points "
               "the group value" + (" with its uncertainty bar" if with_u else "")
               + (f"; dashed lines are the {ref.short} values for LEX,8h" if ref is not None else "")
               + f". Judged on {judged} under {head.short}, {n_exp} of them are at or above the "
               f"{value_name(head, action_value(head)) or 'action value'} of {action_value(head):g} dB(A).")
    lines = (f"; lines: {ref.name}" + (", judged on LEX,8h + U" if with_u else "")) if ref is not None else ""
    title = f"Daily noise exposure level LEX,8h (ISO 9612), dB(A), per similar exposure group{lines}"
    return Chart(id="exposure-1", figure=fig, summary=summary, table=table, title=title)


def band_counts(res: ExposureResult, ctx: SiteContext) -> tuple[Chart, Table]:
    """Return the chart and table of groups and people per exposure category for every rule set, side by side."""
    g = res.groups[~res.groups["group"].isin(sorted(ctx.suppressed_groups))]
    xr, xb, ys, rows = [], [], [], []
    fig = charts.Figure()
    for i, (rid, rule) in enumerate(ctx.rules.items()):
        col = _judged_band_col(rule)
        names = band_names(rule)
        people = [int(g.loc[g[col] == b, "n_people"].sum()) for b in names]
        groups = [int((g[col] == b).sum()) for b in names]
        plain = [int((g[f"band_{rid}"] == b).sum()) for b in names]
        fig.add_trace(charts.trace("bar", x=[[rule.short] * len(names), names], y=people, name=rule.short,
                                   marker=dict(color=charts.rule_colour(rule.short, i))))
        how = _judged_on(rule)
        for b, n_g, n_p, n_plain in zip(names, groups, people, plain):
            rows.append([rule.short, how, b, str(n_g), str(n_p), str(n_plain)])
        xr.extend([rule.short] * len(names))
        xb.extend(names)
        ys.extend(people)
    charts.base_layout(fig, None, 420, "rule set and exposure category, dB(A)", "people in the groups")
    table = Table(columns=["Rule set", "Judged on", "Exposure category, dB(A)", "Groups", "People in them",
                           "Groups judged on the level alone"], rows=rows,
                  caption="Groups and their people per exposure category, for every rule set (suppressed groups left out)",
                  classes=["", "", "", "num", "num", "num"])
    head = ctx.headline
    hc = _judged_band_col(head)
    top = band_names(head)[-1]
    n_top = int(g.loc[g[hc] == top, "n_people"].sum())
    summary = (f"Under {head.short}, {n_top} people in scope work in groups whose group level is in the category "
               f"'{top}' dB(A); judged on their own measurements where they have them, else their group's, "
               f"{figure_tiles.text(ctx, 'exposed_top_band')} people in scope are in it (the tile above). The same "
               f"groups are shown under {', '.join(r.short for r in list(ctx.rules.values())[1:]) or 'no other rule set'}"
               " for comparison.")
    metrics = ", ".join(f"{r.short} {_judged_on(r)}" for r in ctx.rules.values())
    title = f"People per exposure category of their group, dB(A), under every rule set ({metrics})"
    return Chart(id="exposure-2", figure=fig, summary=summary, table=table, title=title), table


def _judged_on(rule: Any) -> str:
    """Return what *rule* judges a group on, e.g. "LEX,8h + U" or "8-h TWA"."""
    metric = "LEX,8h" if rule.metric == "lex" else f"8-h TWA ({rule.exchange_rate:g}-dB rule)"
    return f"{metric} + U" if rule.judge_with_uncertainty else metric


def groups_table(res: ExposureResult, ctx: SiteContext, slugs: dict[str, str]) -> Table:
    """Return the groups with their figures under every rule set (links to group pages by slug)."""
    cols = ["Group", "Name", "People", "Strategy", "Samples", "LEX,8h", "U", "OSHA TWA", "NIOSH TWA",
            "Max LCpeak"]
    for rule in ctx.rules.values():
        cols.append(f"{rule.short} on value")
        cols.append(f"{rule.short} on value + U")
    rows = []
    for _, r in res.groups.iterrows():
        if r["group"] in ctx.suppressed_groups:
            rows.append([r["group"], r["name"]] + [SUPPRESSED] * (len(cols) - 2))
            continue
        row = [r["group"], r["name"], str(int(r["n_people"])), STRATEGY_WORDS.get(r["strategy"], r["strategy"]),
               str(int(r["n_samples"])),
               _num(r["lex_8h"]), _num(r["u_expanded"]), _num(r["osha_twa"]), _num(r["niosh_twa"]),
               _num(r["max_lcpeak"])]
        for rid in ctx.rules:
            row.append(r[f"band_{rid}"] or charts.BLANK)
            row.append(r[f"band_upper_{rid}"] or charts.BLANK)
        rows.append(row)
    return Table(columns=cols, rows=rows, caption="Group figures (levels in dB(A), peaks in dB(C)); the exposure category of each rule set, "
                 "judged on the value and on the value plus its uncertainty U",
                 classes=["", "", "num", "", "num", "num", "num", "num", "num", "num"] + [""] * (2 * len(ctx.rules)))


def coverage_table(res: ExposureResult) -> Table:
    """Return the groups with no measurement or only old ones."""
    g = res.groups[res.groups["stale"]]
    rows = [[r.group, r.name, r.last_measured.strftime("%Y-%m-%d") if not pd.isna(r.last_measured) else "never",
             STRATEGY_WORDS.get(r.strategy, r.strategy)] for r in g.itertuples(index=False)]
    return Table(columns=["Group", "Name", "Latest measurement", "Strategy"], rows=rows,
                 caption="Groups with no measurement, or none recent enough", classes=["", "", "", ""])


def basis_table(res: ExposureResult) -> Table:
    """Return how many measurements rest on each basis."""
    counts = res.measurements["basis"].value_counts()
    rows = [[BASIS_LABELS[b], BASIS_TEXT[b], str(int(counts.get(b, 0)))] for b in ("log", "dosimeter", "steady_level")]
    return Table(columns=["Basis", "Meaning", "Measurements"], rows=rows,
                 caption="What each measurement's dose rests on", classes=["", "", "num"])


def weekly_table(res: ExposureResult, ctx: SiteContext, n: int = OVERVIEW_ROWS) -> Table:
    """Return weekly LEX,w by pseudonymous code (suppressed groups hidden; the *n* highest when there are more)."""
    w = res.weekly[~res.weekly["group"].isin(sorted(ctx.suppressed_groups))]
    caption = "Weekly noise exposure level LEX,w (days not measured count as no exposure)"
    if len(w) > n:
        caption += f"; the {n:,} highest of {len(w):,} person-weeks"
        w = w.sort_values(["lex_w", "week_start"], ascending=False, kind="stable").head(n)
    rows = []
    for r in w.itertuples(index=False):
        rows.append([ctx.code(r.person_id), r.group, r.week_start.strftime("%Y-%m-%d"), str(int(r.n_days)),
                     _num(r.max_daily_lex), _num(r.lex_w), "yes" if r.complete else "no"])
    return Table(columns=["Person", "Group", "Week from", "Days measured", "Highest daily LEX,8h", "LEX,w",
                          "All working days measured"], rows=rows,
                 caption=caption,
                 classes=["", "", "", "num", "num", "num", ""])


def actions_table(res: ExposureResult, ctx: SiteContext, redact: Any = str, n: int = OVERVIEW_ROWS) -> Table:
    """Return the first *n* exposure actions (group subjects; person subjects by code)."""
    rows = []
    caption = "Exposure actions"
    if len(res.actions) > n:
        caption += f" (the first {n:,} of {len(res.actions):,}; hcpsite export writes all of them to actions.csv)"
    for r in res.actions.head(n).itertuples(index=False):
        subj = ctx.code(r.subject) if r.subject_type == "person" else str(r.subject)
        due = r.due_date.strftime("%Y-%m-%d") if not pd.isna(r.due_date) else charts.BLANK
        if r.subject_type == "group" and ctx.sup.hides_group(r.subject):
            rows.append([SUPPRESSED, WITHHELD_KIND, WITHHELD_DETAIL.format(n=ctx.sup.min_size), due, ""])
            continue
        rows.append([subj, r.kind, redact(r.detail), due, r.clause])
    return Table(columns=["Subject", "Action", "Detail", "Due", "Clause"], rows=rows,
                 caption=caption, classes=["", "", "", "", ""])


def findings_table(res: ExposureResult, suppressed: frozenset[str] = frozenset(), redact: Any = str,
                   n: int = OVERVIEW_ROWS) -> Table:
    """Return the first *n* sampling and data warnings of the exposure stage (none about suppressed groups)."""
    hidden = tuple(f"group {g}{sep}" for g in sorted(suppressed) for sep in (":", ","))
    shown = [f for f in res.findings if not f.message.startswith(hidden)]
    caption = "Warnings about the exposure data"
    if len(shown) > n:
        caption += f" (the first {n:,} of {len(shown):,}; hcpsite check lists all of them)"
    rows = [[redact(f.path), "" if f.row is None else str(f.row), redact(f.message)] for f in shown[:n]]
    return Table(columns=["File", "Row", "Warning"], rows=rows, caption=caption,
                 classes=["", "num", ""])


# ---------------------------------------------------------------------------------------
# group pages


def recent_measurements(m: pd.DataFrame, n: int = MEASUREMENT_ROWS) -> pd.DataFrame:
    """Return the *n* most recent measurements of *m*, newest first."""
    # the order is found on the two keys alone; only the rows shown are taken from the wide frame
    keys = m[["date", "measurement_id"]].reset_index(drop=True)
    order = keys.sort_values(["date", "measurement_id"], ascending=False, kind="stable").index.to_numpy()
    return m.iloc[order[:n]]


def measurement_table(m: pd.DataFrame, ctx: SiteContext, redact: Any = str, n: int = MEASUREMENT_ROWS) -> Table:
    """Return the *n* most recent measurements of one group with person codes (never raw ids)."""
    hid = ctx.headline.id
    rows = []
    cols = ["date", "measurement_id", "person_id", "kind", "location", "duration_h", "laeq", "lex_8h",
            "osha_dose_pct", "osha_twa", "niosh_dose_pct", "niosh_twa", "lcpeak", "basis", f"band_{hid}"]
    shown = recent_measurements(m, n)
    for (date, mid, pid, kind, loc, dur, laeq, lex, od, ot, nd, nt, pk, basis, band) in \
            shown[cols].itertuples(index=False, name=None):
        who = ctx.code(pid) if pid else "area"
        rows.append([date.strftime("%Y-%m-%d"), redact(mid), who, kind, redact(loc) or charts.BLANK, _num(dur, 2), _num(laeq),
                     _num(lex), _num(od, 0), _num(ot), _num(nd, 0), _num(nt), _num(pk),
                     BASIS_LABELS.get(basis, basis),
                     band or charts.BLANK])
    which = (f"the {len(shown):,} most recent of {len(m):,}, newest first" if len(shown) < len(m)
             else f"all {len(m):,}, newest first")
    return Table(columns=["Date", "Measurement", "Person", "Kind", "Location", "Run, h", "LAeq", "LEX,8h",
                          "OSHA dose, %", "OSHA TWA", "NIOSH dose, %", "NIOSH TWA", "LCpeak", "Basis",
                          f"Exposure category ({ctx.headline.short})"], rows=rows,
                 caption=f"Measurements of this group, {which} (levels in dB(A), peaks in dB(C); the dose "
                         "counts the run time, LEX,8h the shift)",
                 classes=["", "", "", "", "", "num", "num", "num", "num", "num", "num", "num", "num", "", ""])


def yearly_table(m: pd.DataFrame, ctx: SiteContext) -> Table:
    """Return per calendar year the measurements of one group: counts, LEX,8h spread, share at the action value."""
    head = ctx.headline
    av = action_value(head)
    personal = m["kind"].eq("personal").to_numpy() & m["lex_8h"].notna().to_numpy()
    lex = m["lex_8h"].to_numpy(dtype=float)
    judged = m[f"level_{head.id}"].to_numpy(dtype=float)
    df = pd.DataFrame({"year": m["date"].dt.year.to_numpy(), "one": 1, "personal": personal.astype(int),
                       "e": np.where(personal, lv.energy(np.where(personal, lex, 0.0)), 0.0),
                       "lex": np.where(personal, lex, np.nan),
                       "over": (personal & (judged >= av)).astype(int)})
    a = df.groupby("year", sort=True).agg(n=("one", "sum"), n_p=("personal", "sum"), e=("e", "sum"),
                                          lo=("lex", "min"), hi=("lex", "max"), over=("over", "sum"))
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(a["n_p"] > 0, lv.level(a["e"] / a["n_p"].where(a["n_p"] > 0, 1)), np.nan)
        share = np.where(a["n_p"] > 0, 100.0 * a["over"] / a["n_p"].where(a["n_p"] > 0, 1), np.nan)
    rows = [[str(int(y)), f"{int(n):,}", f"{int(n_p):,}", _num(mu), _num(lo), _num(hi), _num(sh, 0)]
            for y, n, n_p, mu, lo, hi, sh in zip(a.index, a["n"], a["n_p"], mean, a["lo"], a["hi"], share)]
    how = "LEX,8h" if head.metric == "lex" else "shift TWA"
    return Table(columns=["Year", "Measurements", "Personal", "Energy mean LEX,8h, dB(A)", "Lowest LEX,8h",
                          "Highest LEX,8h", f"At or above {av:g} dB(A), %"], rows=rows,
                 caption=(f"All measurements per year: LEX,8h over the personal ones; the share compares "
                          f"each one's {how} with the {head.short} action value"),
                 classes=["", "num", "num", "num", "num", "num", "num"])


def logged_table(m: pd.DataFrame, lmax: pd.Series, ctx: SiteContext, redact: Any = str) -> Table:
    """Return logged measurements of one group in a compact list: LAeq, dose per rule set, highest interval."""
    cols = ["Measurement", "Date", "Person", "LAeq, dB(A)"] + [f"{r.short} dose, %" for r in ctx.rules.values()] \
        + ["Highest interval, dB(A)"]
    doses = [m[f"dose_{rid}"].to_numpy(dtype=float) for rid in ctx.rules]
    rows = []
    for i, (mid, date, pid, laeq) in enumerate(m[["measurement_id", "date", "person_id", "laeq"]]
                                               .itertuples(index=False, name=None)):
        rows.append([redact(mid), date.strftime("%Y-%m-%d"), ctx.code(pid) if pid else "area", _num(laeq)]
                    + [_num(d[i], 0) for d in doses] + [_num(lmax.get(mid, np.nan))])
    return Table(columns=cols, rows=rows, caption="Other logged measurements of this group (highest dose first)",
                 classes=["", "", "", "num"] + ["num"] * len(doses) + ["num"])


def task_table(t: pd.DataFrame) -> Table:
    """Return the task breakdown with each task's share of the daily dose."""
    df = t.assign(share_pct=t["share_of_dose"] * 100)
    cols = {"task": "Task", "n_samples": "Samples", "lp_aeq": "Lp,A,eqT,m, dB(A)", "t_mean_h": "Mean duration, h",
            "lex_8h_m": "LEX,8h,m, dB(A)", "share_pct": "Share of daily dose, %", "u1a": "u1a, dB",
            "c1a": "c1a", "c1b": "c1b, dB/h", "u1b": "u1b, h", "spread_db": "Sample spread, dB"}
    return charts.table_from_frame(df, cols, {"n_samples": "d", "t_mean_h": ".2f", "share_pct": ".0f",
                                              "c1a": ".3f", "c1b": ".3f", "u1b": ".2f"},
                                   caption="Task-based breakdown (ISO 9612:2009 Clause 9)")


def task_chart(t: pd.DataFrame, slug: str) -> Chart:
    """Return the share of the daily dose per task."""
    df = t.sort_values("share_of_dose", ascending=False)
    fig = charts.bar(df["task"], (df["share_of_dose"] * 100).round(1), xaxis_title="task",
                     yaxis_title="share of the daily dose, %")
    fig.update_yaxes(range=[0, 100])
    table = Table(columns=["Task", "Share of daily dose, %", "LEX,8h,m, dB(A)"],
                  rows=[[r.task, _num(r.share_of_dose * 100, 0), _num(r.lex_8h_m)] for r in df.itertuples()],
                  caption="Share of the daily dose per task", classes=["", "num", "num"])
    top = df.iloc[0]
    summary = f"The task '{top['task']}' gives {top['share_of_dose'] * 100:.0f} % of the daily dose."
    return Chart(id=_chart_id(slug, 1), figure=fig, summary=summary, table=table,
                 title="Share of the daily noise dose (LEX,8h, ISO 9612 task-based) per task, %")


def coarsen_history(h: pd.DataFrame, points: int = HISTORY_POINTS) -> pd.DataFrame:
    """Return *h* merged into at most *points* runs of consecutive bins (energy mean, highest level, first start)."""
    if len(h) <= points:
        return h
    per = -(-len(h) // points)
    b = np.arange(len(h)) // per
    n = h["n"].to_numpy(dtype=float)
    e = np.bincount(b, weights=lv.energy(h["laeq"].to_numpy(dtype=float)) * n)
    c = np.bincount(b, weights=n)
    firsts = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
    return pd.DataFrame({"start": h["start"].to_numpy()[firsts], "laeq": lv.level(e / c),
                         "lmax": np.maximum.reduceat(h["lmax"].to_numpy(dtype=float), firsts),
                         "n": c.astype(np.int64)})


def history_chart(mid: str, h: pd.DataFrame, ctx: SiteContext, slug: str, n: int, redact: Any = str) -> Chart:
    """Return a downsampled time history with the threshold and criterion lines of the headline rule."""
    head = ctx.headline
    mid = redact(mid)
    h = coarsen_history(h, HISTORY_POINTS)
    x = h["start"].dt.strftime("%Y-%m-%dT%H:%M:%S").to_numpy(dtype=object)
    fig = charts.Figure(charts.trace("scatter", x=x, y=h["laeq"].round(1).to_numpy(), mode="lines",
                                     name="LAeq per interval (energy mean)",
                                     line=dict(color=charts.category_colour(0))))
    fig.add_trace(charts.trace("scatter", x=x, y=h["lmax"].round(1).to_numpy(), mode="lines",
                               name="highest interval level", line=dict(color=charts.category_colour(6), width=1)))
    charts.base_layout(fig, None, 360, "time", "dB(A)")
    ref = {f"{head.short} criterion level {head.criterion_level:g} dB(A)": head.criterion_level}
    if head.threshold:
        ref[f"{head.short} threshold {head.threshold:g} dB(A)"] = head.threshold
    _hlines(fig, ref)
    step = h["n"].max() if len(h) else 0
    rows = [[t, f"{a:.1f}", f"{b:.1f}", str(c)] for t, a, b, c in
            zip(h["start"].dt.strftime("%Y-%m-%d %H:%M:%S"), h["laeq"].to_numpy(), h["lmax"].to_numpy(),
                h["n"].to_numpy())]
    table = Table(columns=["From", "LAeq, dB(A)", "Highest interval, dB(A)", "Intervals"], rows=rows,
                  caption=f"Time history of {mid}, up to {int(step)} logged intervals per point",
                  classes=["", "num", "num", "num"])
    summary = (f"Measurement {mid}: plotted levels from {h['laeq'].min():.0f} to {h['laeq'].max():.0f} dB(A) "
               f"(energy means of up to {int(step)} logged intervals per point); dashed lines mark the "
               f"{head.short} criterion level {head.criterion_level:g} dB(A)"
               + (f" and threshold {head.threshold:g} dB(A)." if head.threshold else "."))
    lines = f"criterion level {head.criterion_level:g}" + (f" and threshold {head.threshold:g}" if head.threshold else "")
    return Chart(id=_chart_id(slug, n), figure=fig, summary=summary, table=table, height=360,
                 title=f"Time history of measurement {mid}: LAeq per interval, dB(A); lines: {head.name} dose "
                 f"{lines} dB(A)")


def budget_table(gr: pd.Series, tasks: pd.DataFrame) -> Table:
    """Return the ISO 9612 uncertainty budget of one group."""
    rows: list[list[str]] = []
    if gr["strategy"] == "job":
        rows = [["samples N", str(int(gr["n_samples"])), "", "ISO 9612:2009 10.3"],
                ["u1, spread of the samples", _num(gr["u1"], 2), "dB", "ISO 9612:2009 Eq. C.12"],
                ["c1·u1", _num(gr["c1u1"], 2), "dB", "ISO 9612:2009 Table C.4 (interpolated)"],
                ["u2, instrument", _num(gr["u2"], 2), "dB", "ISO 9612:2009 Table C.5"],
                ["u3, microphone position", _num(gr["u3"], 2), "dB", "ISO 9612:2009 C.6"]]
    elif gr["strategy"] == "task":
        for r in tasks.itertuples(index=False):
            rows.append([f"task '{r.task}': c1a, u1a, c1b·u1b", f"{r.c1a:.3f}, {r.u1a:.2f}, {r.c1b * r.u1b:.2f}",
                         "–, dB, dB", "ISO 9612:2009 Eq. C.3–C.7"])
        rows.append(["u2, instrument", _num(gr["u2"], 2), "dB", "ISO 9612:2009 Table C.5"])
        rows.append(["u3, microphone position", _num(gr["u3"], 2), "dB", "ISO 9612:2009 C.6"])
    rows += [["combined standard uncertainty u", _num(gr["u"], 2), "dB", "ISO 9612:2009 Eq. C.1"],
             ["expanded uncertainty U = 1.65 u", _num(gr["u_expanded"], 2), "dB", "ISO 9612:2009 Annex C"],
             ["LEX,8h", _num(gr["lex_8h"], 1), "dB(A)", ""],
             ["LEX,8h + U", _num(gr["lex_8h_upper"], 1), "dB(A)", ""]]
    return Table(columns=["Term", "Value", "Unit", "Source"], rows=rows, caption="Uncertainty budget",
                 classes=["", "num", "", ""])


def bands_table(gr: pd.Series, ctx: SiteContext) -> Table:
    """Return the group's exposure category under every rule set, judged on the level and on level + U."""
    rows = []
    for rid, rule in ctx.rules.items():
        rows.append([rule.name, "LEX,8h" if rule.metric == "lex" else f"TWA ({rule.exchange_rate:g}-dB rule)",
                     _num(gr[f"level_{rid}"]), gr[f"band_{rid}"] or charts.BLANK,
                     _num(gr[f"level_upper_{rid}"]), gr[f"band_upper_{rid}"] or charts.BLANK,
                     "level + U" if rule.judge_with_uncertainty else "level"])
    return Table(columns=["Rule set", "Metric", "Level, dB(A)", "Exposure category on the level", "Level + U, dB(A)",
                          "Exposure category on level + U", "This rule set judges on"], rows=rows,
                 caption="Exposure categories judged on the level and on the level plus its uncertainty U",
                 classes=["", "", "num", "", "num", "", ""])


def group_page(gr: pd.Series, res: ExposureResult, ctx: SiteContext, slug: str, redact: Any = str) -> Page:
    """Return the page of one group."""
    code = gr["group"]
    suppressed = code in ctx.suppressed_groups
    context: dict[str, Any] = {"group_code": code, "group_name": gr["name"], "suppressed": suppressed,
                               "strategy": gr["strategy"],
                               "strategy_words": STRATEGY_WORDS.get(gr["strategy"], gr["strategy"]), "rules_name": ctx.headline.name,
                               "rules_short": ctx.headline.short}
    page_charts: list[Chart] = []
    if not suppressed:
        m = res.measurements[res.measurements["group"] == code]
        t = res.tasks[res.tasks["group"] == code] if len(res.tasks) else res.tasks
        context.update(
            figures={"n_people": int(gr["n_people"]), "n_samples": int(gr["n_samples"]), "lex_8h": gr["lex_8h"],
                     "u_expanded": gr["u_expanded"], "lex_8h_upper": gr["lex_8h_upper"], "band": gr["band"],
                     "osha_twa": gr["osha_twa"], "niosh_twa": gr["niosh_twa"], "max_lcpeak": gr["max_lcpeak"],
                     "te_h": gr["te_h"], "stale": bool(gr["stale"]), "last_measured": gr["last_measured"]},
            measurement_table=measurement_table(m, ctx, redact),
            yearly_table=yearly_table(m, ctx) if len(m) else None,
            n_measurements=len(m), n_shown=min(len(m), MEASUREMENT_ROWS),
            task_chart_id=None,
            task_table=task_table(t) if len(t) else None,
            budget_table=budget_table(gr, t),
            bands_table=bands_table(gr, ctx),
            steady=bool((m["basis"] == "steady_level").any()),
            findings=[redact(f.message) for f in res.findings
                      if f"group {code}:" in f.message or f"group {code}," in f.message],
        )
        n = 1
        if len(t):
            page_charts.append(task_chart(t, slug))
            context["task_chart_id"] = page_charts[-1].id
            n += 1
        logged = m[m["measurement_id"].isin(sorted(res.logs))]
        hid = ctx.headline.id
        logged = logged.sort_values([f"dose_{hid}", "date", "measurement_id"], ascending=False, kind="stable")
        charted, rest = logged.head(HISTORY_CHARTS), logged.iloc[HISTORY_CHARTS:]
        for mid in charted["measurement_id"]:
            page_charts.append(history_chart(mid, res.logs[mid], ctx, slug, n, redact))
            n += 1
        listed = rest.head(LOG_ROWS)
        lmax = pd.Series({mid: _log_peak(res.logs, mid) for mid in listed["measurement_id"]}, dtype=float)
        context.update(
            history_ids=[c.id for c in page_charts[len(page_charts) - len(charted):]],
            n_logged=len(logged), n_listed=len(listed), n_rest=len(rest),
            logged_table=logged_table(listed, lmax, ctx, redact) if len(listed) else None,
            history_points=HISTORY_POINTS,
        )
    return Page(slug=slug, title=f"Exposure: {gr['name']}", template="exposure_group.html", section=SECTION,
                context=context, charts=page_charts)


def _log_peak(logs: Mapping[str, pd.DataFrame], mid: str) -> float:
    """Return the highest bin maximum of log *mid* (read off the binned log, no frame made)."""
    return logs.peak(mid) if isinstance(logs, LogHistories) else float(logs[mid]["lmax"].max())


# ---------------------------------------------------------------------------------------
# noise map


def noise_map_chart(res: ExposureResult, ctx: SiteContext, redact: Any = str) -> Chart | None:
    """Return the map of area measurements with the interpolated contour, or None without positions."""
    nm = res.noise_map
    pts = nm.points.assign(location=[redact(v) for v in nm.points["location"]])
    if pts.empty:
        return None
    fig = charts.Figure()
    if nm.z.size:
        fig.add_trace(charts.contour(x=nm.x.round(2).tolist(), y=nm.y.round(2).tolist(), z=np.round(nm.z, 1).tolist(),
                                     colorscale="YlOrRd", opacity=0.75, name=MAP_NOTE,
                                     contours=dict(showlabels=True, start=float(np.floor(nm.z.min())),
                                                   end=float(np.ceil(nm.z.max())),
                                                   size=1.0 if np.ptp(nm.z) < 10 else 2.0),
                                     colorbar=dict(title=dict(text="dB(A), " + MAP_NOTE, side="right")),
                                     hovertemplate="%{x} m, %{y} m: %{z} dB(A) (" + MAP_NOTE + ")<extra></extra>"))
    fig.add_trace(charts.trace("scatter", x=pts["x_m"].tolist(), y=pts["y_m"].tolist(), mode="markers+text",
                               text=[f"{v:.0f}" for v in pts["laeq"]], textposition="top center",
                               name="measured points", marker=dict(size=9, color="#1d2730", symbol="x"),
                               customdata=pts["location"].tolist(),
                               hovertemplate="%{customdata}: %{text} dB(A) measured<extra></extra>"))
    charts.base_layout(fig, None, 560, "east, m", "north, m")
    fig.update_yaxes(scaleanchor="x", scaleratio=1)
    table = charts.table_from_frame(pts, {"location": "Location", "x_m": "East, m", "y_m": "North, m",
                                          "laeq": "LAeq, dB(A)", "n": "Measurements", "last_date": "Latest"},
                                    {"x_m": ".1f", "y_m": ".1f", "n": "d"},
                                    caption="Measured points (energy mean per position)")
    summary = (f"{len(pts)} measured position{'s' if len(pts) != 1 else ''} from {pts['laeq'].min():.0f} to "
               f"{pts['laeq'].max():.0f} dB(A)"
               + (f"; the coloured contour between them is {MAP_NOTE}." if nm.z.size else
                  "; too few positions for an interpolated contour."))
    return Chart(id="noise-map-1", figure=fig, summary=summary, table=table, height=560,
                 title=f"Noise map: area LAeq, dB(A), {survey_words(pts)}")


def survey_words(pts: pd.DataFrame) -> str:
    """Return which survey a map shows: the number of positions and the dates of their latest readings."""
    n = len(pts)
    dates = pd.to_datetime(pts["last_date"]).dropna() if n else pd.Series([], dtype="datetime64[ns]")
    head = f"{n} measured position{'s' if n != 1 else ''}"
    if dates.empty:
        return head
    first, last = dates.min().strftime("%Y-%m-%d"), dates.max().strftime("%Y-%m-%d")
    return head + (f", latest reading {last}" if first == last else f", latest readings from {first} to {last}")


# ---------------------------------------------------------------------------------------


def build(ctx: SiteContext) -> list[Page]:
    """Return the exposure overview, one page per group, and the noise map."""
    res: ExposureResult | None = ctx.results.exposure
    if res is None:
        return []
    head = ctx.headline
    redact = ctx.redact
    codes = res.groups["group"].tolist()
    slugs = group_slugs(codes)
    m = res.measurements
    band_chart, band_tab = band_counts(res, ctx)
    dist = distribution_chart(res, ctx)
    visible = res.groups[~res.groups["group"].isin(sorted(ctx.suppressed_groups))]
    has_noise = ctx.programme.has("noise") or ctx.programme.has("tasks")
    overview = Page(
        slug="exposure", title="Noise exposure", template="exposure.html", section=SECTION, in_nav=True,
        context={
            "has_noise": has_noise,
            "rules_name": head.name,
            "rule_names": [r.name for r in ctx.rules.values()],
            "head_judged_with_u": head.judge_with_uncertainty,
            "action_value": action_value(head),
            "tiles": [{"label": "measurements", "value": f"{len(m):,}"},
                      {"label": "groups", "value": f"{len(res.groups):,}"},
                      {"label": f"groups at or above the {head.short} "
                                f"{value_name(head, action_value(head)) or 'action value'} {action_value(head):g} dB(A)",
                       "value": f"{int(visible['exposed'].sum()):,}"},
                      {"label": "groups needing a survey", "value": f"{int(res.groups['stale'].sum()):,}"},
                      figure_tiles.tile(ctx, "exposed_top_band", note="")],
            "group_links": [{"code": c, "name": n, "href": f"exposure/{slugs[c]}.html"}
                            for c, n in zip(res.groups["group"], res.groups["name"])],
            "groups_table": groups_table(res, ctx, slugs),
            "coverage_table": coverage_table(res),
            "basis_table": basis_table(res),
            "steady": bool((m["basis"] == "steady_level").any()),
            "weekly_table": weekly_table(res, ctx),
            "actions_table": actions_table(res, ctx, redact),
            "findings_table": findings_table(res, ctx.suppressed_groups, redact),
            "parameters": [{"name": p[0], "value": p[1], "unit": p[2], "source": p[3]} for p in PARAMETERS],
            "notes": [n for r in ctx.rules.values() for n in r.notes],
            "any_suppressed": bool(set(res.groups["group"]) & set(ctx.suppressed_groups)),
            "has_map": not res.noise_map.points.empty,
        },
        charts=[dist, band_chart],
    )
    pages = [overview]
    for _, gr in res.groups.iterrows():
        pages.append(group_page(gr, res, ctx, f"exposure/{slugs[gr['group']]}", redact))
    chart = noise_map_chart(res, ctx, redact)
    survey = survey_words(res.noise_map.points) if not res.noise_map.points.empty else ""
    pages.append(Page(slug="noise-map", title="Noise map", template="noise_map.html", section="noise-map",
                      in_nav=chart is not None,
                      context={"has_points": chart is not None, "map_note": MAP_NOTE, "survey": survey,
                               "n_points": int(len(res.noise_map.points))},
                      charts=[chart] if chart is not None else []))
    log.info("exposure pages: %d", len(pages))
    return pages
