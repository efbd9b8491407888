"""Programme compliance: enrolment, due dates, training, protectors, audiometer checks,
one action list and year-over-year trends.

Every figure is judged "as of" the end of the review period (``config.period.end``).
Date rules, decided once and used everywhere (see content/methods/programme.md):

* "within N months" / "every N months" is calendar months: ``date + pd.DateOffset(months=N)``
  (29 CFR 1910.95(g)(5) "within 6 months", (g)(6) "at least annually" = 12 months,
  (k)(2) training "repeated annually" = 12 months). The resulting due date is *inclusive*:
  done on the due date is on time, the day after is late.
* An open item is *overdue* when its due date lies before the as-of date and *due soon*
  when it falls within :data:`DUE_SOON_DAYS` days from the as-of date (inclusive).
* People who left before the period starts, or were hired after it ends, are out of scope.

The module is pure pandas: it knows nothing of HTML, templates or charts.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from . import audiometers
from .audiometers import (  # noqa: F401  (re-exported for the pages and tests)
    ACOUSTIC_MONTHS, BOOTH_LIMITS, EXHAUSTIVE_MONTHS, FLAGGED_COLUMNS, STATUS_COLUMNS, AudiometerChecks,
    booth_judgement)
from .frames import add_months, as_bool as _bool, as_dates as _as_dates, col as _col, dates as _dates, empty as _empty, lookup as _lookup, loaded_person_codes, person_codes, share as _share, text_codes, table as _table, ts as _ts
from .hearing import LEFT_STATUS
from .model import Programme
from .exposure import ExposureResult
from .hearing import HearingResult
from .protection import ProtectionResult
from .rules import RuleSet, load_rule_set

log = logging.getLogger(__name__)

#: Days ahead of the as-of date in which an open item is listed as due soon.
DUE_SOON_DAYS = 60
#: An audiogram dated this many days before the leave date (or later) counts as the exit
#: audiogram even when its kind is not "exit" (common practice).
EXIT_WINDOW_DAYS = 30
#: Baseline limit with a mobile test van, months (29 CFR 1910.95(g)(5)(ii)).
MOBILE_VAN_MONTHS = 12

#: Constants of this stage for the methods page: (name, value, unit, source).
PARAMETERS: list[tuple[str, Any, str, str]] = [
    ("due soon: days ahead of the as-of date", DUE_SOON_DAYS, "days", "our choice"),
    ("exit audiogram window before the leave date", EXIT_WINDOW_DAYS, "days", "common practice"),
    ("baseline limit with a mobile test van", MOBILE_VAN_MONTHS, "months", "29 CFR 1910.95(g)(5)(ii)"),
    ("acoustic and exhaustive calibration intervals", "rule set", "months",
     "acoustic_calibration_months, exhaustive_calibration_months of the rule set"),
    *[(f"booth maximum at {f} Hz", v, "dB", f"the programme's own setting: {v:g} dB") for f, v in BOOTH_LIMITS.items()],
    ("baseline, annual audiogram and training intervals", "rule set", "months",
     "baseline_months, audiogram_interval_months, training_interval_months of the rule set"),
    ("who is owed audiometry, training and protectors", "rule set", "",
     "duties of the rule set: the value (or peak value) each starts at"),
]

ACTION_COLUMNS = ["subject", "subject_type", "kind", "detail", "due_date", "clause", "source", "status"]
DUE_COLUMNS = ["person_id", "group", "kind", "due_date", "status", "clause"]

#: The rule-set clause behind each item of this stage (generator/rules: duties and CLAUSE_KEYS).
CLAUSE_OF = {"enrolment": "audiometry", "protector": "protectors_available"}

@dataclass
class ComplianceResult:
    """Everything the programme, actions, trends and review pages show."""

    #: as-of date (end of the review period)
    as_of: pd.Timestamp
    #: headline rule-set id
    rules: str
    #: one row per person in scope (see _person_status for the columns)
    people: pd.DataFrame
    #: [person_id, group, mismatch, detail]; mismatch "exposed_no_records" or "records_not_exposed"
    enrolment: pd.DataFrame
    #: per group: [group, n_in_scope, n_must_enrol, n_enrolled, n_exposed_no_records,
    #: n_records_not_exposed]
    enrolment_groups: pd.DataFrame
    #: overdue and due-soon items: [person_id, group, kind, due_date, status, clause]
    due: pd.DataFrame
    #: [group, n_required, n_trained, completion]
    training_groups: pd.DataFrame
    #: [group, n_required, n_with_protector, n_fit_tested, protector_share, fit_test_share]
    protector_groups: pd.DataFrame
    #: refits after a shift: [person_id, ear, trigger_date, due_date, done_date, status, clause]
    refits: pd.DataFrame
    #: [audiometer_id, date, functional_ok, acoustic_ok, exhaustive_ok, booth_ok, ok, reason]
    audiometer_status: pd.DataFrame
    #: audiograms on a day without a valid check or in a booth over the limits:
    #: [person_id, date, ear, audiometer_id, reason]
    audiograms_flagged: pd.DataFrame
    #: latest state of each audiometer: [audiometer_id, last_functional, last_acoustic,
    #: acoustic_due, last_exhaustive, exhaustive_due, last_booth, booth_ok, booth_detail]
    audiometers: pd.DataFrame
    #: [subject, subject_type, kind, detail, due_date, clause, source, status], sorted
    actions: pd.DataFrame
    #: headline figures, JSON-serialisable, sorted keys
    summary: dict[str, Any]
    #: notes on what could not be judged (shown on the programme page)
    notes: list[str] = field(default_factory=list)
    findings: list[Any] = field(default_factory=list)
    #: the per-person inputs the judgement used (the trends stage evaluates them at each year end)
    inputs: ComplianceInputs | None = None


# ---------------------------------------------------------------------------------------
# small helpers


def clause_for(rule: RuleSet, key: str) -> str:
    """Return the clause the rule set cites for item *key* of this stage."""
    return rule.clause(CLAUSE_OF.get(key, key))


# ---------------------------------------------------------------------------------------
# inputs gathered once


@dataclass
class ComplianceInputs:
    """Per-person inputs of every rule, gathered once from the tables and earlier stages."""

    people: pd.DataFrame  # person_id, group, hire_date, leave_date, must_enrol, first_exposed_date, group_exposed
    audiograms: pd.DataFrame  # person_id, date, kind (one row per person and date)
    training: pd.DataFrame  # person_id, date
    fits: pd.DataFrame  # person_id, protector_id, date, par
    rule: RuleSet
    baseline_months: float | None
    interval_months: float | None
    training_months: float | None
    #: the person code of each row of people, audiograms, training and fits, in one code space
    #: in which codes sort as the ids do (frames.loaded_person_codes); None: coded from the ids
    codes: dict[str, np.ndarray] | None = field(default=None, repr=False, compare=False)
    #: the person keys below, made on first use (every as-of date uses the same)
    _keys: PersonKeys | None = field(default=None, init=False, repr=False, compare=False)

    def keys(self) -> PersonKeys:
        """Return the people sorted by person id and the integer person code of every record."""
        if self._keys is None:
            self._keys = PersonKeys.of(self)
        return self._keys


@dataclass(frozen=True)
class PersonKeys:
    """Integer person codes, factorised once: a code per distinct person id of the people table."""

    #: the people sorted by person id (one person may be on several rows)
    people: pd.DataFrame
    #: the distinct person ids; a code is a position in it
    ids: pd.Index
    #: the code of each row of *people*, of the audiograms, training and fits (-1: not a known person)
    person: np.ndarray
    audiogram: np.ndarray
    training: np.ndarray
    fit: np.ndarray
    #: the earliest date (from _first_by_code) of each person code's audiogram, protector issue
    #: and fit test, and of each row's exit audiogram: the same at every as-of date
    first_audiogram: np.ndarray
    first_protector: np.ndarray
    first_fit_test: np.ndarray
    first_exit: np.ndarray

    @staticmethod
    def of(inp: ComplianceInputs) -> PersonKeys:
        c = inp.codes
        if c is not None and not all(len(c[k]) == len(df) for k, df in (
                ("people", inp.people), ("audiograms", inp.audiograms), ("training", inp.training),
                ("fits", inp.fits))):
            c = None
        if c is None:  # no codes from the load: code the ids here
            p = inp.people.sort_values("person_id", kind="mergesort").reset_index(drop=True)
            ids = pd.Index(p["person_id"].astype(str).to_numpy())
            if not ids.is_unique:  # one person on several rows: each row gets the person's records
                ids = pd.Index(ids.drop_duplicates())
            person, acode = _codes(ids, p["person_id"]), _codes(ids, inp.audiograms["person_id"])
            tcode, fcode = _codes(ids, inp.training["person_id"]), _codes(ids, inp.fits["person_id"])
        else:  # the person codes of the load, renumbered by binary search among the people's
            order = np.argsort(c["people"], kind="stable")
            p = inp.people.iloc[order].reset_index(drop=True)
            gp = c["people"][order]
            distinct = np.ones(len(gp), dtype=bool)
            distinct[1:] = gp[1:] != gp[:-1]
            ids = pd.Index(p["person_id"].astype(str).to_numpy()[distinct])
            person, acode = _code_among(gp[distinct], gp), _code_among(gp[distinct], c["audiograms"])
            tcode, fcode = _code_among(gp[distinct], c["training"]), _code_among(gp[distinct], c["fits"])
        a = inp.audiograms
        known = acode >= 0
        adate = a["date"].to_numpy(dtype="datetime64[ns]")[known]
        # exit audiogram: one of kind exit, or one dated within the window before the leave date
        leave = p["leave_date"].to_numpy(dtype="datetime64[ns]")
        if len(ids) == len(p):  # one row per person: the row is the person's code
            ex = pd.DataFrame({"row": acode[known], "date": adate, "is_exit": a["is_exit"].to_numpy(dtype=bool)[known]})
            ex["leave"] = leave[ex["row"].to_numpy()]
        else:
            rows = pd.DataFrame({"code": person, "row": np.arange(len(p)), "leave": leave})
            ex = pd.DataFrame({"code": acode[known], "date": adate,
                               "is_exit": a["is_exit"].to_numpy(dtype=bool)[known]}).merge(rows, on="code", how="inner")
        ex = ex[ex["is_exit"] | (ex["date"] >= ex["leave"] - pd.Timedelta(days=EXIT_WINDOW_DAYS))]
        f = inp.fits
        fdate = f["date"].to_numpy(dtype="datetime64[ns]")
        firsts = [_first_by_code(fcode[sel], fdate[sel], len(ids)) for sel in (
            f["protector_id"].ne("").to_numpy() & (fcode >= 0), f["par"].notna().to_numpy() & (fcode >= 0))]
        return PersonKeys(p, ids, person, acode, tcode, fcode,
                          _first_by_code(acode[known], adate, len(ids)), firsts[0], firsts[1],
                          _first_by_code(ex["row"].to_numpy(), ex["date"].to_numpy(dtype="datetime64[ns]"), len(p)))


def _gather(programme: Programme, exposure: ExposureResult | None, rule: RuleSet) -> tuple[ComplianceInputs, list[str]]:
    """Collect the per-person inputs every rule needs."""
    notes: list[str] = []
    people = _table(programme, "people")
    if people.empty and "person_id" not in people.columns:
        people = pd.DataFrame({"person_id": pd.Series(dtype=str), "group": pd.Series(dtype=str)})
    p = pd.DataFrame({
        "person_id": _col(people, "person_id", "").astype(str),
        "group": _col(people, "group", "").astype(str),
        "hire_date": _dates(people, "hire_date"),
        "leave_date": _dates(people, "leave_date"),
    })
    ex_people = None if exposure is None else exposure.people
    ex_groups = None if exposure is None else exposure.groups
    if ex_groups is not None and {"group", "exposed"} <= set(ex_groups.columns):
        gexp = ex_groups.drop_duplicates("group").set_index("group")["exposed"]
        p["group_exposed"] = _bool(_lookup(p["group"], gexp))
    else:
        p["group_exposed"] = False
    # duties that may start at another value than audiometry (EU: training and protectors at the
    # lower action values); without per-duty judgements they follow the audiometry duty
    for duty, col in (("training", "group_training"), ("protectors_available", "group_protectors")):
        if ex_groups is not None and {"group", f"exposed_{duty}"} <= set(ex_groups.columns):
            gd = ex_groups.drop_duplicates("group").set_index("group")[f"exposed_{duty}"]
            p[col] = _bool(_lookup(p["group"], gd))
        else:
            p[col] = p["group_exposed"]
    if ex_people is not None and {"person_id", "exposed"} <= set(ex_people.columns):
        ep = ex_people.drop_duplicates("person_id").set_index("person_id")
        personal = _lookup(p["person_id"], ep["exposed"])
        # a person the exposure stage did not judge falls back on the group's judgement
        p["must_enrol"] = _bool(personal.where(personal.notna(), p["group_exposed"]))
        for duty, col, gcol in (("training", "training_duty", "group_training"),
                                ("protectors_available", "protector_duty", "group_protectors")):
            if f"exposed_{duty}" in ep.columns:
                own = _lookup(p["person_id"], ep[f"exposed_{duty}"])
                p[col] = _bool(own.where(own.notna(), p[gcol]))
            else:
                p[col] = p["must_enrol"]
        first = _as_dates(_col(ep, "first_exposed_date", pd.NaT))
        p["first_exposed_date"] = _as_dates(_lookup(p["person_id"], first))
    else:
        p["must_enrol"] = p["group_exposed"]
        p["training_duty"] = p["group_training"]
        p["protector_duty"] = p["group_protectors"]
        p["first_exposed_date"] = pd.Series(pd.NaT, index=p.index, dtype="datetime64[ns]")
        if ex_people is None:
            notes.append("No exposure results: nobody can be judged as required to be in the programme.")
    # first exposure unknown: fall back on the hire date (the earliest the person can be exposed)
    p["first_exposed_date"] = p["first_exposed_date"].where(
        p["first_exposed_date"].notna() | ~p["must_enrol"], p["hire_date"])

    a, arows = _audiogram_days(programme)
    t, trows = _training_days(programme)

    fits = _table(programme, "protector_fits")
    f = pd.DataFrame({"person_id": _col(fits, "person_id", "").astype(str),
                      "protector_id": _col(fits, "protector_id", "").astype(str),
                      "date": _dates(fits),
                      "par": pd.to_numeric(_col(fits, "par"), errors="coerce")})

    cfg = programme.config
    baseline = rule.baseline_months
    if baseline is not None and getattr(cfg.audiometry, "mobile_van", False):
        baseline = max(float(baseline), float(MOBILE_VAN_MONTHS))
    interval = rule.audiogram_interval_months
    training = rule.training_interval_months
    if baseline is None:
        notes.append(f"{rule.short} sets no time limit for the baseline audiogram: baselines are not "
                     "judged for timeliness.")
    if interval is None:
        notes.append(f"{rule.short} sets no interval between audiograms: periodic audiograms are not "
                     "judged as due.")
    if training is None:
        notes.append(f"{rule.short} sets no training interval: only a first training is judged as due.")
    codes = None
    loaded = loaded_person_codes(programme, "people", "audiograms", "training", "protector_fits")
    if loaded is not None:
        codes = {"people": loaded[0], "audiograms": loaded[1][arows], "training": loaded[2][trows],
                 "fits": loaded[3]}
    return ComplianceInputs(p, a, t, f, rule, baseline, interval, training, codes), notes


def _audiogram_days(programme: Programme) -> tuple[pd.DataFrame, np.ndarray]:
    """Return one row per person and test date (person_id, date, kind, is_exit), sorted by
    person and date, and the position in the audiograms table of each one's first row.

    An "exit" kind on either ear marks the test as exit. The rows are grouped on integer
    codes (person ids factorised in sorted order, and dates), never on the id text.
    """
    aud = _table(programme, "audiograms")
    when = _dates(aud)
    dated = when.notna().to_numpy()
    who, person_ids = person_codes(programme, "audiograms", dated)
    # the kind as integer codes of the loaded column (its words looked at once, not per row)
    kcode, kword = text_codes(_col(aud, "kind", "periodic"))
    kcode = kcode[dated]
    is_exit = (kword == "exit")[kcode]
    adate = when.to_numpy(dtype="datetime64[ns]")[dated]
    run, at = _runs(who, adate.view(np.int64), who >= 0)
    kinds = np.where(kword == "", "periodic", kword).astype(object)[kcode[at]]
    a = pd.DataFrame({"person_id": person_ids.take(who[at]), "date": adate[at], "kind": kinds,
                      "is_exit": np.bincount(run[who >= 0], weights=is_exit[who >= 0], minlength=len(at)) > 0})
    return a, np.flatnonzero(dated)[at]


def _training_days(programme: Programme) -> tuple[pd.DataFrame, np.ndarray]:
    """Return the dated training records, one per person and date (the first row), sorted by
    person and date, with their labels, and the position of each in the training table."""
    tr = _table(programme, "training")
    tdate = _dates(tr)
    tdated = tdate.notna().to_numpy()
    tcode, _ = person_codes(programme, "training", tdated)
    _, tat = _runs(tcode, tdate.to_numpy(dtype="datetime64[ns]")[tdated].view(np.int64),
                   np.ones(len(tcode), dtype=bool))
    tpos = np.flatnonzero(tdated)[tat]
    return pd.DataFrame({"person_id": _col(tr, "person_id", "").astype(str).iloc[tpos],
                         "date": tdate.iloc[tpos]}), tpos


# ---------------------------------------------------------------------------------------
# per-person status as of one date, or of many dates in one pass


def _state_codes(due: pd.Series, as_of: pd.Timestamp | pd.Series, required: Any, done: Any) -> np.ndarray:
    """Return per row the code of its state in _STATES (0 not required, 1 done, 2 overdue, 3 due soon, 4 scheduled)."""
    d = due.to_numpy(dtype="datetime64[ns]")
    a = as_of.to_numpy(dtype="datetime64[ns]") if isinstance(as_of, pd.Series) else np.datetime64(as_of, "ns")
    soon = a + np.timedelta64(DUE_SOON_DAYS, "D")
    # comparisons with a blank due date (NaT) are false; a blank due date is overdue
    return np.select([~np.asarray(required, dtype=bool), np.asarray(done, dtype=bool), np.isnat(d) | (d < a),
                      d <= soon], [0, 1, 2, 3], 4)


def _classify(due: pd.Series, as_of: pd.Timestamp, required: pd.Series, done: pd.Series) -> pd.Series:
    """Return 'not_required' / 'done' / 'overdue' / 'due_soon' / 'scheduled' per row."""
    return _words(_state_codes(due, as_of, required, done), due.index)


def _words(code: np.ndarray, index: pd.Index) -> pd.Series:
    # the words are taken from one small array (building a text column row by row is slow)
    return pd.Series(_STATES.array.take(code), index=index)


#: the states _state_codes returns, by code; then the words that replace some of them
_STATES = pd.Series(["not_required", "done", "overdue", "due_soon", "scheduled", "current", "late", "on_time"])
_CURRENT, _LATE, _ON_TIME = 5, 6, 7


def _last_on_or_before(codes: np.ndarray, dates: np.ndarray, q_codes: np.ndarray,
                       q_dates: np.ndarray) -> np.ndarray:
    """Return per query the latest event date on or before the query's date, for the same person code.

    *codes*, *dates*: the events (no NaT); *q_codes*, *q_dates*: the queries (codes >= 0). NaT
    where the person has no such event. The queries have few distinct dates: a table of each
    person's latest event on or before each of them answers every query.
    """
    out = np.full(len(q_codes), np.datetime64("NaT"), dtype="datetime64[ns]")
    if len(codes) == 0 or len(q_codes) == 0:
        return out
    q_rank, q_uniq = pd.factorize(q_dates.astype("datetime64[ns]").view(np.int64), sort=True)
    k = len(q_uniq)
    ev = dates.astype("datetime64[ns]").view(np.int64)
    # an event counts for the query dates from the first one on or after it
    first_q = np.searchsorted(q_uniq, ev, "left")
    use = first_q < k
    n_codes = int(max(codes.max(), q_codes.max())) + 1
    table = np.full(n_codes * k, np.iinfo(np.int64).min, dtype=np.int64)  # the smallest int64 is NaT
    np.maximum.at(table, codes[use].astype(np.int64) * k + first_q[use], ev[use])
    table = np.maximum.accumulate(table.reshape(n_codes, k), axis=1)
    return table[q_codes, q_rank].view("datetime64[ns]")


def _first_by_code(codes: np.ndarray, dates: np.ndarray, n: int) -> np.ndarray:
    """Return the earliest event date of each person code 0..n-1 as int64 nanoseconds.

    The int64 maximum means no event; a blank event date (NaT, the smallest int64) counts as
    the earliest. The answer is compared with the as-of dates by `_present`.
    """
    vals = dates.astype("datetime64[ns]").astype(np.int64)  # a blank date (NaT) is the smallest int64
    first = np.full(n, np.iinfo(np.int64).max, dtype=np.int64)
    np.minimum.at(first, codes, vals)
    return first


def _present(first: np.ndarray, q_dates: np.ndarray) -> np.ndarray:
    """Return whether the earliest event (from _first_by_code) is on or before each as-of date."""
    return first <= q_dates.astype("datetime64[ns]").astype(np.int64)


def _codes(ids: pd.Index, values: pd.Series) -> np.ndarray:
    return ids.get_indexer(values.astype(str).to_numpy())


def _code_among(known: np.ndarray, codes: np.ndarray) -> np.ndarray:
    """Return the position of each of *codes* in the sorted distinct *known* codes (-1: not there)."""
    if len(known) == 0:
        return np.full(len(codes), -1, dtype=np.int64)
    at = np.minimum(np.searchsorted(known, codes), len(known) - 1)
    return np.where(known[at] == codes, at, -1).astype(np.int64)


def _runs(codes: np.ndarray, values: np.ndarray, use: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Group the rows *use* selects by (code, value), both integers, in sorted order.

    Return (the group number of each row, -1 for rows not used; the first row of each group,
    in group order): a sorted groupby's groups, and drop_duplicates' rows sorted by the keys.
    """
    rows = np.flatnonzero(use)
    v = values[rows]
    day = 86_400 * 10**9  # dates at midnight (nanoseconds): the day number is the value's rank
    if len(v) and not (v % day).any() and (v.max() - v.min()) // day < 10**6:
        rank, span = (v - v.min()) // day, int((v.max() - v.min()) // day) + 1
    else:
        rank, uniq = pd.factorize(v, sort=True)  # few distinct values (dates)
        span = max(len(uniq), 1)
    key = codes[rows].astype(np.int64) * span + rank
    order = rows[np.argsort(key, kind="stable")]  # stable: a group's rows in row order (records come sorted)
    k = np.sort(key, kind="stable")
    new = np.ones(len(order), dtype=bool)
    new[1:] = k[1:] != k[:-1]
    run = np.full(len(codes), -1, dtype=np.int64)
    run[order] = np.cumsum(new) - 1
    return run, order[new]


