"""The hearing pages: overview, one section page per group and (restricted builds only)
one page per person. Reads ``ctx.results["hearing"]``; computes nothing new."""
from __future__ import annotations

import dataclasses
import logging
import re
from typing import Any

import numpy as np
import pandas as pd

from .. import charts
from ..hearing import EAR_NAMES, LEFT_STATUS, SETTINGS, HearingResult, expected_verdict
from . import figure_tiles
from .base import Chart, Page, SiteContext, Table, group_slugs
from .programme import LIST_CAP, cap_caption, cap_rows

log = logging.getLogger(__name__)

SUPPRESSED = "suppressed"
#: years shown in the per-year charts (the latest ones)
YEARS_SHOWN = 10
#: colours of the follow-up statuses
STATUS_COLOURS = {k: charts.STATUS_COLOURS[k] for k in ("on time", "late", "missing", "not yet due")}
KIND_WORDS = {"notice": "written notice", "retest": "retest", "refit": "protector refit", "referral": "referral"}
BLANK = charts.BLANK
#: rows shown in a listing on the overview and group pages of a public build (the counts use every row)
MAX_ROWS = LIST_CAP
#: the columns of the per-ear audiograms the hearing pages read
LISTED = ("person_id", "ear", "date", "group", "sts", "niosh_shift", "recordable", "shift_status", "avg_234",
          "shift_234", "shift_234_age_corrected", "retest_status")


def _num(v: Any, digits: int = 1) -> str:
    if v is None or v is pd.NA or v is pd.NaT:
        return BLANK
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    return BLANK if np.isnan(f) else f"{f:.{digits}f}"


def _pct(v: Any, digits: int = 1) -> str:
    s = _num(None if v is None else (float(v) * 100 if not pd.isna(v) else np.nan), digits)
    return s if s == BLANK else s + " %"


def _yes(v: Any) -> str:
    if v is None or v is pd.NA or (isinstance(v, float) and np.isnan(v)):
        return BLANK
    return "yes" if bool(v) else "no"


def _date(v: Any) -> str:
    return BLANK if v is None or pd.isna(v) else pd.Timestamp(v).strftime("%Y-%m-%d")


def _years(ctx: SiteContext) -> list[int]:
    """Return the calendar years of the review period."""
    p = ctx.programme.config.period
    return list(range(p.start.year, p.end.year + 1))


def _period(ctx: SiteContext) -> tuple[pd.Timestamp, pd.Timestamp]:
    p = ctx.programme.config.period
    return pd.Timestamp(p.start), pd.Timestamp(p.end)


def _ci_text(lo: Any, hi: Any) -> str:
    if pd.isna(lo) or pd.isna(hi):
        return BLANK
    return f"{float(lo) * 100:.1f}–{float(hi) * 100:.1f} %"


# ---------------------------------------------------------------------------------------
# charts shared by the overview and the group pages


def per_year_chart(pop: pd.DataFrame, group: str, cid: str, label: str) -> Chart:
    """Return tested people, shifts and recordable cases per year for *group* ('all' = everyone)."""
    d = pop[pop["group"] == group].sort_values("year").tail(YEARS_SHOWN)
    years = [str(y) for y in d["year"]]
    fig = charts.grouped_bar(years, {"people tested": d["n_tested"].tolist(),
                                     "people with an STS": d["n_sts"].tolist(),
                                     "people with a recordable case": d["n_recordable"].tolist()},
                             xaxis_title="year", yaxis_title="people")
    rows = [[str(r.year), str(r.n_tested), str(r.n_sts), _pct(r.sts_rate), _ci_text(r.sts_ci_low, r.sts_ci_high),
             str(r.n_recordable), _pct(r.recordable_rate), _ci_text(r.recordable_ci_low, r.recordable_ci_high)]
            for r in d.itertuples()]
    table = Table(["Year", "People tested", "People with STS", "STS rate", "95 % CI (exact)",
                   "People with a recordable case", "Recordable rate", "95 % CI (exact)"], rows,
                  caption=f"People tested, with a standard threshold shift in force and "
                  f"with a recordable case per year ({label})", classes=["", "num", "num", "num", "", "num", "num", ""])
    if d.empty:
        summary = f"No audiograms for {label}."
    else:
        last = d.iloc[-1]
        summary = (f"In {int(last['year'])}, {int(last['n_sts'])} of {int(last['n_tested'])} people tested "
                   f"({label}) had a standard threshold shift in force and {int(last['n_recordable'])} a "
                   "recordable case.")
    return Chart(cid, fig, summary, table, title=f"People tested, with a standard threshold shift (STS) and with a recordable hearing-loss case, "
                 f"per year: {label}, people")


