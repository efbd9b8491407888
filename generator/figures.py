"""Headline figures: each one defined once, evaluated from the stages' typed results.

A :class:`Figure` names what is counted (population), over which time (the review period,
an as-of date or all years), against what (denominator), under which rule set, in which
unit, with which label and the clause or standard it answers to, and where it is shown and
explained. :func:`evaluate` computes every figure for one *snapshot*: the people in scope
between a start and an as-of date. The review period is one snapshot; the trends stage
evaluates the same definitions at each calendar year end (trends.compute_trends), so a
year's row on the trends page is the figure the overview shows for that year.

Public figures count people in scope in the period: hired on or before its end and not
gone before its start. A figure over all years says so in its label.

Nothing here knows HTML; the pages format :class:`FigureValue` as it is.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np
import pandas as pd

from .frames import as_bool, dates as _dates
from .rules import RuleSet

#: hours in the OSHA incidence-rate base: 100 full-time workers x 40 h x 50 weeks
#: (29 CFR 1904 recordkeeping forms, "incidence rate = N x 200,000 / EH")
RATE_BASE_HOURS = 200_000.0

#: unit of a figure -> how its value reads
COUNT, SHARE, RATE = "count", "share", "rate"


@dataclass(frozen=True)
class Snapshot:
    """What the figures of one as-of date are evaluated on."""

    #: first and last day covered (inclusive)
    start: pd.Timestamp
    as_of: pd.Timestamp
    #: headline rule set
    rule: RuleSet
    #: person_status() of the compliance stage at as_of: one row per person in scope
    status: pd.DataFrame
    #: hearing.audiograms (one row per audiogram and ear)
    audiograms: pd.DataFrame
    #: hearing.cases (one row per recordable case of a person)
    cases: pd.DataFrame
    #: audiometer checks per test day: [audiometer_id, date, ok]
    test_days: pd.DataFrame
    #: exposure.people: person_id, judged_level (headline rule set), first_exposed_date
    exposure_people: pd.DataFrame
    #: the action list (None when the snapshot is not the review period: actions are as of its end only)
    actions: pd.DataFrame | None = None
    #: hours worked by all employees over the snapshot (None: not recorded)
    hours_worked: float | None = None
    #: the dated records above sorted by date once, shared by snapshots of the same records
    #: (None: made from this snapshot's frames when first needed)
    records: Records | None = field(default=None, compare=False, repr=False)

    def dated(self) -> Records:
        """Return the snapshot's dated records (the shared ones, or made from its own frames)."""
        return self.records if self.records is not None else Records.of(self.audiograms, self.cases,
                                                                          self.test_days, self.exposure_people)


class _Dated:
    """Rows of one table sorted by their date (int64 nanoseconds; a blank date sorts first)."""

    def __init__(self, dates: pd.Series, people: np.ndarray | None = None, ok: np.ndarray | None = None) -> None:
        v = dates.to_numpy(dtype="datetime64[ns]").view(np.int64)
        order = np.argsort(v, kind="stable")
        self.dates = v[order]
        #: person code of each row (-1: none), when the rows are people's
        self.people = people[order] if people is not None else None
        #: running count of the rows marked ok, when the rows carry such a mark
        self.ok = np.r_[0, np.cumsum(ok[order])] if ok is not None else None

    def span(self, snap: Snapshot) -> slice:
        """Return the rows dated from the snapshot's start to its as-of date (inclusive)."""
        lo = np.searchsorted(self.dates, np.datetime64(snap.start, "ns").astype(np.int64), "left")
        hi = np.searchsorted(self.dates, np.datetime64(snap.as_of, "ns").astype(np.int64), "right")
        return slice(int(lo), int(max(lo, hi)))

    def people_in(self, snap: Snapshot) -> int:
        """Return how many distinct people have a row in the snapshot's dates."""
        assert self.people is not None
        codes = self.people[self.span(snap)]
        return int(np.count_nonzero(np.bincount(codes[codes >= 0])))