def _plus_months(dates: pd.Series, months: float | None) -> pd.Series:
    """Return add_months(*dates*, *months*), computed once per distinct date (a long column has few)."""
    v = dates.to_numpy(dtype="datetime64[ns]")
    known = ~np.isnat(v)
    pos, uniq = pd.factorize(v[known].view(np.int64))
    out = np.full(len(v), np.datetime64("NaT"), dtype="datetime64[ns]")
    out[known] = add_months(pd.Series(uniq.view("datetime64[ns]"), dtype="datetime64[ns]"),
                            months).to_numpy(dtype="datetime64[ns]")[pos]
    return pd.Series(out, index=dates.index, dtype="datetime64[ns]")


#: most person x date rows evaluated at once (bounds the memory of many as-of dates)
_CHUNK_ROWS = 500_000


def person_status(inp: ComplianceInputs, as_of: pd.Timestamp, start: pd.Timestamp) -> pd.DataFrame:
    """Return every in-scope person's enrolment, audiometry, training and protector status."""
    return person_statuses(inp, [(as_of, start)])[0]


def person_statuses(inp: ComplianceInputs, dates: list[tuple[pd.Timestamp, pd.Timestamp]]) -> list[pd.DataFrame]:
    """Return person_status() at each (as_of, start) of *dates*, evaluated in one pass.

    The rules are evaluated on one frame of every person at every as-of date (people x dates);
    each person's records as of each date come from one sorted search over all dates at once.
    """
    n = len(inp.people)
    step = max(1, _CHUNK_ROWS // max(n, 1))
    out: list[pd.DataFrame] = []
    for i in range(0, len(dates), step):
        out.extend(_statuses(inp, dates[i:i + step]))
    return out


def _statuses(inp: ComplianceInputs, dates: list[tuple[pd.Timestamp, pd.Timestamp]]) -> list[pd.DataFrame]:
    keys = inp.keys()
    p, ids = keys.people, keys.ids
    n, k = len(p), len(dates)
    row = np.tile(np.arange(n), k)
    when = np.repeat(np.arange(k), n)
    q = np.asarray([pd.Timestamp(a) for a, _ in dates], dtype="datetime64[ns]")[when]
    begin = np.asarray([pd.Timestamp(b) for _, b in dates], dtype="datetime64[ns]")[when]
    # only the people in scope at each date are judged: hired by its as-of date, not gone before its start
    hire = p["hire_date"].to_numpy(dtype="datetime64[ns]")[row]
    leave = p["leave_date"].to_numpy(dtype="datetime64[ns]")[row]
    keep = np.flatnonzero((np.isnat(hire) | (hire <= q)) & (np.isnat(leave) | (leave >= begin)))
    row, when, q = row[keep], when[keep], q[keep]
    pcode = keys.person[row]
    as_of = pd.Series(q)
    s = p.iloc[row].reset_index(drop=True)
    active = s["leave_date"].isna() | (s["leave_date"] >= as_of)
    s["must_enrol"] = s["must_enrol"] & (s["first_exposed_date"].isna() | (s["first_exposed_date"] <= as_of))

    a = inp.audiograms
    acode = keys.audiogram
    known = acode >= 0
    acode, adate = acode[known], a["date"].to_numpy(dtype="datetime64[ns]")[known]
    first = keys.first_audiogram[pcode]
    s["first_audiogram"] = pd.Series(np.where(_present(first, q), first.view("datetime64[ns]"),
                                              np.datetime64("NaT")), dtype="datetime64[ns]")
    s["last_audiogram"] = pd.Series(_last_on_or_before(acode, adate, pcode, q), dtype="datetime64[ns]")
    t = inp.training
    tcode = keys.training
    s["last_training"] = pd.Series(_last_on_or_before(tcode[tcode >= 0], t["date"].to_numpy(
        dtype="datetime64[ns]")[tcode >= 0], pcode, q), dtype="datetime64[ns]")
    has_aud = s["last_audiogram"].notna()
    has_tr = s["last_training"].notna()
    s["has_records"] = has_aud | has_tr
    s["enrolled"] = s["has_records"] | s["group_exposed"]
    # training and protectors are owed to everyone the programme covers: people judged exposed
    # and the members of exposed groups, each at the value the rule set's duty starts at;
    # records alone (information only) create no duties
    s["in_programme"] = s["must_enrol"] | s["group_exposed"]
    started = s["first_exposed_date"].isna() | (s["first_exposed_date"] <= as_of)
    s["training_duty"] = (s["training_duty"] & started) | s["group_training"]
    s["protector_duty"] = (s["protector_duty"] & started) | s["group_protectors"]

    # baseline: within baseline_months of first exposure (29 CFR 1910.95(g)(5))
    # (the first exposure is the person's, the same at every as-of date)
    s["baseline_due"] = pd.Series(_plus_months(p["first_exposed_date"], inp.baseline_months).to_numpy(
        dtype="datetime64[ns]")[row], dtype="datetime64[ns]") \
        if inp.baseline_months is not None else pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns]")
    code = _state_codes(s["baseline_due"], as_of, s["must_enrol"] & (inp.baseline_months is not None), has_aud)
    late = has_aud & s["baseline_due"].notna() & (s["first_audiogram"] > s["baseline_due"])
    tested = (s["must_enrol"] & has_aud).to_numpy()
    code = np.where(tested, np.where(late, _LATE, _ON_TIME) if inp.baseline_months is not None else 1, code)
    s["baseline_status"] = _words(code, s.index)

    # periodic: at least every interval_months after the last audiogram (1910.95(g)(6))
    s["next_audiogram_due"] = _plus_months(s["last_audiogram"], inp.interval_months)
    left_first = s["leave_date"].notna() & (s["leave_date"] <= s["next_audiogram_due"])
    periodic_req = s["must_enrol"] & has_aud & (inp.interval_months is not None) & ~left_first
    code = _state_codes(s["next_audiogram_due"], as_of, periodic_req, False)
    s["audiogram_status"] = _words(np.where(code == 4, _CURRENT, code), s.index)
    cur_months = inp.interval_months if inp.interval_months is not None else 12
    s["current_audiogram"] = has_aud & (_plus_months(s["last_audiogram"], cur_months) >= as_of)

    # exit audiogram where a leave date is given (common practice): an audiogram of kind exit,
    # or one dated within the window before the leave date, on or before the as-of date
    exit_req = s["must_enrol"] & s["leave_date"].notna() & (s["leave_date"] <= as_of + pd.Timedelta(
        days=DUE_SOON_DAYS))
    exit_first = keys.first_exit[row]
    # done when any in-scope row of the person has such an audiogram by the as-of date
    hit = _present(exit_first, q) & (exit_first != np.iinfo(np.int64).max)
    key = when * len(ids) + pcode
    any_hit = np.zeros(k * len(ids), dtype=bool)
    any_hit[key[hit]] = True
    s["exit_status"] = _classify(s["leave_date"], as_of, exit_req, pd.Series(any_hit[key]))

    # training: at least every training_months (1910.95(k)(2)); first training on enrolment
    s["next_training_due"] = _plus_months(s["last_training"], inp.training_months).where(
        has_tr, s["first_exposed_date"].where(s["first_exposed_date"].notna(), as_of))
    left_before = s["leave_date"].notna() & (s["leave_date"] <= s["next_training_due"])
    # a first training is owed whatever the interval; a rule set with no interval asks for no repeat
    train_req = s["training_duty"] & ((inp.training_months is not None) | ~has_tr) & ~left_before
    code = _state_codes(s["next_training_due"], as_of, train_req, False)
    s["training_status"] = _words(np.where(code == 4, _CURRENT, code), s.index)
    tr_months = inp.training_months if inp.training_months is not None else 12
    s["trained_current"] = has_tr & (_plus_months(s["last_training"], tr_months) >= as_of)
    s["active"] = active

    # protectors: issued or fitted on or before the as-of date (blank date counts)
    never = np.iinfo(np.int64).max
    for col, firsts in (("has_protector", keys.first_protector), ("has_fit_test", keys.first_fit_test)):
        firstf = firsts[pcode]
        s[col] = pd.Series(_present(firstf, q) & (firstf != never))
    s["protector_required"] = s["protector_duty"] & active
    # the rows are in date order (people repeated per date): each date's frame is a slice, not a copy
    edge = np.searchsorted(when, np.arange(k + 1), side="left")
    return [s.iloc[edge[j]:edge[j + 1]].reset_index(drop=True) for j in range(k)]