def mean_average_chart(pop: pd.DataFrame, groups: list[str], cid: str) -> Chart:
    """Return the mean 2000/3000/4000 Hz average per year for each group shown."""
    series: dict[str, list] = {}
    years = sorted(pop["year"].unique().tolist())[-YEARS_SHOWN:]
    rows = []
    for g in groups:
        d = pop[pop["group"] == g].set_index("year").reindex(years)
        series[g] = d["mean_avg_234"].tolist()
        for y, r in d.iterrows():
            if pd.isna(r["n_tested"]):
                continue
            rows.append([g, str(y), _num(r["mean_avg_234"]), str(int(r["n_avg"])), _num(r["change_mean_avg"]),
                         _num(r["mean_within_change"]), str(int(r["n_within"])), str(int(r["n_nr_excluded"]))])
    fig = charts.line([str(y) for y in years], series, xaxis_title="year",
                      yaxis_title="mean of the 2000/3000/4000 Hz average, dB HL")
    table = Table(["Group", "Year", "Mean average, dB HL", "People", "Change from the year before, dB",
                   "Mean change of the same people, dB", "People in both years", "Ears left out (NR)"], rows,
                  caption="Mean 2000/3000/4000 Hz hearing level per year (latest test of each ear in the year)",
                  classes=["", "", "num", "num", "num", "num", "num", "num"])
    ch = pop[pop["group"].isin(groups)].dropna(subset=["mean_within_change"])
    if ch.empty:
        summary = "There are not yet two consecutive years of tests to compare."
    else:
        last = ch.sort_values("year").groupby("group").tail(1)
        top = last.sort_values("mean_within_change", ascending=False).iloc[0]
        summary = (f"The largest mean change of the same people from one year to the next in the latest year is "
                   f"{float(top['mean_within_change']):.1f} dB ({top['group']}, {int(top['year'])}).")
    return Chart(cid, fig, summary, table, title="Mean 2000/3000/4000 Hz hearing level per year, dB HL, "
                 + (f"group {groups[0]}" if len(groups) == 1 else "per similar exposure group"))


def indicators_chart(ind: pd.DataFrame, group: str, cid: str, label: str) -> Chart:
    """Return %Worse-sequential and %Better-or-Worse-sequential per year for *group*."""
    d = ind[(ind["group"] == group) & (ind["n_pairs"] > 0)].sort_values("year").tail(YEARS_SHOWN)
    years = [str(y) for y in d["year"]]
    fig = charts.line(years, {"%Worse-sequential": d["pct_worse"].tolist(),
                              "%Better-or-Worse-sequential": d["pct_better_or_worse"].tolist()},
                      xaxis_title="year (later test of the pair)", yaxis_title="% of people")
    fig.update_xaxes(type="category")
    rows = [[str(r.year), str(r.n_pairs), str(r.n_worse), _num(r.pct_worse), str(r.n_better_or_worse),
             _num(r.pct_better_or_worse), str(r.n_incomplete)] for r in d.itertuples()]
    table = Table(["Year", "Pairs", "Worse", "%Ws", "Better or worse", "%BWs", "Pairs left out (incomplete or NR)"],
                  rows, caption=f"Sequential audiogram pairs ({label})",
                  classes=["", "num", "num", "num", "num", "num", "num"])
    if d.empty:
        summary = f"No sequential pairs of complete audiograms yet ({label})."
    else:
        last = d.iloc[-1]
        summary = (f"In {int(last['year'])}, {float(last['pct_worse']):.1f} % of {int(last['n_pairs'])} people "
                   f"were 15 dB or more worse than on their previous test at some frequency, and "
                   f"{float(last['pct_better_or_worse']):.1f} % better or worse ({label}).")
    return Chart(cid, fig, summary, table, title=f"Sequential-pair indicators %Worse-sequential and %Better-or-Worse-sequential per year, "
                 f"% of people: {label}")


def expected_sentence(shown: pd.DataFrame, where: list[str], tolerance: float) -> str:
    """Return the sentence on observed against expected change, chosen from the numbers.

    Each group (and frequency) shown is above, within or below the expected combined change
    (ISO 1999:2013 Formula (1)) by more than *tolerance* dB; the sentence says how many are
    which and names the largest excess.
    """
    if shown.empty:
        return "No group has both an exposure level and audiograms after a baseline."
    verdict = expected_verdict(shown["observed_change"], shown["expected_change"], tolerance)
    diff = (shown["observed_change"] - shown["expected_change"]).to_numpy(float)
    known = verdict != ""
    if not known.any():
        return "The observed and expected changes could not both be computed for any group shown."
    n = int(known.sum())
    above, within, below = (int((verdict == v).sum()) for v in ("above", "within", "below"))
    tol = f"{tolerance:g} dB"
    if above:
        i = int(np.nanargmax(np.where(verdict == "above", diff, -np.inf)))
        r = shown.iloc[i]
        lead = (f"The observed mean change since baseline is larger than the change age and noise together would "
                f"lead one to expect (ISO 1999:2013 Formula (1)) by more than {tol} in {above} of {n} shown, most in "
                f"{where[i]}: {float(r['observed_change']):.1f} dB observed against "
                f"{float(r['expected_change']):.1f} dB expected.")
        rest = []
        if within:
            rest.append(f"{within} within {tol}")
        if below:
            rest.append(f"{below} below by more than {tol}")
        return lead + (f" Of the others, {' and '.join(rest)}." if rest else "")
    if within == n:
        return (f"In every one of the {n} shown the observed mean change since baseline is within {tol} of the "
                "change age and noise together would lead one to expect (ISO 1999:2013 Formula (1)).")
    return (f"In {below} of the {n} shown the observed mean change since baseline is smaller than the change age "
            f"and noise together would lead one to expect (ISO 1999:2013 Formula (1)) by more than {tol}"
            + (f", and within {tol} in {within}." if within else "."))