@dataclass(frozen=True)
class Records:
    """The audiograms, recordable cases and test days of a programme, each sorted by date once,
    and the level each person is judged on."""

    #: every audiogram row, and the rows with a threshold shift in force (by person)
    audiograms: _Dated | None
    sts: _Dated | None
    cases: _Dated | None
    #: test days, with their ok mark
    test_days: _Dated | None
    #: the headline level each person is judged on, by person id (None: no levels)
    levels: pd.Series | None

    @staticmethod
    def of(audiograms: pd.DataFrame | None, cases: pd.DataFrame | None, test_days: pd.DataFrame | None,
           exposure_people: pd.DataFrame | None) -> Records:
        """Return the records of these frames (None for an absent or empty one)."""
        aud = sts = None
        if audiograms is not None and not audiograms.empty:
            who = pd.factorize(audiograms["person_id"].astype(str).to_numpy())[0]
            when = _dates(audiograms)
            aud = _Dated(when, who)
            if "sts" in audiograms.columns:
                hit = as_bool(audiograms["sts"]).to_numpy()
                sts = _Dated(when[hit], who[hit])
        cs = _Dated(_dates(cases)) if cases is not None and not cases.empty else None
        days = _Dated(_dates(test_days), ok=as_bool(test_days["ok"]).to_numpy()) \
            if test_days is not None and not test_days.empty else None
        ep = exposure_people
        col = next((c for c in ("judged_level", "twa") if ep is not None and c in ep.columns), None)
        levels = None
        if ep is not None and not ep.empty and "person_id" in ep.columns and col is not None:
            ep = ep.drop_duplicates("person_id")
            levels = pd.Series(pd.to_numeric(ep[col], errors="coerce").to_numpy(float),
                               index=ep["person_id"].astype(str).to_numpy())
        return Records(aud, sts, cs, days, levels)


@dataclass(frozen=True)
class FigureValue:
    """One evaluated figure: its value and, for shares, the counts it rests on."""

    name: str
    value: float | int | None
    numerator: int | None = None
    denominator: int | None = None

    @property
    def known(self) -> bool:
        """Return whether the value could be computed."""
        return self.value is not None and not (isinstance(self.value, float) and np.isnan(self.value))


@dataclass(frozen=True)
class Figure:
    """The definition of one headline figure."""

    name: str
    #: plain words shown beside the value (tile label, table header)
    label: str
    #: COUNT, SHARE or RATE
    unit: str
    #: who or what is counted
    population: str
    #: "the review period", "as of the end of the review period" or "all years"
    period: str
    #: what a share or rate is taken of ("" for a count)
    denominator: str
    #: the clause or standard the figure answers to
    source: str
    #: page and anchor where the figure is explained (relative to the site root)
    explained: str
    #: page slugs and export files that show it ("index", "programme", "trends", "review",
    #: "summary.json", ...); the site test checks every one
    shown_on: tuple[str, ...]
    #: evaluated at every calendar year end for the trends page
    yearly: bool
    #: calls for attention when above zero (shares: when below one)
    attention: bool
    evaluate: Callable[[Snapshot], FigureValue] = field(repr=False, compare=False)
    #: "headline" (the programme's rule set) or a rule-set independent source
    rules: str = "headline"

    def described(self, rule: RuleSet) -> dict[str, str]:
        """Return the definition as plain text fields (methods page, summary.json)."""
        return {"label": self.label, "unit": self.unit, "population": self.population, "period": self.period,
                "denominator": self.denominator, "rules": rule.name if self.rules == "headline" else self.rules,
                "source": self.source, "explained": self.explained}


# ---------------------------------------------------------------------------------------
# evaluation helpers


def _count(name: str, n: Any) -> FigureValue:
    return FigureValue(name, int(n))


def _share(name: str, num: Any, den: Any) -> FigureValue:
    num, den = int(num), int(den)
    return FigureValue(name, None if den == 0 else round(num / den, 4), num, den)


def _must_active(s: pd.DataFrame) -> pd.Series:
    """People who must have a current audiogram: exposed, employed, past their baseline time limit."""
    base = s["baseline_status"].to_numpy(object, na_value="")
    return s["must_enrol"] & s["active"] & ~((base == "scheduled") | (base == "due_soon"))


def top_edge(rule: RuleSet) -> float | None:
    """Return the level of the rule set's top exposure band (its limit value, else its highest action value)."""
    vals = [v for v in (rule.lower_action_value, rule.upper_action_value, rule.limit_value) if v is not None]
    return float(max(vals)) if vals else None