# ---------------------------------------------------------------------------------------
# action list


def _normalise_actions(df: pd.DataFrame | None, source: str) -> pd.DataFrame:
    """Bring another stage's action table to ACTION_COLUMNS."""
    if df is None or df.empty:
        return _empty(ACTION_COLUMNS)
    a = df.copy()
    if "subject" not in a.columns:
        if "person_id" in a.columns:
            a["subject"] = a["person_id"]
            a["subject_type"] = "person"
        elif "group" in a.columns:
            a["subject"] = a["group"]
            a["subject_type"] = "group"
        else:
            a["subject"] = ""
    if "subject_type" not in a.columns:
        a["subject_type"] = np.where(a.get("person_id", pd.Series("", index=a.index)).astype(str).ne(""),
                                     "person", "group") if "person_id" in a.columns else "group"
    for c, default in (("kind", source), ("detail", ""), ("clause", ""), ("status", "open")):
        if c not in a.columns:
            a[c] = default
    if "due_date" not in a.columns:
        a["due_date"] = a["date"] if "date" in a.columns else pd.NaT
    a["source"] = source if "source" not in df.columns else a["source"].where(a["source"].astype(str).ne(""),
                                                                               source)
    a["due_date"] = pd.to_datetime(a["due_date"], errors="coerce").astype("datetime64[ns]")
    for c in ("subject", "subject_type", "kind", "detail", "clause", "source", "status"):
        a[c] = a[c].fillna("").astype(str)
    return a[ACTION_COLUMNS]