def noise_chart(ne: pd.DataFrame, groups: list[str], cid: str, freqs: tuple[int, ...] = (4000,)) -> Chart:
    """Return expected (ISO 7029, ISO 1999 and both combined) vs observed change since baseline per group."""
    d = ne[ne["group"].isin(groups)].sort_values(["group", "freq"])
    shown = d[d["freq"].isin(freqs)]
    cats = [f"{g} {f // 1000} kHz" if len(freqs) > 1 else g for g, f in zip(shown["group"], shown["freq"])]
    fig = charts.grouped_bar(cats, {"expected from age (ISO 7029:2017)": shown["expected_age_change"].tolist(),
                                    "expected from noise (ISO 1999:2013)": shown["expected_noise_change"].tolist(),
                                    "expected from age and noise (ISO 1999 Formula 1)":
                                        shown["expected_change"].tolist(),
                                    "observed": shown["observed_change"].tolist()},
                             yaxis_title="mean change since baseline, dB")
    tol = float(SETTINGS["expected_tolerance_db"])
    verdict: list[str] = list(expected_verdict(d["observed_change"], d["expected_change"], tol)) if len(d) else []
    words = {"above": f"above by more than {tol:g} dB", "within": f"within {tol:g} dB",
             "below": f"below by more than {tol:g} dB", "": BLANK}
    rows = [[r.group, str(int(r.freq)), _num(r.lex_8h), _num(r.mean_years), _num(r.nipts_at_mean_years),
             _num(r.expected_noise_change), _num(r.expected_age_change), _num(r.expected_change),
             _num(r.observed_change), words[v], str(int(r.n_ears)), str(int(r.n_nr_excluded))]
            for r, v in zip(d.itertuples(), verdict)]
    table = Table(["Group", "Hz", "LEX,8h, dB(A)", "Mean years exposed", "Median NIPTS at mean years, dB",
                   "Expected noise change, dB", "Expected age change, dB",
                   "Expected age and noise (ISO 1999 Formula 1), dB", "Observed change, dB",
                   "Observed against expected", "Ears", "Ears left out (NR)"], rows,
                  caption="Expected and observed change since each ear's baseline (latest test of each ear); the "
                          "expected change combines age H and noise N as H + N - H·N/120 (ISO 1999:2013 Formula 1)",
                  classes=["", "num"] + ["num"] * 7 + ["", "num", "num"])
    where = [f"{g} at {int(f)} Hz" if len(freqs) > 1 else str(g) for g, f in zip(shown["group"], shown["freq"])]
    summary = expected_sentence(shown, where, tol)
    at = "at 4 kHz" if freqs == (4000,) else "at " + ", ".join(f"{f // 1000} kHz" for f in freqs)
    title = (f"Mean change of hearing level since baseline {at}, dB: observed against expected from age "
             "(ISO 7029:2017) and noise (ISO 1999:2013), per similar exposure group")
    return Chart(cid, fig, summary, table, title=title)