def judged_levels(snap: Snapshot) -> pd.Series:
    """Return the headline level each in-scope person is judged on (NaN: not measured), aligned with status."""
    lv = snap.dated().levels
    if lv is None:
        return pd.Series(np.nan, index=snap.status.index)
    pos = lv.index.get_indexer(snap.status["person_id"].astype(str).to_numpy())
    out = pd.Series(np.where(pos >= 0, lv.to_numpy()[pos], np.nan), index=snap.status.index)
    # nobody is counted as exposed before their first exposure (as the programme's duties start then)
    first = snap.status["first_exposed_date"]
    return out.where(first.isna() | (first <= snap.as_of))


def _top_band(snap: Snapshot) -> FigureValue:
    edge = top_edge(snap.rule)
    if edge is None:
        return FigureValue("exposed_top_band", None)
    lv = judged_levels(snap).to_numpy(float)
    return _count("exposed_top_band", (np.round(np.nan_to_num(lv, nan=-np.inf), 6) >= edge).sum())


def _sts(snap: Snapshot) -> FigureValue:
    sts = snap.dated().sts
    if sts is None:
        return _count("people_with_sts", 0)
    return _count("people_with_sts", sts.people_in(snap))


def _tested(snap: Snapshot) -> FigureValue:
    aud = snap.dated().audiograms
    if aud is None:
        return _count("people_tested", 0)
    return _count("people_tested", aud.people_in(snap))


def _cases_in(snap: Snapshot) -> int:
    c = snap.dated().cases
    if c is None:
        return 0
    sl = c.span(snap)
    return sl.stop - sl.start


def _rate(snap: Snapshot) -> FigureValue:
    n = _cases_in(snap)
    h = snap.hours_worked
    if not h:
        return FigureValue("recordable_rate", None, n, None)
    return FigureValue("recordable_rate", round(incidence_rate(n, h), 3), n, int(round(h)))


def incidence_rate(cases: float, hours: float) -> float:
    """Return cases per 200,000 hours worked (OSHA: N x 200,000 / EH)."""
    return float(cases) * RATE_BASE_HOURS / float(hours)


def _test_days(snap: Snapshot) -> FigureValue:
    t = snap.dated().test_days
    if t is None:
        return FigureValue("audiometer_days_ok_share", None, 0, 0)
    sl = t.span(snap)
    assert t.ok is not None
    return _share("audiometer_days_ok_share", t.ok[sl.stop] - t.ok[sl.start], sl.stop - sl.start)


def _actions(name: str, overdue: bool) -> Callable[[Snapshot], FigureValue]:
    def run(snap: Snapshot) -> FigureValue:
        a = snap.actions
        if a is None:
            return FigureValue(name, None)
        return _count(name, a["status"].eq("overdue").sum() if overdue else len(a))
    return run


def _status(name: str, fn: Callable[[pd.DataFrame], Any]) -> Callable[[Snapshot], FigureValue]:
    def run(snap: Snapshot) -> FigureValue:
        return _count(name, fn(snap.status))
    return run


def _status_share(name: str, num: Callable[[pd.DataFrame], pd.Series],
                  den: Callable[[pd.DataFrame], pd.Series]) -> Callable[[Snapshot], FigureValue]:
    def run(snap: Snapshot) -> FigureValue:
        s = snap.status
        d = den(s)
        return _share(name, (num(s) & d).sum(), d.sum())
    return run


def _overdue_audiograms(s: pd.DataFrame) -> int:
    return _overdue(s, "audiogram_status") + _overdue(s, "baseline_status") + _overdue(s, "exit_status")


def _overdue(s: pd.DataFrame, col: str) -> int:
    """Return how many rows of status column *col* say "overdue" (compared as Python texts, whatever the dtype)."""
    return int(np.count_nonzero(s[col].to_numpy(object, na_value="") == "overdue"))


# ---------------------------------------------------------------------------------------
# the definitions

_SCOPE = "people in scope in the period (hired on or before its end, not gone before its start)"
_PERIOD = "the review period"
_AS_OF = "as of the end of the review period"
_EVERYWHERE = ("index", "review", "summary.json")