def _person_actions(s: pd.DataFrame, inp: ComplianceInputs, as_of: pd.Timestamp) -> pd.DataFrame:
    """Return the open audiometry, training, enrolment and protector items of in-scope people."""
    rule = inp.rule
    parts = []
    sel = s["baseline_status"].isin(["overdue", "due_soon"])
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "baseline audiogram",
        "detail": np.where(s.loc[sel, "baseline_due"].isna(), "no baseline audiogram; first exposure date unknown",
                           "no baseline audiogram yet"),
        "due_date": s.loc[sel, "baseline_due"].fillna(as_of), "clause": clause_for(rule, "baseline"),
        "status": s.loc[sel, "baseline_status"]}))
    sel = s["audiogram_status"].isin(["overdue", "due_soon"])
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "annual audiogram",
        "detail": "last audiogram " + s.loc[sel, "last_audiogram"].dt.strftime("%Y-%m-%d"),
        "due_date": s.loc[sel, "next_audiogram_due"], "clause": clause_for(rule, "periodic"),
        "status": s.loc[sel, "audiogram_status"]}))
    sel = s["exit_status"].isin(["overdue", "due_soon"])
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "exit audiogram",
        "detail": "leaves or left employment; no exit audiogram on record",
        "due_date": s.loc[sel, "leave_date"], "clause": clause_for(rule, "exit"),
        "status": s.loc[sel, "exit_status"]}))
    sel = s["training_status"].isin(["overdue", "due_soon"])
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "training",
        "detail": np.where(s.loc[sel, "last_training"].isna(), "no training on record",
                           "last training " + s.loc[sel, "last_training"].dt.strftime("%Y-%m-%d").fillna("")),
        "due_date": s.loc[sel, "next_training_due"], "clause": clause_for(rule, "training"),
        "status": s.loc[sel, "training_status"]}))
    sel = s["must_enrol"] & ~s["has_records"] & s["active"]
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "enrolment",
        "detail": "exposed at or above the action value but no audiometry or training records",
        "due_date": s.loc[sel, "first_exposed_date"].fillna(as_of), "clause": clause_for(rule, "enrolment"),
        "status": np.where(s.loc[sel, "first_exposed_date"].fillna(as_of) < as_of, "overdue", "open")}))
    sel = s["protector_required"] & ~s["has_protector"]
    parts.append(pd.DataFrame({
        "subject": s.loc[sel, "person_id"], "kind": "protector",
        "detail": "no hearing protector issued or fitted on record",
        "due_date": s.loc[sel, "first_exposed_date"].fillna(as_of), "clause": clause_for(rule, "protector"),
        "status": np.where(s.loc[sel, "first_exposed_date"].fillna(as_of) < as_of, "overdue", "open")}))
    out = pd.concat([p for p in parts if not p.empty], ignore_index=True) if any(
        not p.empty for p in parts) else _empty(ACTION_COLUMNS)
    out["subject_type"] = "person"
    out["source"] = "compliance"
    return out.reindex(columns=ACTION_COLUMNS)