def age_chart(an: pd.DataFrame, cid: str, freq: int = 4000) -> Chart:
    """Return observed median hearing level by age band and sex vs ISO 7029:2017 at *freq*."""
    d = an[an["freq"] == freq].sort_values(["sex", "age_band"])
    bands = sorted(d["age_band"].unique().tolist())
    fig = charts.Figure()
    for sex, word, col in (("M", "men", charts.category_colour(0)), ("F", "women", charts.category_colour(1))):
        s = d[d["sex"] == sex].set_index("age_band").reindex(bands)
        if not s["n_ears"].notna().any():
            continue
        for label, column, dash, mode in (("observed median", "observed_median", "solid", "lines+markers"),
                                          ("ISO 7029 median", "iso_median", "dash", "lines"),
                                          ("ISO 7029 10 % worst", "iso_p90", "dot", "lines")):
            ys = [None if not np.isfinite(v) else float(v) for v in s[column].to_numpy(float)]
            fig.add_trace(charts.trace("scatter", x=bands, y=ys, name=f"{label}, {word}", mode=mode,
                                       line=dict(color=col, dash=dash)))
    charts.base_layout(fig, None, 440, "age band, years", f"hearing level at {freq} Hz, dB")
    fig.update_yaxes(autorange="reversed")
    rows = [[r.age_band, r.sex, str(int(r.freq)), str(int(r.n_ears)), _num(r.mean_age), _obs(r.observed_median),
             _obs(r.observed_p90), _num(r.iso_median), _num(r.iso_p90), _pct(r.share_worse_than_iso_p90),
             str(int(r.n_nr))] for r in an.sort_values(["freq", "sex", "age_band"]).itertuples()]
    table = Table(["Age band", "Sex", "Hz", "Ears", "Mean age", "Observed median, dB HL",
                   "Observed 90th percentile, dB HL", "ISO 7029 median, dB", "ISO 7029 10 % worst, dB",
                   "Share worse than the ISO 7029 10 % line (10 % expected)", "NR"], rows,
                  caption="Latest hearing level of each ear by age band and sex against ISO 7029:2017",
                  classes=["", "", "num", "num", "num", "num", "num", "num", "num", "num", "num"])
    at = an[an["freq"] == freq]
    if at.empty:
        summary = "No audiograms with a known age and sex to compare with ISO 7029."
    else:
        share = float(np.average(at["share_worse_than_iso_p90"], weights=at["n_ears"]))
        summary = (f"At {freq} Hz, {share * 100:.0f} % of ears are worse than the level ISO 7029:2017 expects "
                   "only the worst 10 % of otologically normal people of the same age and sex to reach.")
    return Chart(cid, fig, summary, table, title=f"Median hearing level at {freq} Hz by age band and sex, dB HL, against ISO 7029:2017")


def _obs(v: Any) -> str:
    if v is not None and not pd.isna(v) and np.isinf(float(v)):
        return "NR"
    return _num(v)


def followup_chart(fu: pd.DataFrame, cid: str) -> Chart:
    """Return the follow-ups due in the period by kind and status."""
    kinds = [k for k in ("notice", "retest", "refit", "referral") if (fu["kind"] == k).any()]
    counts = fu.groupby(["kind", "status"]).size().unstack(fill_value=0) if not fu.empty else pd.DataFrame()
    series = {s: [int(counts.loc[k, s]) if (k in counts.index and s in counts.columns) else 0 for k in kinds]
              for s in STATUS_COLOURS}
    fig = charts.stacked_bar([KIND_WORDS[k] for k in kinds], series, yaxis_title="follow-ups", colours=STATUS_COLOURS)
    rows = [[KIND_WORDS[k]] + [str(series[s][i]) for s in STATUS_COLOURS] for i, k in enumerate(kinds)]
    table = Table(["Follow-up"] + list(STATUS_COLOURS), rows, caption="Follow-ups due in the review period",
                  classes=[""] + ["num"] * len(STATUS_COLOURS))
    n = len(fu)
    ok = int((fu["status"] == "on time").sum()) if n else 0
    bad = int(fu["status"].isin(["late", "missing"]).sum()) if n else 0
    summary = (f"Of {n} follow-ups due in the period, {ok} were done on time and {bad} were late or are not on "
               "record." if n else "No follow-ups fell due in the period.")
    return Chart(cid, fig, summary, table, title="Follow-ups of standard threshold shifts due in the review period, by timeliness: "
                 "number of follow-ups")


def rate_by_group_chart(pg: pd.DataFrame, suppressed: frozenset[str], cid: str) -> Chart:
    """Return the STS rate per group in the period with exact 95 % intervals (suppressed groups left out)."""
    agg = pg[pg["group"] != "all"].rename(columns={"sts_rate": "rate", "sts_ci_low": "lo", "sts_ci_high": "hi"})
    shown = agg[~agg["group"].isin(sorted(suppressed))]
    # (a frame without rows may hold its figures as objects, which pandas 2.3 refuses to round)
    shown = shown.assign(**{c: pd.to_numeric(shown[c], errors="coerce").astype(float) for c in ("rate", "lo", "hi")})
    fig = charts.Figure(charts.trace("bar", x=shown["group"].tolist(), y=(shown["rate"] * 100).round(2).tolist(),
                                     error_y=dict(type="data", symmetric=False,
                                                  array=((shown["hi"] - shown["rate"]) * 100).round(2).tolist(),
                                                  arrayminus=((shown["rate"] - shown["lo"]) * 100).round(2).tolist()),
                                     marker=dict(color=charts.category_colour(0)), name="STS rate"))
    charts.base_layout(fig, None, 420, "similar exposure group", "people with an STS, % of tested")
    rows = []
    for r in agg.itertuples():
        if r.group in suppressed:
            rows.append([r.group] + [SUPPRESSED] * 4)
        else:
            rows.append([r.group, str(int(r.n_tested)), str(int(r.n_sts)), _pct(r.rate), _ci_text(r.lo, r.hi)])
    table = Table(["Group", "People tested", "People with STS", "Rate", "95 % CI (exact)"], rows,
                  caption="People with a standard threshold shift in the review period, per group",
                  classes=["", "num", "num", "num", ""])
    if shown.empty or shown["rate"].isna().all():
        summary = "No group shown has audiograms in the period."
    else:
        top = shown.sort_values("rate", ascending=False).iloc[0]
        summary = (f"The highest share with a standard threshold shift in the period is in {top['group']}: "
                   f"{float(top['rate']) * 100:.1f} % (exact 95 % interval {_ci_text(top['lo'], top['hi'])}).")
    return Chart(cid, fig, summary, table, title="People with a standard threshold shift (STS) in the review period, "
                 "% of people tested, per similar exposure group")