FIGURES: tuple[Figure, ...] = (
    Figure("in_scope", "People in the programme's scope", COUNT, _SCOPE, _PERIOD, "", "the programme's scope",
           "programme.html#enrolment", _EVERYWHERE + ("trends",), True, False,
           _status("in_scope", len), rules="every rule set"),
    Figure("must_be_enrolled", "Exposed at or above the action value (must be in the programme)", COUNT,
           "people in scope judged exposed at or above the headline rule set's action value, without protectors",
           _AS_OF, "", "enrolment", "programme.html#enrolment",
           _EVERYWHERE + ("programme", "trends"), True, False,
           _status("must_be_enrolled", lambda s: s["must_enrol"].sum())),
    Figure("exposed_top_band", "People exposed at or above the limit value", COUNT,
           "people in scope whose own level (or their group's) reaches the headline rule set's top exposure category, "
           "without protectors", _AS_OF, "", "limit_value", "exposure.html#exposure-figures",
           _EVERYWHERE + ("exposure", "trends"), True, True, _top_band),
    Figure("not_enrolled", "Exposed but without audiometry or training records", COUNT,
           "people in scope who must be in the programme and have no audiometry or training records",
           _AS_OF, "", "enrolment", "programme.html#enrolment", _EVERYWHERE + ("programme", "trends"), True, True,
           _status("not_enrolled", lambda s: (s["must_enrol"] & ~s["has_records"]).sum())),
    Figure("people_tested", "People tested (audiograms in the period)", COUNT,
           "people with an audiogram dated in the period", _PERIOD, "", "periodic",
           "hearing.html#hearing-figures", _EVERYWHERE + ("hearing", "trends"), True, False, _tested,
           rules="every rule set"),
    Figure("people_with_sts", "People with a standard threshold shift in the period", COUNT,
           "people with a standard threshold shift in force determined on an audiogram dated in the period",
           _PERIOD, "", "29 CFR 1910.95(g)(10)", "hearing.html#hearing-figures",
           _EVERYWHERE + ("hearing", "trends"), True, True, _sts, rules="US OSHA 29 CFR 1910.95(g)(10)"),
    Figure("recordable_cases", "Recordable hearing-loss cases in the period", COUNT,
           "cases: one per person and audiogram whatever the number of ears; a new case in the same person "
           "only after the baseline is revised", _PERIOD, "", "29 CFR 1904.10(a), (b)(2)",
           "hearing.html#hearing-figures", _EVERYWHERE + ("hearing", "trends"), True, True,
           lambda snap: _count("recordable_cases", _cases_in(snap)), rules="US OSHA 29 CFR 1904.10"),
    Figure("recordable_rate", "Recordable hearing-loss cases per 200,000 hours worked", RATE,
           "recordable cases in the period", _PERIOD, "200,000 hours worked (100 full-time workers, 40 h x 50 weeks)",
           "29 CFR 1904 incidence rate (N x 200,000 / hours worked)", "hearing.html#hearing-figures",
           _EVERYWHERE + ("hearing", "trends"), True, False, _rate, rules="US OSHA 29 CFR 1904"),
    Figure("open_actions", "Open actions", COUNT, "open actions on the action list, every section", _AS_OF, "",
           "every rule behind an action", "actions.html", _EVERYWHERE + ("actions",), False, True,
           _actions("open_actions", False)),
    Figure("overdue_actions", "Overdue actions", COUNT, "actions on the action list whose due date has passed",
           _AS_OF, "", "every rule behind an action", "actions.html", _EVERYWHERE + ("actions",), False, True,
           _actions("overdue_actions", True)),
    Figure("overdue_audiograms", "Overdue audiograms (baseline, annual or exit)", COUNT,
           "baseline, annual and exit audiograms of people in scope whose due date has passed", _AS_OF, "",
           "baseline, periodic", "programme.html#due", _EVERYWHERE + ("programme", "trends"), True, True,
           _status("overdue_audiograms", _overdue_audiograms)),
    Figure("overdue_baselines", "Overdue baseline audiograms", COUNT,
           "people in scope whose baseline audiogram is past its time limit", _AS_OF, "", "baseline",
           "programme.html#due", _EVERYWHERE + ("trends",), True, True,
           _status("overdue_baselines", lambda s: _overdue(s, "baseline_status"))),
    Figure("overdue_training", "Overdue training", COUNT, "people in scope whose training is past due", _AS_OF,
           "", "training", "programme.html#due", _EVERYWHERE + ("programme", "trends"), True, True,
           _status("overdue_training", lambda s: _overdue(s, "training_status"))),
    Figure("current_audiogram_share", "With a current audiogram", SHARE,
           "people who must be in the programme with an audiogram within the audiogram interval", _AS_OF,
           "people who must be in the programme, employed, past their baseline time limit", "periodic",
           "programme.html#due", _EVERYWHERE + ("programme", "trends"), True, False,
           _status_share("current_audiogram_share", lambda s: s["current_audiogram"], _must_active)),
    Figure("trained_share", "Trained within the training interval", SHARE,
           "people in the programme trained within the training interval", _AS_OF,
           "people in the programme (exposed, or in an exposed group), employed", "training",
           "programme.html#training", _EVERYWHERE + ("programme", "trends"), True, False,
           _status_share("trained_share", lambda s: s["trained_current"], lambda s: s["in_programme"] & s["active"])),
    Figure("protector_share", "With a hearing protector on record", SHARE,
           "people in the programme with a protector issued or fitted", _AS_OF,
           "people in the programme, employed", "protector", "programme.html#training",
           _EVERYWHERE + ("programme", "trends"), True, False,
           _status_share("protector_share", lambda s: s["has_protector"], lambda s: s["protector_required"])),
    Figure("fit_test_share", "Fit-tested (personal attenuation rating)", SHARE,
           "people in the programme with a fit test on record", _AS_OF, "people in the programme, employed",
           "the programme's own setting (individual fit testing)", "programme.html#training",
           _EVERYWHERE + ("programme", "trends"), True, False,
           _status_share("fit_test_share", lambda s: s["has_fit_test"], lambda s: s["protector_required"]),
           rules="the programme's own setting"),
    Figure("audiometer_days_ok_share", "Test days in the period with valid audiometer checks", SHARE,
           "test days in the period (audiometer and date) with a functional check that day, calibrations in date "
           "and a booth within its limits", _PERIOD, "test days in the period", "functional, acoustic, exhaustive, booth",
           "programme.html#audiometers", _EVERYWHERE + ("programme", "trends"), True, False, _test_days),
)