def _audiometer_actions(audiometers: pd.DataFrame, flagged: pd.DataFrame, rule: RuleSet,
                        as_of: pd.Timestamp, start: pd.Timestamp) -> pd.DataFrame:
    """Return calibration and booth items of audiometers used in the period, and flagged tests."""
    parts = []
    soon = as_of + pd.Timedelta(days=DUE_SOON_DAYS)
    if audiometers.empty:
        audiometers = audiometers.assign(last_used=pd.Series(dtype="datetime64[ns]"))
    used = audiometers[audiometers["last_used"].notna() & (audiometers["last_used"] >= start)]
    for kind, due_col, last_col, text in (
            ("acoustic calibration", "acoustic_due", "last_acoustic", "acoustic calibration"),
            ("exhaustive calibration", "exhaustive_due", "last_exhaustive", "exhaustive calibration")):
        sel = used[due_col].isna() | (used[due_col] <= soon)
        u = used.loc[sel]
        if u.empty:
            continue
        parts.append(pd.DataFrame({
            "subject": u["audiometer_id"], "subject_type": "audiometer", "kind": kind,
            "detail": np.where(u[last_col].isna(), f"no {text} on record",
                               f"last {text} " + u[last_col].dt.strftime("%Y-%m-%d").fillna("")),
            "due_date": u[due_col].fillna(as_of),
            "clause": clause_for(rule, "acoustic" if kind.startswith("acoustic") else "exhaustive"),
            "status": np.where(u[due_col].fillna(as_of) < as_of, "overdue", "due_soon")}))
    u = used.loc[~_bool(used["booth_ok"])] if not used.empty else used
    if not u.empty:
        parts.append(pd.DataFrame({
            "subject": u["audiometer_id"], "subject_type": "audiometer", "kind": "booth",
            "detail": "booth: " + u["booth_detail"].astype(str), "due_date": u["last_booth"].fillna(as_of),
            "clause": clause_for(rule, "booth"), "status": "open"}))
    f = flagged[flagged["date"] >= start]
    if not f.empty:
        f = f.groupby(["person_id", "date"], as_index=False, sort=True).agg(
            reason=("reason", "first"), audiometer_id=("audiometer_id", "first"))
        parts.append(pd.DataFrame({
            "subject": f["person_id"], "subject_type": "person", "kind": "audiogram conditions",
            "detail": "audiogram of " + f["date"].dt.strftime("%Y-%m-%d") + " taken when " + f["reason"]
                      + "; have the reviewer judge whether it stands",
            "due_date": f["date"], "clause": clause_for(rule, "functional") + "; " + clause_for(rule, "booth"),
            "status": "open"}))
    parts = [p for p in parts if not p.empty]
    if not parts:
        return _empty(ACTION_COLUMNS)
    out = pd.concat(parts, ignore_index=True)
    out["source"] = "compliance"
    return out.reindex(columns=ACTION_COLUMNS)