# ---------------------------------------------------------------------------------------
# tables


#: listing order of the shift statuses (the ones the reviewer must act on first)
SHIFT_ORDER = ("shift", "confirmed by retest", "confirmed by reviewer", "not computed (NR)", "not work-related",
               "cancelled by retest", "cancelled by reviewer")
#: listing order of the follow-up statuses
FOLLOWUP_ORDER = ("missing", "late", "not yet due")
SHIFTS_WHERE = "hcpsite export writes every audiogram with its shift and recordable flags to hearing_results.csv"
FOLLOWUPS_WHERE = ("the counts in the follow-up chart are complete; hcpsite export writes the open ones to "
                   "actions.csv")


def _rank(values: pd.Series, order: tuple[str, ...]) -> np.ndarray:
    """Return the position of each value in *order* (unknown values after the known ones)."""
    # as text: a categorical column would map to categories and refuse the fill value
    return values.astype(object).map({v: i for i, v in enumerate(order)}).fillna(len(order)).to_numpy()


def shifts_table(a: pd.DataFrame, ctx: SiteContext) -> Table:
    """Return the audiograms with a shift, a recordable case or an NR to review (codes only).

    Recordable cases come first, then by shift status and latest test first; a public page
    lists the first MAX_ROWS and says how many there are.
    """
    order = pd.DataFrame({"rec": ~a["recordable"].astype(bool).to_numpy(), "st": _rank(a["shift_status"], SHIFT_ORDER),
                          "date": pd.to_datetime(a["date"]).to_numpy(), "pos": np.arange(len(a))})
    order = order.sort_values(["rec", "st", "date", "pos"], ascending=[True, True, False, True], kind="mergesort")
    d = cap_rows(a.iloc[order["pos"].to_numpy()], ctx, MAX_ROWS)
    d = d.assign(pcode=[ctx.code(p) for p in d["person_id"]])
    rows = [[r.pcode, EAR_NAMES.get(r.ear, r.ear), _date(r.date), _num(r.avg_234), _num(r.shift_234),
             _num(r.shift_234_age_corrected), r.shift_status or BLANK, r.retest_status or BLANK,
             _yes(r.recordable), _yes(r.niosh_shift)] for r in d.itertuples()]
    return Table(["Person", "Ear", "Date", "2/3/4 kHz average, dB HL", "Shift, dB", "Shift age-corrected, dB",
                  "Status", "Retest", "Recordable case (this ear)", "NIOSH shift"], rows,
                 caption=cap_caption("Audiograms with a shift or to review in the period (pseudonymous codes), "
                                     "recordable cases first, then by status, latest first",
                                     len(rows), len(a), SHIFTS_WHERE),
                 classes=["", "", "", "num", "num", "num", "", "", "", ""])


def followups_table(fu: pd.DataFrame, ctx: SiteContext) -> Table:
    """Return follow-ups that were late, are missing or are due (codes only), missing ones first by due date."""
    d = fu[fu["status"] != "on time"]
    order = pd.DataFrame({"st": _rank(d["status"], FOLLOWUP_ORDER), "due": pd.to_datetime(d["due_date"]).to_numpy(),
                          "pos": np.arange(len(d))})
    order = order.sort_values(["st", "due", "pos"], kind="mergesort", na_position="last")
    shown = cap_rows(d.iloc[order["pos"].to_numpy()], ctx, MAX_ROWS)
    shown = shown.assign(pcode=[ctx.code(p) for p in shown["person_id"]])
    rows = [[r.pcode, EAR_NAMES.get(r.ear, r.ear), KIND_WORDS.get(r.kind, r.kind),
             _date(r.trigger_date), _date(r.due_date), _date(r.done_date), r.status, r.clause]
            for r in shown.itertuples()]
    return Table(["Person", "Ear", "Follow-up", "Shift or decision", "Due", "Done", "Status", "Clause"], rows,
                 caption=cap_caption("Follow-ups not done on time (pseudonymous codes), missing ones first, by due "
                                     "date", len(rows), len(d), FOLLOWUPS_WHERE))