BY_NAME: dict[str, Figure] = {f.name: f for f in FIGURES}


def source_text(fig: Figure, rule: RuleSet, clause_for: Callable[[RuleSet, str], str]) -> str:
    """Return the clause or standard *fig* answers to under *rule*.

    A source naming rule keys ("enrolment", "limit_value", ...) is looked up in the rule set;
    any other text is a fixed citation.
    """
    keys = [k.strip() for k in fig.source.split(",")]
    if fig.source == "limit_value":
        return str(rule.clauses.get("limit_value") or rule.short)
    if all(k.isidentifier() for k in keys):
        return "; ".join(dict.fromkeys(clause_for(rule, k) for k in keys))
    return fig.source


def label_for(fig: Figure, rule: RuleSet) -> str:
    """Return the label of *fig* under *rule* (the top band names its level)."""
    if fig.name == "exposed_top_band":
        edge = top_edge(rule)
        metric = "LEX,8h" if rule.metric == "lex" else "TWA"
        return f"People exposed at or above {edge:g} dB(A) ({rule.short} {metric}, without protectors)" \
            if edge is not None else fig.label
    return fig.label


# ---------------------------------------------------------------------------------------
# evaluation


@dataclass(frozen=True)
class FigureSet:
    """Every headline figure of one snapshot, with the definitions' texts under the headline rule set."""

    start: pd.Timestamp
    as_of: pd.Timestamp
    values: dict[str, FigureValue]
    labels: dict[str, str]
    sources: dict[str, str]

    def __getitem__(self, name: str) -> FigureValue:
        return self.values[name]

    def __contains__(self, name: object) -> bool:
        return name in self.values


def evaluate(snap: Snapshot, figures: tuple[Figure, ...] = FIGURES) -> dict[str, FigureValue]:
    """Return every figure of *figures* evaluated on *snap*."""
    return {f.name: f.evaluate(snap) for f in figures}


def figure_set(snap: Snapshot, clause_for: Callable[[RuleSet, str], str]) -> FigureSet:
    """Return the figures of *snap* with their labels and sources under the snapshot's rule set."""
    return FigureSet(start=snap.start, as_of=snap.as_of, values=evaluate(snap),
                     labels={f.name: label_for(f, snap.rule) for f in FIGURES},
                     sources={f.name: source_text(f, snap.rule, clause_for) for f in FIGURES})


def yearly() -> tuple[Figure, ...]:
    """Return the figures evaluated at every year end."""
    return tuple(f for f in FIGURES if f.yearly)


def row(values: dict[str, FigureValue]) -> dict[str, Any]:
    """Return one trends row: each figure's value under its name."""
    return {name: v.value for name, v in values.items()}