def sort_actions(actions: pd.DataFrame) -> pd.DataFrame:
    """Sort actions by due date (blank last), then subject, kind and detail; drop repeats."""
    a = actions.copy()
    a["due_date"] = pd.to_datetime(a["due_date"], errors="coerce").astype("datetime64[ns]")
    a = a.drop_duplicates(subset=["subject", "subject_type", "kind", "due_date"], keep="first")
    a = a.sort_values(["due_date", "subject", "kind", "detail"], kind="mergesort", na_position="last")
    return a.reset_index(drop=True)[ACTION_COLUMNS]


# ---------------------------------------------------------------------------------------
# headline figures of one status table


def _period_share(status: pd.DataFrame, start: pd.Timestamp, as_of: pd.Timestamp) -> float | None:
    """Return the share of the period's test days with valid audiometer checks (None: no test day)."""
    if status.empty:
        return None
    d = _dates(status)
    inp = (d >= start) & (d <= as_of)
    return _share((inp & _bool(status["ok"])).sum(), inp.sum())


def _figures(s: pd.DataFrame, hearing: pd.DataFrame | None, year_start: pd.Timestamp,
             as_of: pd.Timestamp, cases: pd.DataFrame | None = None) -> dict[str, Any]:
    """Return the headline figures of one status table."""
    must = s["must_enrol"]
    # people still within their baseline time limit are not yet expected to have an audiogram
    must_active = must & s["active"] & ~s["baseline_status"].isin(["scheduled", "due_soon"])
    req_train = s["training_duty"] & s["active"]
    f: dict[str, Any] = {
        "in_scope": int(len(s)),
        "must_be_enrolled": int(must.sum()),
        "enrolled": int(s["enrolled"].sum()),
        "not_enrolled": int((must & ~s["has_records"]).sum()),
        "enrolled_not_exposed": int((s["has_records"] & ~must).sum()),
        "current_audiogram_share": _share((s["current_audiogram"] & must_active).sum(), must_active.sum()),
        "trained_share": _share((s["trained_current"] & req_train).sum(), req_train.sum()),
        "protector_share": _share((s["has_protector"] & s["protector_required"]).sum(),
                                  s["protector_required"].sum()),
        "fit_test_share": _share((s["has_fit_test"] & s["protector_required"]).sum(),
                                 s["protector_required"].sum()),
        "overdue_baselines": int(s["baseline_status"].eq("overdue").sum()),
        "late_baselines": int(s["baseline_status"].eq("late").sum()),
        "overdue_audiograms": int(s["audiogram_status"].eq("overdue").sum()
                                  + s["baseline_status"].eq("overdue").sum()
                                  + s["exit_status"].eq("overdue").sum()),
        "due_soon_audiograms": int(s["audiogram_status"].eq("due_soon").sum()
                                   + s["baseline_status"].eq("due_soon").sum()
                                   + s["exit_status"].eq("due_soon").sum()),
        "overdue_training": int(s["training_status"].eq("overdue").sum()),
        "due_soon_training": int(s["training_status"].eq("due_soon").sum()),
    }
    sts = rec = 0
    if hearing is not None and not hearing.empty:
        d = _dates(hearing)
        inyear = (d >= year_start) & (d <= as_of)
        for key, col in (("sts", "sts"), ("rec", "recordable")):
            if col in hearing.columns:
                hit = inyear & _bool(hearing[col])
                n = int(hearing.loc[hit, "person_id"].astype(str).nunique()) if "person_id" in hearing else 0
                if key == "sts":
                    sts = n
                else:
                    rec = n
    if cases is not None:  # 29 CFR 1904.10: cases of people, one per person and audiogram
        d = _dates(cases)
        rec = int(((d >= year_start) & (d <= as_of)).sum()) if not cases.empty else 0
    f["sts"] = sts
    f["recordables"] = rec
    return f