def group_table(pg: pd.DataFrame, pop: pd.DataFrame, years: list[int], suppressed: frozenset[str]) -> Table:
    """Return the period figures per group (distinct people) with the latest mean 2/3/4 kHz average."""
    d = pop[pop["year"].isin(years)]
    mean = d.sort_values("year").groupby("group")[["mean_avg_234", "change_mean_avg"]].last()
    rows = []
    for r in sorted(pg.itertuples(), key=lambda x: (x.group == "all", x.group)):
        name = "all groups" if r.group == "all" else r.group
        if r.group in suppressed:
            rows.append([name] + [SUPPRESSED] * 6)
            continue
        m = mean.loc[r.group] if r.group in mean.index else pd.Series(
            {"mean_avg_234": np.nan, "change_mean_avg": np.nan})
        rows.append([name, str(int(r.n_tested)), str(int(r.n_sts)), _ci_text(r.sts_ci_low, r.sts_ci_high),
                     str(int(r.n_recordable)), _num(m["mean_avg_234"]), _num(m["change_mean_avg"])])
    return Table(["Group", "People tested", "People with STS", "STS rate 95 % CI (exact)",
                  "People with a recordable case", "Mean 2/3/4 kHz average, dB HL",
                  "Change from the year before, dB"], rows,
                 caption="Review period per group (distinct people)",
                 classes=["", "num", "num", "", "num", "num", "num"])


# ---------------------------------------------------------------------------------------
# pages


def _people(n: int) -> str:
    """Return 'person' or 'people' for a count."""
    return "person" if n == 1 else "people"


def _tiles(h: HearingResult, a: pd.DataFrame, fu: pd.DataFrame, cases: pd.DataFrame) -> list[dict[str, Any]]:
    """Return the tiles of a group page (the hearing overview shows the headline figures instead)."""
    tested = int(a["person_id"].nunique())
    sts = int(a.loc[a["sts"], "person_id"].nunique())
    niosh = int(a.loc[a["niosh_shift"], "person_id"].nunique())
    late = int(fu["status"].isin(["late", "missing"]).sum()) if not fu.empty else 0
    tiles = [
        {"value": str(tested), "label": "people tested", "warn": False},
        {"value": str(sts), "label": "people with a standard threshold shift (OSHA)", "warn": False},
        {"value": str(len(cases)), "label": CASES_LABEL, "warn": len(cases) > 0},
        {"value": str(niosh), "label": "people with a confirmed NIOSH 15 dB shift", "warn": False},
        {"value": str(late), "label": "follow-ups late or not on record", "warn": late > 0},
    ]
    return tiles


#: 29 CFR 1904.10(a): a shift "in one or both ears" is one case of the person
CASES_LABEL = "recordable cases (29 CFR 1904.10), one per person and audiogram whatever the number of ears"


def _headline_tiles(ctx: SiteContext, a: pd.DataFrame, fu: pd.DataFrame) -> list[dict[str, Any]]:
    """Return the hearing overview's tiles: the headline figures (generator/figures.py) and the page's own."""
    t = figure_tiles.tile
    niosh = int(a.loc[a["niosh_shift"], "person_id"].nunique())
    late = int(fu["status"].isin(["late", "missing"]).sum()) if not fu.empty else 0
    return [
        t(ctx, "people_tested", label="people tested"),
        t(ctx, "people_with_sts", label="people with a standard threshold shift (OSHA)"),
        t(ctx, "recordable_cases", label=CASES_LABEL),
        t(ctx, "recordable_rate", label="recordable cases per 200,000 hours worked (29 CFR 1904)"),
        {"value": str(niosh), "label": "people with a confirmed NIOSH 15 dB shift", "warn": False},
        {"value": str(late), "label": "follow-ups late or not on record", "warn": late > 0},
    ]


def _public_tiles(ctx: SiteContext, tiles: list[dict[str, Any]], a: pd.DataFrame) -> list[dict[str, Any]]:
    """Return the tiles, their counts suppressed when the people tested in the period are too few."""
    n = int(a["person_id"].nunique()) if not a.empty else 0
    if n == 0 or not ctx.sup.hides(n):
        return tiles
    # a label that carries a count of its own ("..., in 1 person") loses it too
    return [dict(t, value=ctx.sup.suppress(t["value"], n), warn=False,
                 label=re.sub(r",? in \d[\d,]* (?:person|people)$", "", t["label"])) for t in tiles]


def _in_period(df: pd.DataFrame, col: str, start: pd.Timestamp, end: pd.Timestamp) -> pd.DataFrame:
    if df.empty:
        return df
    return df[(df[col] >= start) & (df[col] <= end)]


def _due_followups(fu: pd.DataFrame, start: pd.Timestamp, end: pd.Timestamp) -> pd.DataFrame:
    """Return the follow-ups due in the period, leaving out retests and refits not due because the person left."""
    d = _in_period(fu, "due_date", start, end)
    return d[d["status"] != LEFT_STATUS] if not d.empty else d


def _people_of_ears(n_ears: pd.Series) -> pd.Series:
    """Return the fewest people *n_ears* ears can belong to (two ears a person): what a per-ear figure rests on."""
    return np.ceil(pd.to_numeric(n_ears, errors="coerce") / 2)


def public_hearing(h: HearingResult, ctx: SiteContext) -> HearingResult:
    """Return *h* with every aggregate resting on fewer than min_group_size people left out (public builds).

    Group-years, period rows (the "all" row too), sequential-pair indicators, age-band and
    expected-change rows go through the build's suppressor with the people they rest on:
    people tested, people with a 2/3/4 kHz average, pairs of the same person, and the
    fewest people their ears can belong to.
    """
    sup = ctx.sup
    if sup.restricted:
        return h

    def keep(df: pd.DataFrame, n: pd.Series) -> pd.DataFrame:
        if df.empty:
            return df
        shown = ~n.map(sup.hides).to_numpy(bool)
        if "group" in df.columns:
            shown &= ~df["group"].astype(str).map(sup.hides_group).to_numpy(bool)
        return df[shown]

    pop = keep(h.population, h.population["n_tested"]) if not h.population.empty else h.population
    if not pop.empty:
        # a change from the year before rests on that year's people too (else it tells that year's mean)
        before = h.population.assign(year=h.population["year"] + 1).set_index(["group", "year"])["n_avg"]
        prev_n = pd.Series(list(zip(pop["group"], pop["year"])), index=pop.index).map(before)
        pop = sup.suppress_frame(pop.assign(_n=prev_n.fillna(0)), "_n", ["change_mean_avg"])
        pop = sup.suppress_frame(pop.assign(_n=pop["n_avg"]), "_n", ["mean_avg_234", "change_mean_avg"])
        pop = sup.suppress_frame(pop.assign(_n=pop["n_within"]), "_n", ["mean_within_change"]).drop(columns="_n")
    return dataclasses.replace(
        h, population=pop,
        indicators=keep(h.indicators, h.indicators["n_pairs"]) if not h.indicators.empty else h.indicators,
        age_norms=keep(h.age_norms, _people_of_ears(h.age_norms["n_ears"])) if not h.age_norms.empty
        else h.age_norms,
        noise_expected=keep(h.noise_expected, _people_of_ears(h.noise_expected["n_ears"]))
        if not h.noise_expected.empty else h.noise_expected)


def _hidden_rows(ctx: SiteContext, pg: pd.DataFrame) -> frozenset[str]:
    """Return the period rows (groups, "all") shown as suppressed: withheld groups and rows of too few people."""
    few = [str(g) for g, n in zip(pg["group"], pg["n_tested"]) if ctx.sup.hides(n)] if not pg.empty else []
    return frozenset(ctx.suppressed_groups) | frozenset(few)


@dataclasses.dataclass(frozen=True)
class _Listing:
    """The audiograms and follow-ups the hearing pages list, selected once for all of them."""

    #: audiograms of the review period (the LISTED columns)
    period: pd.DataFrame
    #: follow-ups due in the review period
    due: pd.DataFrame
    #: group -> its people (every audiogram, any date)
    people: dict[str, np.ndarray]


def _listing(ctx: SiteContext, h: HearingResult) -> _Listing:
    start, end = _period(ctx)
    a = h.audiograms
    groups, names = pd.factorize(a["group"].to_numpy(object), sort=True)
    ids = a["person_id"].to_numpy(object)
    people = {str(g): pd.unique(ids[groups == k]) for k, g in enumerate(names)}
    return _Listing(period=_in_period(a, "date", start, end), due=_due_followups(h.followups, start, end),
                    people=people)