# ---------------------------------------------------------------------------------------
# the stage


def compute(programme: Programme, *, rule: RuleSet | None = None, exposure: ExposureResult | None = None,
            hearing: HearingResult | None = None, protection: ProtectionResult | None = None,
            checks: AudiometerChecks | None = None) -> ComplianceResult:
    """Judge the programme against the headline rule set as of the end of the review period.

    The pipeline passes every earlier stage; a unit test may leave out the ones it does not need
    (no hearing or protection results: nothing of theirs is listed).
    """
    cfg = programme.config
    if rule is None:
        rule = load_rule_set(cfg.rules, cfg)
    if checks is None:
        checks = audiometers.compute(programme, rule)
    as_of, start = _ts(cfg.period.end), _ts(cfg.period.start)
    inp, notes = _gather(programme, exposure, rule)
    s = person_status(inp, as_of, start)

    enrol = pd.concat([
        s.loc[s["must_enrol"] & ~s["has_records"], ["person_id", "group"]].assign(
            mismatch="exposed_no_records",
            detail="exposed at or above the action value; no audiometry or training records"),
        s.loc[s["has_records"] & ~s["must_enrol"], ["person_id", "group"]].assign(
            mismatch="records_not_exposed",
            detail="has audiometry or training records but is not judged exposed (information only)"),
    ], ignore_index=True).sort_values(["mismatch", "person_id"], kind="mergesort").reset_index(drop=True)

    # the groupings read a few columns of the wide status frame (a selection copies only those)
    eg = s[["group", "person_id", "must_enrol", "enrolled"]].assign(
        _nr=s["must_enrol"] & ~s["has_records"], _rn=s["has_records"] & ~s["must_enrol"]).groupby(
        "group", sort=True).agg(n_in_scope=("person_id", "size"), n_must_enrol=("must_enrol", "sum"),
                                n_enrolled=("enrolled", "sum"), n_exposed_no_records=("_nr", "sum"),
                                n_records_not_exposed=("_rn", "sum")).reset_index()
    eg[eg.columns[1:]] = eg[eg.columns[1:]].astype(int)

    due_parts = []
    for kind, status_col, due_col, ckey in (
            ("baseline", "baseline_status", "baseline_due", "baseline"),
            ("periodic", "audiogram_status", "next_audiogram_due", "periodic"),
            ("exit", "exit_status", "leave_date", "exit"),
            ("training", "training_status", "next_training_due", "training")):
        sel = s[status_col].isin(["overdue", "due_soon"])
        due_parts.append(pd.DataFrame({"person_id": s.loc[sel, "person_id"], "group": s.loc[sel, "group"],
                                       "kind": kind, "due_date": s.loc[sel, due_col],
                                       "status": s.loc[sel, status_col], "clause": clause_for(rule, ckey)}))
    due = pd.concat(due_parts, ignore_index=True).reindex(columns=DUE_COLUMNS)
    due = due.sort_values(["due_date", "person_id", "kind"], kind="mergesort", na_position="first") \
        .reset_index(drop=True)

    req = s.loc[s["training_duty"] & s["active"], ["group", "person_id", "trained_current"]]
    tg = req.groupby("group", sort=True).agg(n_required=("person_id", "size"),
                                             n_trained=("trained_current", "sum")).reset_index()
    tg["n_trained"] = tg["n_trained"].astype(int)
    tg["completion"] = (tg["n_trained"] / tg["n_required"]).round(4)
    preq = s.loc[s["protector_required"], ["group", "person_id", "has_protector", "has_fit_test"]]
    pg = preq.groupby("group", sort=True).agg(n_required=("person_id", "size"),
                                              n_with_protector=("has_protector", "sum"),
                                              n_fit_tested=("has_fit_test", "sum")).reset_index()
    for c in ("n_with_protector", "n_fit_tested"):
        pg[c] = pg[c].astype(int)
    pg["protector_share"] = (pg["n_with_protector"] / pg["n_required"]).round(4)
    pg["fit_test_share"] = (pg["n_fit_tested"] / pg["n_required"]).round(4)

    fu = None if hearing is None else hearing.followups
    ref_cols = ["person_id", "ear", "trigger_date", "due_date", "done_date", "status", "clause"]
    if fu is not None and not fu.empty and "kind" in fu.columns:
        refits = fu.loc[fu["kind"].astype(str).eq("refit")].reindex(columns=ref_cols)
        refits["clause"] = refits["clause"].fillna("").astype(str).replace("", clause_for(rule, "refit"))
        refits = refits.sort_values(["due_date", "person_id"], kind="mergesort").reset_index(drop=True)
    else:
        refits = _empty(ref_cols)
    if not refits.empty:
        # no refit is due after the person left (the hearing stage marks these; the leave
        # date is checked here too for follow-ups made without it)
        left = _as_dates(refits["person_id"].astype(str).map(
            inp.people.drop_duplicates("person_id").set_index("person_id")["leave_date"]))
        gone = refits["status"].astype(str).eq(LEFT_STATUS) | (
            left.notna() & (_as_dates(refits["due_date"]) > left) & refits["done_date"].isna())
        refits.loc[gone.to_numpy(), "status"] = LEFT_STATUS
    open_refits = refits[refits["done_date"].isna() & refits["status"].ne(LEFT_STATUS)] \
        if not refits.empty else refits
    if not open_refits.empty:  # one item per person and shift, both ears together
        open_refits = open_refits.assign(
            ear=open_refits["ear"].astype(str).map({"L": "left ear", "R": "right ear"}).fillna("ear"),
            trigger_date=_as_dates(open_refits["trigger_date"]), due_date=_as_dates(open_refits["due_date"]))
        open_refits = open_refits.groupby(["person_id", "trigger_date", "due_date"], as_index=False, sort=True,
                                          dropna=False).agg(ear=("ear", lambda e: " and ".join(sorted(set(e)))),
                                                            clause=("clause", "first"))
    refit_actions = pd.DataFrame({
        "subject": open_refits["person_id"], "subject_type": "person", "kind": "refit",
        "detail": "refit the protector and retrain its use after the shift of "
                  + _as_dates(open_refits["trigger_date"]).dt.strftime("%Y-%m-%d").fillna("unknown date")
                  + " (" + open_refits["ear"] + "); no protector fitting on record since",
        "due_date": open_refits["due_date"], "clause": open_refits["clause"], "source": "hearing",
        "status": _classify(_as_dates(open_refits["due_date"]), as_of,
                            pd.Series(True, index=open_refits.index), pd.Series(False, index=open_refits.index))
        .replace("scheduled", "open").to_numpy(),
    }).reindex(columns=ACTION_COLUMNS) if not open_refits.empty else _empty(ACTION_COLUMNS)

    status, flagged, meters = checks.status, checks.flagged, checks.audiometers
    if not checks.recorded:
        notes.append("No audiometer records (data/audiometers.csv): audiograms cannot be checked against "
                     "daily checks, calibrations and booth levels.")

    parts = [a for a in (
        _person_actions(s, inp, as_of),
        _audiometer_actions(meters, flagged, rule, as_of, start),
        _normalise_actions(None if exposure is None else exposure.actions, "exposure"),
        _normalise_actions(None if protection is None else protection.actions, "protection"),
        _normalise_actions(None if hearing is None else hearing.actions, "hearing"),
        refit_actions,
    ) if not a.empty]
    actions = sort_actions(pd.concat(parts, ignore_index=True)) if parts else _empty(ACTION_COLUMNS)

    fig = _figures(s, None if hearing is None else hearing.audiograms, start, as_of,
                   getattr(hearing, "cases", None))
    by_kind = actions["kind"].value_counts().sort_index() if not actions.empty else pd.Series(dtype=int)
    summary: dict[str, Any] = {
        **{k: v for k, v in fig.items() if k not in ("sts", "recordables")},
        "as_of": as_of.strftime("%Y-%m-%d"),
        "rules": rule.id,
        "sts_this_period": fig["sts"],
        "recordables_this_period": fig["recordables"],
        "open_actions": {str(k): int(v) for k, v in by_kind.items()},
        "open_actions_total": int(len(actions)),
        "overdue_actions": int(actions["status"].eq("overdue").sum()) if not actions.empty else 0,
        "overdue_training": fig["overdue_training"],
        "refits_open": int(len(open_refits)),
        "audiograms_flagged": int(len(flagged)),
        # test days of the review period (as the headline figure in generator/figures.py)
        "audiometer_days_ok_share": _period_share(status, start, as_of),
    }
    summary = dict(sorted(summary.items()))
    log.info("compliance: %d people in scope, %d actions", len(s), len(actions))
    return ComplianceResult(
        as_of=as_of, rules=rule.id, people=s, enrolment=enrol, enrolment_groups=eg, due=due, training_groups=tg,
        protector_groups=pg, refits=refits, audiometer_status=status, audiograms_flagged=flagged,
        audiometers=meters, actions=actions, summary=summary, notes=notes, inputs=inp)