def _overview(ctx: SiteContext, h: HearingResult, slugs: dict[str, str], listing: _Listing) -> Page:
    years = _years(ctx)
    sup = ctx.suppressed_groups
    hidden_rows = _hidden_rows(ctx, h.period_groups)
    a = listing.period
    fu = listing.due
    shown_groups = [g for g in sorted(slugs) if g not in sup]
    page_charts = [
        per_year_chart(h.population, "all", "hearing-1", "all groups"),
        rate_by_group_chart(h.period_groups, hidden_rows, "hearing-2"),
        followup_chart(fu, "hearing-3"),
        indicators_chart(h.indicators, "all", "hearing-4", "all groups"),
        mean_average_chart(h.population, shown_groups, "hearing-5"),
        age_chart(h.age_norms, "hearing-6"),
        noise_chart(h.noise_expected, shown_groups, "hearing-7"),
    ]
    a_vis = a[~a["group"].isin(sorted(sup))]
    hidden = {p for g in sorted(sup) for p in listing.people.get(g, ())}
    fu_vis = fu[~fu["person_id"].isin(hidden)] if not fu.empty else fu
    flagged = a_vis[(a_vis["shift_status"] != "") | a_vis["recordable"]]
    context = {
        "has_data": not h.audiograms.empty,
        "tiles": _public_tiles(ctx, _headline_tiles(ctx, a, fu), a),
        "age_correction": ctx.programme.config.audiometry.age_correction,
        "retest_days": ctx.programme.config.audiometry.retest_days,
        "notice_days": ctx.programme.config.audiometry.notice_days,
        "group_table": group_table(h.period_groups, h.population, years, hidden_rows),
        "group_links": [{"group": g, "name": _group_names(ctx).get(g, g), "href": f"hearing/{slugs[g]}.html",
                         "suppressed": g in sup} for g in sorted(slugs)],
        "shifts_table": shifts_table(flagged, ctx),
        "followups_table": followups_table(fu_vis, ctx),
        "notes": list(h.notes),
        "any_suppressed": bool(set(slugs) & set(sup)),
        "n_candidates": int(h.summary.get("baseline_candidates", 0)),
        # restricted builds only: links to the per-person pages, by code
        "people_index": ctx.restricted,
    }
    return Page(slug="hearing", title="Hearing", template="hearing.html", section="hearing", context=context,
                charts=page_charts, in_nav=True)


def _group_names(ctx: SiteContext) -> dict[str, str]:
    """Return the name of each similar exposure group (groups.csv), by code."""
    groups = ctx.programme.table("groups")
    if "name" not in groups.columns:
        return {}
    return {str(g): str(n) for g, n in zip(groups["group"], groups["name"]) if str(n)}


def _group_page(ctx: SiteContext, h: HearingResult, group: str, slug: str, listing: _Listing) -> Page:
    start, end = _period(ctx)
    full = f"hearing/{slug}"
    cid = "hearing-" + slug
    name = _group_names(ctx).get(group) or group
    if group in ctx.suppressed_groups:
        return Page(slug=full, title=f"Hearing: {name}", template="hearing_group.html", section="hearing",
                    context={"group": group, "suppressed": True, "tiles": [], "shifts_table": None,
                             "followups_table": None, "group_name": name})
    a = listing.period[(listing.period["group"] == group).to_numpy(bool)]
    fu = listing.due
    fu = fu[fu["person_id"].isin(listing.people.get(group, np.array([], dtype=object)))]
    cases = _in_period(h.cases, "date", start, end)
    cases = cases[cases["group"] == group]
    page_charts = [
        per_year_chart(h.population, group, f"{cid}-1", group),
        mean_average_chart(h.population, [group], f"{cid}-2"),
        indicators_chart(h.indicators, group, f"{cid}-3", group),
        noise_chart(h.noise_expected, [group], f"{cid}-4", freqs=(3000, 4000, 6000)),
    ]
    flagged = a[(a["shift_status"] != "") | a["recordable"]]
    context = {"group": group, "suppressed": False, "tiles": _public_tiles(ctx, _tiles(h, a, fu, cases), a),
               "shifts_table": shifts_table(flagged, ctx), "followups_table": followups_table(fu, ctx),
               "group_name": name}
    return Page(slug=full, title=f"Hearing: {name}", template="hearing_group.html", section="hearing",
                context=context, charts=page_charts)


def build(ctx: SiteContext) -> list[Page]:
    """Return the hearing pages (person pages only in a restricted build)."""
    h = ctx.results.hearing
    if h is None:
        return [Page(slug="hearing", title="Hearing", template="hearing.html", section="hearing",
                     context={"has_data": False, "notes": ["The hearing stage did not run."], "tiles": [],
                              "group_links": [], "any_suppressed": False, "people_index": ctx.restricted}, in_nav=True)]
    groups = sorted(set(h.audiograms["group"].astype(str).unique()) - {""}) if not h.audiograms.empty else []
    slugs = group_slugs(groups)
    h = public_hearing(h, ctx)
    # the pages list a few columns of the per-ear audiograms: filtered by group and period without the rest
    h = dataclasses.replace(h, audiograms=h.audiograms[[c for c in LISTED if c in h.audiograms.columns]])
    listing = _listing(ctx, h)
    pages = [_overview(ctx, h, slugs, listing)]
    pages += [_group_page(ctx, h, g, slugs[g], listing) for g in groups]
    log.info("hearing pages: %d", len(pages))
    return pages
