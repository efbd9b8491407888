"""Hearing: baselines, threshold shifts, recordable cases, follow-ups and population views.

Rules decided once here (content/methods/hearing.md explains them to readers):

* **Ears are separate.** Every comparison is per person and ear, against the baseline in
  force for that ear on the test date.
* **Baseline.** The first audiogram of kind ``baseline`` with numbers at 2000, 3000 and
  4000 Hz, else the first audiogram with those numbers. It is replaced only by a reviewer's
  ``revise_baseline`` decision (reviews.csv) naming an audiogram; the revised baseline applies
  to the audiograms AFTER the named one, which (like its retest) stays compared with the
  baseline in force before (1910.95(g)(9), 1904.10(b)(2)). The program flags candidates for
  revision (persistent shift; marked improvement) and never revises by itself.
* **NR (no response)** is a censored value: the threshold lies at or beyond the
  audiometer's limit, which the records do not give. An average or a shift that needs an
  NR frequency is not computed (NaN); the row keeps ``nr_any`` and is listed for review
  ("shift at least as large as the limit allows; not computed"). Order statistics
  (medians, fractiles, shares above a norm) count NR as worse than every number; means
  leave NR out and say how many were left out.
* **OSHA STS** (29 CFR 1910.95(g)(10)): mean change at 2000/3000/4000 Hz of 10 dB or more,
  shown without and with the App. F age correction; ``config.audiometry.age_correction``
  picks the one that drives actions (no correction where sex or age is unknown, flagged).
* **Retest** (1910.95(g)(7)(ii), 1904.10(b)(4)): the next audiogram of the same ear within
  ``retest_days`` confirms (still a shift) or cancels (no shift) the first one; it is not
  a new determination itself. It is judged against the flagged test's baseline.
* **Leavers.** A retest or refit that falls due after the person's leave_date and is not on
  record is ``not applicable (left)``; the written notice of a shift is still due.
* **Reviewer decisions** ``confirm_shift``/``cancel_shift`` override the retest, the later
  decision wins; ``not_work_related`` removes a case from recordability and refits.
* **Recordable** (29 CFR 1904.10): a shift in force (age correction allowed) whose current
  2000/3000/4000 Hz average is 25 dB HL or more in the same ear (never age corrected),
  not judged not work-related. An ear meets the criteria once until its baseline is
  revised; a **case** is a person's, "in one or both ears" (1904.10(a)): one case per person
  and audiogram whatever the number of ears, and a new case in that person only once a
  baseline has been revised after the earlier case (1904.10(b)(2)(i)). The rate per 200,000
  hours counts cases.
* **NIOSH** (DHHS (NIOSH) 98-126): 15 dB or more worse than baseline at any of
  500-6000 Hz, confirmed at the same frequency on the next test of the same ear; never
  age corrected.

Results are figures for a qualified reviewer; nothing here is a diagnosis.
"""
from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from . import audiometers, norms
from .audiometers import AudiometerChecks
from .exposure import ExposureResult
from .findings import WARNING, Finding
from .inputs.spec import AUDIO_FREQS
from .model import Programme
from .frames import person_codes, text_at, text_codes
from .rules import RuleSet, load_rule_set

log = logging.getLogger(__name__)

#: Frequencies of the 2000/3000/4000 Hz average (29 CFR 1910.95(g)(10), 1904.10).
STS_FREQS = (2000, 3000, 4000)
#: Frequencies of the NIOSH shift and of the sequential-pair indicators.
NIOSH_FREQS = (500, 1000, 2000, 3000, 4000, 6000)
#: Frequencies compared with ISO 1999:2013 on the noise comparison.
NOISE_FREQS = (3000, 4000, 6000)

#: Values this module uses, with where each comes from.
SETTINGS: dict[str, Any] = {
    "sts_db": 10.0,  # 29 CFR 1910.95(g)(10)(i)
    "recordable_db": 25.0,  # 29 CFR 1904.10(a)
    "niosh_db": 15.0,  # DHHS (NIOSH) 98-126
    "indicator_db": 15.0,  # ANSI/ASA S12.13 TR-2002 sequential-pair criterion
    "improvement_db": 5.0,  # program choice: 2/3/4 kHz average this much better on two tests in a row
    "refit_days": 21,  # program choice: refit due with the written notice (1910.95(g)(8)(ii))
    "referral_days": 21,  # program choice
    "ci_level": 0.95,  # exact (Clopper-Pearson) binomial interval
    "expected_tolerance_db": 3.0,  # program choice: observed vs expected change "within" this many dB
    "age_bands": (18, 30, 40, 50, 60, 200),
}
#: The rule-set clauses this stage cites (generator/rules CLAUSE_KEYS): the headline rule set's.
CLAUSE_KEYS = ("sts", "notice", "retest", "refit", "referral", "baseline_revision", "recordable", "quiet",
               "review")


def clauses_of(rules: RuleSet) -> dict[str, str]:
    """Return the clauses this stage cites, as the rule set words them."""
    return {k: rules.clause(k) for k in CLAUSE_KEYS}


#: The settings above for the methods page: (name, value, unit, source).
PARAMETERS: list[tuple[str, Any, str, str]] = [
    ("standard threshold shift: mean change at 2000, 3000 and 4000 Hz", SETTINGS["sts_db"], "dB",
     "29 CFR 1910.95(g)(10)(i)"),
    ("recordable: 2000/3000/4000 Hz average from audiometric zero", SETTINGS["recordable_db"], "dB HL",
     "29 CFR 1904.10(a)"),
    ("NIOSH shift at any of 500 to 6000 Hz", SETTINGS["niosh_db"], "dB", "DHHS (NIOSH) 98-126"),
    ("sequential-pair indicator criterion", SETTINGS["indicator_db"], "dB", "ANSI/ASA S12.13 TR-2002"),
    ("improvement that makes a baseline-revision candidate", SETTINGS["improvement_db"], "dB",
     "the programme's own setting"),
    ("refit due after the shift is determined", SETTINGS["refit_days"], "days",
     "the programme's own setting (written notice within 21 days: 29 CFR 1910.95(g)(8)(i))"),
    ("referral due after the shift is determined", SETTINGS["referral_days"], "days",
     "the programme's own setting"),
    ("observed change counted as within the expected change when it differs by at most",
     SETTINGS["expected_tolerance_db"], "dB", "the programme's own setting"),
    ("confidence level of the exact binomial intervals", SETTINGS["ci_level"], "", "Clopper-Pearson (1934)"),
    ("age bands compared with ISO 7029", ", ".join(str(a) for a in SETTINGS["age_bands"][:-1]) + " and over",
     "years", "ISO 7029:2017 (bands: the programme's own setting)"),
]

#: Columns of hearing_results.csv (the contract), in order.
HEARING_RESULTS_COLUMNS = (
    "person_id", "ear", "date", "kind", "baseline_date", "avg_234", "shift_234",
    "shift_234_age_corrected", "osha_sts", "osha_sts_age_corrected", "niosh_shift", "recordable",
)
FOLLOWUP_COLUMNS = ["person_id", "ear", "kind", "trigger_date", "due_date", "done_date", "status", "clause"]
ACTION_COLUMNS = ["subject", "subject_type", "kind", "detail", "due_date", "clause"]
#: one row per case of a person: ``ear`` is "L", "R" or "L R" (both ears on the same audiogram)
CASE_COLUMNS = ["person_id", "ear", "date", "avg_234", "shift", "year", "group"]
EAR_NAMES = {"R": "right ear", "L": "left ear"}
#: columns of the working audiogram frame that the published one leaves out (keys, positions,
#: inputs of the follow-ups and findings, intermediate shifts)
WORK_COLUMNS = frozenset({
    "quiet_hours", "audiometer_id", "_row", "hire_date", "nr_234", "_pid", "_key", "_drank", "_same_prev",
    "_same_next", "valid_234", "_bpos", "shift_driving", "_sts_vs_prev_base", "retest_date", "next_date",
    "det_idx", "_shift_decision", "determined_on", "check_reason"})
#: working columns no step reads after the follow-ups, actions and findings (dropped then)
LATE_UNUSED = ("quiet_hours", "audiometer_id", "_row", "check_reason", "_same_prev", "_same_next", "valid_234",
               "shift_driving", "_sts_vs_prev_base", "retest_date", "next_date", "det_idx", "_shift_decision",
               "determined_on")
#: retest_status of an audiogram: not a determination, then a determination's retest outcome
RETEST_WORDS = ("", "no retest", "confirmed", "cancelled")
#: follow-up status of a retest or refit that fell due after the person left employment
LEFT_STATUS = "not applicable (left)"


@dataclass
class HearingResult:
    """Everything the hearing pages, the export and the compliance stage read."""

    #: one row per audiogram and ear: HEARING_RESULTS_COLUMNS plus group, year, sex, age,
    #: base_age, nr_any, sts, sts_computed, sts_basis, retest_status, review_decision,
    #: shift_status, valid_check, hl_<f>/nr_<f>, shift_<f>[_age_corrected] at 2/3/4 kHz,
    #: recordable_criteria, niosh_15, niosh_freqs, determination, is_retest_of_shift,
    #: not_work_related, case (no working column: WORK_COLUMNS)
    audiograms: pd.DataFrame
    #: one row per person and ear: baseline in force and revision candidates
    baselines: pd.DataFrame
    #: every baseline event: [person_id, ear, baseline_date, source, decided]
    baseline_history: pd.DataFrame
    #: recordable cases, CASE_COLUMNS
    cases: pd.DataFrame
    #: [year, n_cases, hours_worked, rate_per_200k]
    incidence: pd.DataFrame
    #: FOLLOWUP_COLUMNS
    followups: pd.DataFrame
    #: per group ("all" too) and year: counts, rates, exact CIs, mean 2/3/4 kHz average
    population: pd.DataFrame
    #: per group ("all" too) over the whole review period (distinct people): [group, n_tested,
    #: n_sts, n_recordable, sts_rate, sts_ci_low, sts_ci_high, recordable_rate, recordable_ci_low,
    #: recordable_ci_high]
    period_groups: pd.DataFrame
    #: per group ("all" too) and year: %Worse-sequential, %Better-or-Worse-sequential
    indicators: pd.DataFrame
    #: observed hearing levels by age band, sex and frequency vs ISO 7029:2017
    age_norms: pd.DataFrame
    #: per group and frequency: ISO 1999:2013 expected change vs observed change
    noise_expected: pd.DataFrame
    #: ACTION_COLUMNS (refits are listed by the compliance stage from ``followups``)
    actions: pd.DataFrame
    #: [audiometer_id, date, valid, reason] for every test day
    audiometer_ok: pd.DataFrame
    #: headline figures (JSON-serialisable, sorted keys)
    summary: dict[str, Any]
    findings: list[Finding] = field(default_factory=list)
    #: people with a standard threshold shift in force on or before the end of the period
    #: (29 CFR 1910.95(j)(3) target for the protection stage)
    sts_people: frozenset[str] = field(default_factory=frozenset)
    #: plain sentences on what could not be judged
    notes: list[str] = field(default_factory=list)

    def hearing_results(self) -> pd.DataFrame:
        """Return the hearing_results.csv table (the contract's columns)."""
        return self.audiograms.reindex(columns=list(HEARING_RESULTS_COLUMNS))


# ---------------------------------------------------------------------------------------
# small helpers


def _col(df: pd.DataFrame, name: str, default: Any = np.nan) -> pd.Series:
    """Return column *name* of *df*, or a column of *default* when it is absent."""
    if name in df.columns:
        return df[name]
    return pd.Series([default] * len(df), index=df.index)


def _numbers_at(s: pd.Series, pos: np.ndarray) -> pd.Series:
    """Return pd.to_numeric(s, errors="coerce") at positions *pos* (a new 0..n-1 index).

    A column read as numbers (float or integer) is taken by position, with no conversion.
    """
    if s.dtype.kind in "fi" and not isinstance(s.dtype, pd.api.extensions.ExtensionDtype):
        return pd.Series(s.to_numpy()[pos])
    return pd.to_numeric(s.take(pos).reset_index(drop=True), errors="coerce")


def _dates(s: pd.Series) -> pd.Series:
    """Return *s* as datetime64[ns]."""
    return pd.to_datetime(s, errors="coerce").astype("datetime64[ns]")


def _nbool(values: np.ndarray | pd.Series, known: np.ndarray | pd.Series) -> pd.Series:
    """Return a nullable boolean Series: *values* where *known*, else NA."""
    v = np.asarray(values, dtype=bool)
    k = np.asarray(known, dtype=bool)
    return pd.Series(pd.arrays.BooleanArray(v & k, ~k))


def _words(codes: np.ndarray, words: Any) -> pd.Series:
    """Return words[codes] as a text column (each word made once, rows share it; no per-row parsing)."""
    return pd.Series(np.asarray(words, dtype=object)).take(np.asarray(codes, dtype=np.int64)).reset_index(drop=True)


def _enum(codes: np.ndarray, words: Any) -> pd.Series:
    """Return words[codes] as a categorical column (one byte a row; categories in text order).

    For the status enumerations of the per-ear frame; its text is the same as _words'.
    """
    cats, inv = np.unique(np.asarray(list(words), dtype=object).astype(str), return_inverse=True)
    c = inv.reshape(-1)[np.asarray(codes, dtype=np.int64)] if len(cats) else np.asarray(codes, dtype=np.int64)
    return pd.Series(pd.Categorical.from_codes(c, categories=pd.Index(cats, dtype=object)))


def _ge(x: pd.Series | np.ndarray, limit: float) -> np.ndarray:
    """Return x >= limit with float noise removed (averages of whole dB values)."""
    return np.round(np.asarray(x, dtype=float), 6) >= limit


def _nxt(values: Any, same_next: np.ndarray, fill: Any) -> np.ndarray:
    """Return the next row's value within the same person and ear (rows sorted), else *fill*."""
    v = np.asarray(values)
    out = np.empty_like(v)
    if len(v):
        out[:-1] = v[1:]
        out[-1] = fill
    return np.where(same_next, out, fill) if len(v) else out


def _prv(values: Any, same_prev: np.ndarray, fill: Any) -> np.ndarray:
    """Return the previous row's value within the same person and ear (rows sorted), else *fill*."""
    v = np.asarray(values)
    out = np.empty_like(v)
    if len(v):
        out[1:] = v[:-1]
        out[0] = fill
    return np.where(same_prev, out, fill) if len(v) else out


def _upper(s: pd.Series) -> pd.Series:
    """Return ``s.str.upper()``, folding each distinct value once (a handful of codes, many rows)."""
    codes, uniques = pd.factorize(s)
    if len(uniques) * 4 > len(s):
        return s.str.upper()
    up = pd.Series(uniques, dtype=s.dtype).str.upper().to_numpy(object)
    out = np.where(codes >= 0, up[np.clip(codes, 0, None)] if len(up) else None, None)
    return pd.Series(out, index=s.index, dtype=object).astype(s.dtype).where(codes >= 0, s)


def _drop(df: pd.DataFrame, columns: Any) -> pd.DataFrame:
    """Return *df* without *columns*, the other columns shared (no copy), so the dropped ones are freed."""
    gone = set(columns)
    return pd.DataFrame({c: df[c] for c in df.columns if c not in gone}, copy=False)


def _path(programme: Programme, name: str) -> str:
    """Return the path of data file *name* as the user named it."""
    return programme.present.get(name, f"data/{name}.csv")


def age_at(birth: pd.Series, date: pd.Series) -> pd.Series:
    """Return age in whole years at *date* (NaN where either date is missing)."""
    b = _dates(birth)
    d = _dates(date)
    before = (d.dt.month < b.dt.month) | ((d.dt.month == b.dt.month) & (d.dt.day < b.dt.day))
    years = (d.dt.year - b.dt.year - before.astype(float)).astype(float)
    return years.where(b.notna() & d.notna())


def _age_years(birth: pd.Series, dates: pd.Series, who: np.ndarray, when: np.ndarray) -> np.ndarray:
    """Return age_at(birth[who], dates[when]) from the calendar parts of each birth and date once."""
    by, bm, bd = (birth.dt.year.to_numpy(float)[who], birth.dt.month.to_numpy(float)[who],
                  birth.dt.day.to_numpy(float)[who])
    dy, dm, dd = (dates.dt.year.to_numpy(float)[when], dates.dt.month.to_numpy(float)[when],
                  dates.dt.day.to_numpy(float)[when])
    before = (dm < bm) | ((dm == bm) & (dd < bd))
    years = dy - by - before.astype(float)
    return np.where(np.isnan(by) | np.isnan(dy), np.nan, years)


def years_between(start: pd.Series, end: pd.Series) -> pd.Series:
    """Return (end - start) in years of 365.25 days (NaN where missing)."""
    return (_dates(end) - _dates(start)).dt.days / 365.25


# ---------------------------------------------------------------------------------------
# exact binomial confidence interval (no scipy at run time)


def _lgamma(x: np.ndarray) -> np.ndarray:
    """Return ln Γ(x) element-wise."""
    return np.asarray(np.frompyfunc(math.lgamma, 1, 1)(np.asarray(x, dtype=float)), dtype=float)


def _betacf(a: np.ndarray, b: np.ndarray, x: np.ndarray, iters: int = 2000) -> np.ndarray:
    """Return the continued fraction of the incomplete beta function (modified Lentz)."""
    tiny = 1e-300

    def fix(v: np.ndarray) -> np.ndarray:
        return np.where(np.abs(v) < tiny, tiny, v)

    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c = np.ones_like(x)
    d = 1.0 / fix(1.0 - qab * x / qap)
    h = d.copy()
    act = np.arange(len(x))  # elements still iterating
    for m in range(1, iters + 1):
        aa_, bb_, xx, qb, qp, qm = a[act], b[act], x[act], qab[act], qap[act], qam[act]
        cc, dd = c[act], d[act]
        m2 = 2.0 * m
        num = m * (bb_ - m) * xx / ((qm + m2) * (aa_ + m2))
        dd = 1.0 / fix(1.0 + num * dd)
        cc = fix(1.0 + num / cc)
        hh = h[act] * dd * cc
        num = -(aa_ + m) * (qb + m) * xx / ((aa_ + m2) * (qp + m2))
        dd = 1.0 / fix(1.0 + num * dd)
        cc = fix(1.0 + num / cc)
        delta = dd * cc
        h[act] = hh * delta
        c[act] = cc
        d[act] = dd
        act = act[np.abs(delta - 1.0) >= 1e-14]
        if act.size == 0:
            break
    return h


def betainc_reg(a: Any, b: Any, x: Any) -> np.ndarray:
    """Return the regularised incomplete beta function I_x(a, b), vectorised."""
    a, b, x = (np.asarray(v, dtype=float) for v in np.broadcast_arrays(a, b, x))
    out = np.where(x <= 0, 0.0, np.where(x >= 1, 1.0, np.nan))
    inner = (x > 0) & (x < 1)
    if inner.any():
        aa, bb, xx = a[inner], b[inner], x[inner]
        lbt = _lgamma(aa + bb) - _lgamma(aa) - _lgamma(bb) + aa * np.log(xx) + bb * np.log1p(-xx)
        front = np.exp(lbt)
        direct = xx < (aa + 1.0) / (aa + bb + 2.0)
        # evaluate the fraction only on the side where it converges fast
        cf = _betacf(np.where(direct, aa, bb), np.where(direct, bb, aa), np.where(direct, xx, 1.0 - xx))
        out[inner] = np.where(direct, front * cf / aa, 1.0 - front * cf / bb)
    return out


def beta_ppf(q: Any, a: Any, b: Any) -> np.ndarray:
    """Return the q-quantile of the beta(a, b) distribution (safeguarded Newton), vectorised."""
    q, a, b = (np.asarray(v, dtype=float) for v in np.broadcast_arrays(q, a, b))
    q0 = q
    q, a, b = (np.atleast_1d(v) for v in (q, a, b))
    lo = np.zeros_like(q)
    hi = np.ones_like(q)
    # start from the normal approximation of the beta distribution
    mean = a / (a + b)
    sd = np.sqrt(a * b / ((a + b) ** 2 * (a + b + 1.0)))
    x = np.clip(mean + norms.normal_quantile(np.clip(q, 1e-12, 1 - 1e-12)) * sd, 1e-9, 1 - 1e-9)
    lbeta = _lgamma(a) + _lgamma(b) - _lgamma(a + b)
    act = np.arange(x.size)  # elements still iterating
    x, lo, hi, q, a, b, lbeta = (v.ravel().copy() for v in (x, lo, hi, q, a, b, lbeta))
    for _ in range(200):
        xa, qa, aa, bb = x[act], q[act], a[act], b[act]
        err = betainc_reg(aa, bb, xa) - qa
        la = np.where(err < 0, xa, lo[act])
        ha = np.where(err < 0, hi[act], xa)
        with np.errstate(all="ignore"):
            pdf = np.exp((aa - 1.0) * np.log(xa) + (bb - 1.0) * np.log1p(-xa) - lbeta[act])
            step = xa - err / pdf
        bad = ~np.isfinite(step) | (step <= la) | (step >= ha)
        new = np.where(bad, 0.5 * (la + ha), step)
        x[act], lo[act], hi[act] = new, la, ha
        act = act[~((np.abs(new - xa) <= 1e-14) | (ha - la < 1e-15))]
        if act.size == 0:
            break
    return x.reshape(np.shape(q0))


def clopper_pearson(k: Any, n: Any, level: float = 0.95) -> tuple[np.ndarray, np.ndarray]:
    """Return the exact (Clopper-Pearson) binomial interval (lower, upper) for k of n."""
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    k, n = np.broadcast_arrays(k, n)
    alpha = 1.0 - level
    ok = (n > 0) & (k >= 0) & (k <= n)
    lo = np.full(k.shape, np.nan)
    hi = np.full(k.shape, np.nan)
    if ok.any():
        pairs, inv = np.unique(np.stack([k[ok], n[ok]], axis=1), axis=0, return_inverse=True)
        kk, nn = pairs[:, 0], pairs[:, 1]
        low = np.zeros(len(kk))
        up = np.ones(len(kk))
        m = kk > 0
        if m.any():
            low[m] = beta_ppf(alpha / 2, kk[m], nn[m] - kk[m] + 1)
        m = kk < nn
        if m.any():
            up[m] = beta_ppf(1 - alpha / 2, kk[m] + 1, nn[m] - kk[m])
        lo[ok] = low[inv.ravel()]
        hi[ok] = up[inv.ravel()]
    return lo, hi


# ---------------------------------------------------------------------------------------
# audiogram table


def _prepare(programme: Programme) -> pd.DataFrame:
    """Return audiograms joined with people, sorted by person, ear and date.

    One pass: the rows kept (a date and an ear L or R) are put in order once and every
    column is taken by position; person ids become integer codes (``_pid``, in sorted id
    order) and person-and-ear keys (``_key``) that every later step sorts, joins and groups on.
    """
    raw = programme.table("audiograms")
    people = programme.table("people")
    # the ear, upper-cased: each distinct text (a category of the loaded column) folded once
    # (0 left, 1 right, -1 neither)
    ecode, etext = text_codes(_col(raw, "ear", ""))
    efold = pd.Series(etext, dtype=object).astype(str).str.upper().to_numpy(object)
    side = np.r_[np.where(efold == "L", 0, np.where(efold == "R", 1, -1)), -1][ecode]
    date_all = _dates(_col(raw, "date", pd.NaT))
    kept = np.flatnonzero(date_all.notna().to_numpy() & (side >= 0))
    ids_all = _col(raw, "person_id", "").astype(str)
    # person ids become integers once (codes in sorted id order); every later step keys,
    # sorts and groups on them, never on the id text
    codes, uniques = person_codes(programme, "audiograms", kept)
    pid = codes.astype(np.int64)
    right = side[kept] == 1
    t = date_all.to_numpy("datetime64[ns]")[kept]
    # the rank of each test date among the distinct dates; (person, ear, date rank) as one
    # integer sorts the rows in the order a lexsort by person, ear and date gives (ties kept in file order)
    drank, udates = pd.factorize(t, sort=True)
    order = np.argsort((pid * 2 + right) * max(len(udates), 1) + drank, kind="stable")
    drank = drank[order]
    pos = kept[order]
    pid = pid[order]
    right = right[order]

    def take(s: pd.Series) -> pd.Series:
        return s.take(pos).reset_index(drop=True)

    # the kind of test from the loaded column's codes (a blank kind is a periodic test)
    kcode, kword = text_codes(_col(raw, "kind", ""))

    ag = pd.DataFrame({
        "person_id": take(ids_all),
        "ear": _words(right.astype(np.int64), ["L", "R"]),
        "date": pd.Series(t[order], dtype="datetime64[ns]"),
        "kind": text_at(kcode[pos], np.where(kword == "", "periodic", kword)),
        "quiet_hours": _numbers_at(_col(raw, "quiet_hours"), pos),
        "audiometer_id": take(_col(raw, "audiometer_id", "")).fillna("").astype(str),
        "_row": _numbers_at(_col(raw, "_row"), pos),
    }, copy=False)
    for f in AUDIO_FREQS:
        nr_col = _col(raw, f"nr_{f}", False)
        nr = nr_col.to_numpy(bool)[pos] if nr_col.dtype == bool else \
            take(nr_col).fillna(False).astype(bool).to_numpy(bool)
        hl = _numbers_at(_col(raw, f"hl_{f}"), pos).to_numpy(float)
        # NR is never a number, whatever the reader left in the cell
        ag[f"hl_{f}"] = np.where(nr, np.nan, hl)
        ag[f"nr_{f}"] = nr
    pp = pd.DataFrame({
        "person_id": _col(people, "person_id", "").astype(str),
        "group": _col(people, "group", "").astype(str),
        "sex": _upper(_col(people, "sex", "").fillna("").astype(str)),
        "birth_date": _dates(_col(people, "birth_date", pd.NaT)),
        "hire_date": _dates(_col(people, "hire_date", pd.NaT)),
    }).drop_duplicates("person_id")
    # people's attributes joined by position: one value per person code, then per row
    at = pd.Index(pp["person_id"]).get_indexer(pd.Index(uniques))
    found = at >= 0
    at0 = np.where(found, at, 0)
    nat = np.datetime64("NaT", "ns")
    birth = None
    for c, empty in (("group", ""), ("sex", ""), ("birth_date", nat), ("hire_date", nat)):
        src = pp[c].to_numpy()
        if c.endswith("_date"):
            vals = src[at0] if len(src) else np.full(len(at0), nat, dtype="datetime64[ns]")
            per = np.where(found, vals, nat).astype("datetime64[ns]")
            if c == "birth_date":
                birth = per
            else:
                ag[c] = pd.Series(per[pid], dtype="datetime64[ns]")
        else:
            vals = src[at0] if len(src) else np.full(len(at0), empty, dtype=object)
            per_person = pd.Series(np.where(found, vals, empty), dtype=object).astype(str)
            ag[c] = per_person.take(pid).reset_index(drop=True)
    # calendar parts worked out once per distinct test date and once per person
    ud = pd.Series(np.asarray(udates, dtype="datetime64[ns]"))
    bp = pd.Series(birth if birth is not None else np.zeros(0, dtype="datetime64[ns]"), dtype="datetime64[ns]")
    ag["year"] = ud.dt.year.to_numpy(np.int64)[drank]
    ag["age"] = _age_years(bp, ud, pid, drank)
    nr_any = np.zeros(len(ag), dtype=bool)
    for f in AUDIO_FREQS:
        nr_any |= ag[f"nr_{f}"].to_numpy(bool)
    ag["nr_any"] = nr_any
    ag["nr_234"] = ag["nr_2000"].to_numpy(bool) | ag["nr_3000"].to_numpy(bool) | ag["nr_4000"].to_numpy(bool)
    ag["_pid"] = pid
    key = pid * 2 + right
    ag["_key"] = key
    # the rank of each test date among the distinct dates: (key, rank) is one sorted integer
    ag["_drank"] = drank.astype(np.int64)
    same = np.zeros(len(ag), dtype=bool)
    if len(ag) > 1:
        same[1:] = key[1:] == key[:-1]
    ag["_same_prev"] = same
    ag["_same_next"] = np.r_[same[1:], False] if len(ag) else same
    ag["avg_234"] = ag[[f"hl_{f}" for f in STS_FREQS]].mean(axis=1, skipna=False)
    ag["valid_234"] = ag["avg_234"].notna()
    return ag


def _reviews(programme: Programme, ag: pd.DataFrame, findings: list[Finding]) -> pd.DataFrame:
    """Return reviewer decisions matched to audiogram rows: [idx, review_date, decision, order]."""
    rv = programme.table("reviews")
    cols = ["idx", "review_date", "decision", "order"]
    if rv.empty:
        return pd.DataFrame(columns=cols)
    r = pd.DataFrame({
        "person_id": _col(rv, "person_id", "").astype(str),
        "ear": _col(rv, "ear", "").astype(str).str.upper(),
        "review_date": _dates(_col(rv, "date", pd.NaT)),
        "decision": _col(rv, "decision", "").astype(str),
        "audiogram_date": _dates(_col(rv, "audiogram_date", pd.NaT)),
        "_row": pd.to_numeric(_col(rv, "_row"), errors="coerce"),
    })
    r["order"] = np.arange(len(r))
    # decisions naming an audiogram date: that audiogram of the person and ear
    named = r[r["audiogram_date"].notna()].copy()
    named["idx"] = _row_of(ag, named["person_id"].to_numpy(object), named["ear"].to_numpy(object),
                           named["audiogram_date"])
    # decisions without one: the latest audiogram of that ear on or before the decision
    unnamed = r[r["audiogram_date"].isna() & r["review_date"].notna()].sort_values("review_date", kind="mergesort")
    unnamed = unnamed.assign(idx=_row_on_or_before(ag, unnamed["person_id"].to_numpy(object),
                                                   unnamed["ear"].to_numpy(object), unnamed["review_date"]))
    named["idx"] = named["idx"].where(named["idx"] >= 0)
    unnamed["idx"] = unnamed["idx"].where(unnamed["idx"] >= 0)
    m = pd.concat([named, unnamed], ignore_index=True)
    missing = m[m["idx"].isna()]
    if not missing.empty:
        path = _path(programme, "reviews")
        for row in missing["_row"].sort_values():
            findings.append(Finding(path, None if pd.isna(row) else int(row), "audiogram_date", WARNING,
                                    "the decision names no audiogram of that person and ear in audiograms.csv; "
                                    "it is not applied", key="review-unmatched"))
    m = m[m["idx"].notna()].copy()
    m["idx"] = m["idx"].astype(int)
    return m[cols].sort_values(["idx", "review_date", "order"], kind="mergesort").reset_index(drop=True)


def _baseline_events(ag: pd.DataFrame, decisions: pd.DataFrame) -> pd.DataFrame:
    """Return every baseline event per person and ear: [person_id, ear, baseline_date, source, decided]."""
    key = _ear_key(ag)
    valid = np.flatnonzero(ag["valid_234"].to_numpy(bool))
    prio = (ag["kind"].to_numpy(object)[valid] != "baseline").astype(np.int64)
    # rows are in person, ear and date order: a stable sort on (key, prio) keeps the date order
    o = np.lexsort((prio, key[valid]))
    kv = key[valid][o]
    first = valid[o][np.r_[True, kv[1:] != kv[:-1]]] if len(kv) else valid[:0]
    fprio = (ag["kind"].to_numpy(object)[first] != "baseline")
    ev = pd.DataFrame({
        "person_id": ag["person_id"].take(first).to_numpy(), "ear": ag["ear"].take(first).to_numpy(),
        "baseline_date": ag["date"].to_numpy("datetime64[ns]")[first],
        "source": np.where(fprio, "first", "baseline kind"),
        "decided": pd.Series(pd.NaT, index=range(len(first)), dtype="datetime64[ns]"),
        "_at": first,
    })
    rev = decisions[decisions["decision"].eq("revise_baseline")]
    if not rev.empty:
        at = rev["idx"].to_numpy(np.int64)
        ok = ag["valid_234"].to_numpy(bool)[at]
        at = at[ok]
        ev2 = pd.DataFrame({
            "person_id": ag["person_id"].take(at).to_numpy(), "ear": ag["ear"].take(at).to_numpy(),
            "baseline_date": ag["date"].to_numpy("datetime64[ns]")[at], "source": "revised by review",
            "decided": rev["review_date"].to_numpy()[ok], "_at": at,
        })
        ev = pd.concat([ev, ev2], ignore_index=True)
    ev["baseline_date"] = _dates(ev["baseline_date"])
    ev["decided"] = _dates(ev["decided"])
    # person codes follow the sorted ids: sorting on the row's key equals sorting on (person_id, ear)
    ev["_key"] = key[ev["_at"].to_numpy(np.int64)]
    ev = ev.sort_values(["_key", "baseline_date", "decided"], kind="mergesort", na_position="first")
    ev = ev.drop_duplicates(["_key", "baseline_date"], keep="last").reset_index(drop=True)
    return ev.drop(columns=["_at", "_key"])


def _person_rows(ag: pd.DataFrame) -> np.ndarray:
    """Return the position of each person's first row, indexed by the person code ``_pid``."""
    pid = ag["_pid"].to_numpy()
    return np.flatnonzero(np.r_[True, pid[1:] != pid[:-1]]) if len(pid) else np.zeros(0, dtype=np.int64)


def _ear_key(ag: pd.DataFrame) -> np.ndarray:
    """Return the integer key of each row's person and ear (non-decreasing in the sorted frame)."""
    if "_key" in ag.columns:
        return ag["_key"].to_numpy(np.int64)
    return ag["_pid"].to_numpy(np.int64) * 2 + ag["ear"].eq("R").to_numpy()


def _date_index(ag: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Return the distinct test dates (int64 ns, ascending) and the sorted (person, ear, date) code of each row."""
    t = ag["date"].to_numpy("datetime64[ns]").view(np.int64)
    if "_drank" in ag.columns:
        rank = ag["_drank"].to_numpy(np.int64)
        ud = np.zeros(int(rank.max()) + 1 if len(rank) else 0, dtype=np.int64)
        ud[rank] = t
    else:
        ud, rank = np.unique(t, return_inverse=True)
        rank = rank.reshape(-1)
    return ud, _ear_key(ag) * max(len(ud), 1) + rank


def _row_of(ag: pd.DataFrame, person_id: Any, ear: Any, date: Any) -> np.ndarray:
    """Return the position in *ag* of each (person_id, ear, date), -1 where there is none."""
    if not len(ag):
        return np.full(len(np.asarray(person_id)), -1, dtype=np.int64)
    ids = pd.Index(ag["person_id"].to_numpy()[_person_rows(ag)])  # id of each person code
    pid = ids.get_indexer(pd.Index(np.asarray(person_id, dtype=object)))
    e = np.asarray(ear, dtype=object)
    k = pid.astype(np.int64) * 2 + (e == "R")
    ud, code = _date_index(ag)
    d = _dates(pd.Series(date)).to_numpy("datetime64[ns]")
    q = d.view(np.int64)
    qr = np.clip(np.searchsorted(ud, q), 0, max(len(ud) - 1, 0))
    # rows are sorted by person, ear and date: one binary search on the combined code
    want = k * max(len(ud), 1) + qr
    pos = np.clip(np.searchsorted(code, want), 0, len(code) - 1)
    hit = (pid >= 0) & ((e == "R") | (e == "L")) & ~np.isnat(d) & (ud[qr] == q) & (code[pos] == want)
    return np.where(hit, pos, -1).astype(np.int64)


def _row_on_or_before(ag: pd.DataFrame, person_id: Any, ear: Any, date: Any) -> np.ndarray:
    """Return the position of the latest row of each (person_id, ear) dated on or before *date*, else -1."""
    if not len(ag):
        return np.full(len(np.asarray(person_id)), -1, dtype=np.int64)
    ids = pd.Index(ag["person_id"].to_numpy()[_person_rows(ag)])
    pid = ids.get_indexer(pd.Index(np.asarray(person_id, dtype=object)))
    e = np.asarray(ear, dtype=object)
    k = pid.astype(np.int64) * 2 + (e == "R")
    ud, code = _date_index(ag)
    d = _dates(pd.Series(date)).to_numpy("datetime64[ns]")
    qr = np.searchsorted(ud, d.view(np.int64), side="right") - 1  # latest distinct date on or before
    pos = np.searchsorted(code, k * max(len(ud), 1) + qr, side="right") - 1
    key = _ear_key(ag)
    hit = (pid >= 0) & ((e == "R") | (e == "L")) & ~np.isnat(d) & (qr >= 0) & (pos >= 0)
    hit[hit] = key[pos[hit]] == k[hit]
    return np.where(hit, pos, -1).astype(np.int64)


def _attach_baseline(ag: pd.DataFrame, events: pd.DataFrame) -> pd.DataFrame:
    """Add baseline_date, baseline_source and the baseline thresholds to each audiogram row.

    One pass over integer keys: the rows are in person, ear and date order, each event is
    placed among them by a binary search, and the latest event placed before a row is in
    force for it; the baseline's thresholds are read by position (_base).
    """
    n = len(ag)
    key = _ear_key(ag)
    ev_pos = _row_of(ag, events["person_id"].to_numpy(object), events["ear"].to_numpy(object),
                     events["baseline_date"])
    ev_key = np.where(ev_pos >= 0, key[np.clip(ev_pos, 0, max(n - 1, 0))] if n else -1, -1)
    # 29 CFR 1910.95(g)(9), 1904.10(b)(2): a revised baseline takes effect for the audiograms
    # AFTER the one it names; that audiogram is still compared with the baseline before it.
    # The first baseline of an ear applies to its own date (it is compared with itself).
    first = ~events.duplicated(["person_id", "ear"], keep="first").to_numpy()
    later = events["source"].eq("revised by review").to_numpy() & ~first
    # rows and events in one order: by key, then date; at equal date an event that takes
    # effect on the day (not a later revision) comes before the row, a later revision after it.
    # Rows are in that order already: each event's place among them is one binary search.
    m = len(events)
    _, code = _date_index(ag)
    e_idx = np.flatnonzero(ev_pos >= 0)  # an event naming no audiogram row is never in force
    e_code = code[ev_pos[e_idx]]
    e_later = later[e_idx]
    ins = np.where(e_later, np.searchsorted(code, e_code, side="right"), np.searchsorted(code, e_code, side="left"))
    o = np.lexsort((e_later, e_code))
    mark = np.full(n + 1, -1, dtype=np.int64)
    np.maximum.at(mark, ins[o], np.arange(len(o)))
    latest = np.maximum.accumulate(mark)[:n] if n else mark[:0]
    ev_of = np.where(latest >= 0, e_idx[o][np.clip(latest, 0, None)] if len(o) else -1, -1)
    in_force = np.where((ev_of >= 0) & (ev_key[np.clip(ev_of, 0, None)] == key if m else False), ev_of, -1)
    has = in_force >= 0
    ev_i = np.clip(in_force, 0, None)
    bdate = _dates(events["baseline_date"]).to_numpy("datetime64[ns]")
    src = events["source"].astype(object).to_numpy()
    ag["baseline_date"] = pd.Series(np.where(has, bdate[ev_i] if m else np.datetime64("NaT", "ns"),
                                             np.datetime64("NaT", "ns")), dtype="datetime64[ns]")
    if m:
        scode, sword = pd.factorize(src)
        ag["baseline_source"] = _enum(np.where(has, scode[ev_i] + 1, 0), [""] + list(sword))
    else:
        ag["baseline_source"] = _enum(np.zeros(n, dtype=np.int64), [""])
    # the baseline audiogram's row: its thresholds are read by position when needed (_base)
    ag["_bpos"] = np.where(has, ev_pos[ev_i] if m else -1, -1).astype(np.int64)
    ag["base_age"] = _base(ag, "age")
    return ag


def _base(ag: pd.DataFrame, column: str, rows: np.ndarray | None = None) -> np.ndarray:
    """Return *column* of the baseline audiogram compared with each row (or with *rows*), NaN where none."""
    bpos = ag["_bpos"].to_numpy(np.int64)
    if rows is not None:
        bpos = bpos[rows]
    v = ag[column].to_numpy(float)
    if not len(v):
        return np.full(len(bpos), np.nan)
    return np.where(bpos >= 0, v[np.clip(bpos, 0, None)], np.nan)


def _shifts(ag: pd.DataFrame, age_correction: bool) -> pd.DataFrame:
    """Add the OSHA, age-corrected and NIOSH shift columns.

    Every threshold of the baseline (and of the previous test's baseline) is read by position
    one frequency at a time, so no frame of baseline thresholds is ever made.
    """
    n = len(ag)
    has_base = ag["baseline_date"].notna().to_numpy()
    sp = ag["_same_prev"].to_numpy(bool)
    sn = ag["_same_next"].to_numpy(bool)
    prev_has = _prv(has_base, sp, False).astype(bool)
    # the change at 2, 3 and 4 kHz against this row's baseline and against the baseline in
    # force at the PREVIOUS test of the ear: a retest (or the next test) is judged against the
    # flagged test's baseline, also when a revision naming the flagged test changed the
    # baseline between them (1910.95(g)(9))
    # sex is a person's: coded once per person; the App. F table row of each test age and of
    # each baseline age is found once, then read one frequency at a time
    pid = ag["_pid"].to_numpy(np.int64)
    male, female = norms._sex_codes(ag["sex"].to_numpy(object)[_person_rows(ag)])
    sex = (male[pid], female[pid]) if n else (np.zeros(0, dtype=bool), np.zeros(0, dtype=bool))
    table, at_age = _appf_rows(ag["age"].to_numpy(float), sex)
    _, at_base = _appf_rows(ag["base_age"].to_numpy(float), sex)
    # the means of three values are summed in frequency order and divided by three, as
    # ndarray.mean(axis=1) does, one frequency at a time (no n x 3 arrays)
    shift = shift_c = praw = pcor = np.zeros(n)
    for j, f in enumerate(STS_FREQS):
        hl = ag[f"hl_{f}"].to_numpy(float)
        base = _base(ag, f"hl_{f}")
        age_c = table[at_age, j]
        base_c = table[at_base, j]
        d = hl - base
        pd_ = hl - _prv(base, sp, np.nan)
        # the previous row is the same person (same sex): its baseline's correction
        pbase_c = _prv(base_c, sp, np.nan)
        first = j == 0
        shift = d if first else shift + d
        shift_c = d - (age_c - base_c) if first else shift_c + (d - (age_c - base_c))
        praw = pd_ if first else praw + pd_
        pcor = pd_ - (age_c - pbase_c) if first else pcor + (pd_ - (age_c - pbase_c))
    k3 = float(len(STS_FREQS))
    shift = shift / k3
    shift_c = shift_c / k3
    praw = praw / k3
    pcor = pcor / k3
    ag["shift_234"] = shift
    ag["shift_234_age_corrected"] = shift_c
    known = np.isfinite(shift) & has_base
    known_c = np.isfinite(shift_c) & has_base
    raw = _ge(shift, SETTINGS["sts_db"])
    cor = _ge(shift_c, SETTINGS["sts_db"])
    ag["osha_sts"] = _nbool(raw, known)
    ag["osha_sts_age_corrected"] = _nbool(cor, known_c)
    if age_correction:
        drive = _nbool(np.where(known_c, cor, raw), known_c | known)
        ag["sts_basis"] = _enum(np.where(known_c, 2, known.astype(np.int64)),
                                 ["", "not age corrected (sex or age unknown)", "age corrected"])
        ag["shift_driving"] = np.where(np.isnan(shift_c), shift, shift_c)
    else:
        drive = _nbool(raw, known)
        ag["sts_basis"] = _enum(known.astype(np.int64), ["", "not age corrected"])
        ag["shift_driving"] = shift
    ag["sts_computed"] = drive
    raw_p = _ge(praw, SETTINGS["sts_db"])
    cor_p = _ge(pcor, SETTINGS["sts_db"])
    kraw = np.isfinite(praw) & prev_has
    kcor = np.isfinite(pcor) & prev_has
    ag["_sts_vs_prev_base"] = _nbool(np.where(kcor, cor_p, raw_p), kcor | kraw) if age_correction \
        else _nbool(raw_p, kraw)
    # NIOSH: >= 15 dB at the same frequency on this and the next test of the ear (the next
    # test compared with this test's baseline)
    s15 = np.zeros(n, dtype=bool)
    conf = np.zeros((n, len(NIOSH_FREQS)), dtype=bool)
    for j, f in enumerate(NIOSH_FREQS):
        hl = ag[f"hl_{f}"].to_numpy(float)
        base = _base(ag, f"hl_{f}")
        hit = _ge(hl - base, SETTINGS["niosh_db"]) & has_base
        hit_p = _ge(hl - _prv(base, sp, np.nan), SETTINGS["niosh_db"]) & prev_has
        s15 |= hit
        conf[:, j] = hit & _nxt(hit_p, sn, False).astype(bool) & sn
    ag["niosh_15"] = s15
    ag["niosh_shift"] = conf.any(axis=1)
    ag["niosh_freqs"] = _freq_list(conf, NIOSH_FREQS)
    return ag


def _appf(age: np.ndarray, sex: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """Return the App. F age correction at 2000, 3000 and 4000 Hz per row, shape (n, 3).

    The same values as ``norms.appf_correction`` (Tables F-1/F-2), with the table looked up
    once for all three frequencies: one take from the male rows, the female rows and a row
    of NaN (sex or age unknown).
    """
    table, at = _appf_rows(age, sex)
    return table[at]


def _appf_rows(age: np.ndarray, sex: tuple[np.ndarray, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Return the App. F table at 2000, 3000 and 4000 Hz (male rows, female rows, a row of NaN) and each row's place in it."""
    cols = [norms.APPF_FREQS.index(f) for f in STS_FREQS]
    male, female = sex  # masks from norms._sex_codes
    m = norms._APPF_MALE[:, cols].astype(float)
    table = np.vstack([m, norms._APPF_FEMALE[:, cols].astype(float), np.full((1, len(cols)), np.nan)])
    a_ok = np.isfinite(age)
    row = (np.clip(np.floor(np.where(a_ok, age, 20.0)), 20, 60) - 20).astype(np.int64)
    at = np.where(a_ok & male, row, np.where(a_ok & female, len(m) + row, 2 * len(m)))
    return table, at


def _freq_list(mask: np.ndarray, freqs: tuple[int, ...]) -> pd.Series:
    """Return, per row, the frequencies where *mask* is True as text like '4000, 6000'.

    Each combination of frequencies is worded once; rows share the text.
    """
    code = np.zeros(mask.shape[0], dtype=np.int64)
    for j in range(len(freqs)):
        code |= mask[:, j].astype(np.int64) << j
    words = [", ".join(str(f) for j, f in enumerate(freqs) if c >> j & 1) for c in range(1 << len(freqs))]
    return _enum(code, words)


def _retests(ag: pd.DataFrame, retest_days: int) -> pd.DataFrame:
    """Add determination, retest_status, retest_date and the determination row index."""
    sp = ag["_same_prev"].to_numpy(bool)
    sn = ag["_same_next"].to_numpy(bool)
    sts = ag["sts_computed"].fillna(False).to_numpy(bool)
    # the next test judged against this test's baseline (the one in force before a revision
    # that names this test: 1910.95(g)(9), 1904.10(b)(2))
    vs_prev = ag["_sts_vs_prev_base"]
    nat = np.datetime64("NaT", "ns")
    d = ag["date"].to_numpy("datetime64[ns]")
    prev_date = pd.Series(_prv(d, sp, nat), index=ag.index)
    next_date = pd.Series(_nxt(d, sn, nat), index=ag.index)
    prev_sts = _prv(sts, sp, False).astype(bool)
    next_sts = _nxt(vs_prev.fillna(False).to_numpy(bool), sn, False).astype(bool)
    next_known = _nxt(vs_prev.notna().to_numpy(bool), sn, False).astype(bool)
    window = pd.Timedelta(days=int(retest_days))
    is_retest = prev_sts & ((ag["date"] - prev_date) <= window).to_numpy()
    determination = sts & ~is_retest
    has_retest = ((next_date - ag["date"]) <= window).to_numpy()
    status = _enum(np.where(~determination, 0, np.where(~has_retest | ~next_known, 1, np.where(next_sts, 2, 3))),
                    RETEST_WORDS)
    ag["is_retest_of_shift"] = is_retest
    ag["determination"] = determination
    ag["retest_status"] = status
    ag["retest_date"] = next_date.where(determination & has_retest)
    ag["next_date"] = next_date
    idx = np.arange(len(ag))
    ag["det_idx"] = np.where(is_retest, idx - 1, idx)
    return ag


def _apply_reviews(ag: pd.DataFrame, decisions: pd.DataFrame) -> pd.DataFrame:
    """Add review_decision (as named), _shift_decision (1 confirm, 2 cancel) and not_work_related.

    The shift decisions and not_work_related are set on the determination rows.
    """
    n = len(ag)
    shift_decision = np.zeros(n, dtype=np.int8)  # 1 confirm_shift, 2 cancel_shift (the later decision)
    not_work_related = np.zeros(n, dtype=bool)
    if decisions.empty:
        ag["review_decision"] = _enum(np.zeros(n, dtype=np.int64), [""])
        ag["_shift_decision"] = shift_decision
        ag["not_work_related"] = not_work_related
        return ag
    text = np.full(n, "", dtype=object)
    first = decisions.drop_duplicates("idx")
    text[first["idx"].to_numpy()] = first["decision"].to_numpy(object)
    multi = decisions[decisions.duplicated("idx", keep=False)]
    if not multi.empty:  # several decisions on one audiogram: all shown, in date order
        joined = multi.groupby("idx", sort=True)["decision"].agg("; ".join)
        text[joined.index.to_numpy()] = joined.to_numpy(object)
    # the texts of the rows with a decision, each made once
    named = first["idx"].to_numpy()
    codes = np.zeros(n, dtype=np.int64)
    inv, words = pd.factorize(text[named], use_na_sentinel=False)
    codes[named] = inv + 1
    ag["review_decision"] = _enum(codes, [""] + list(words))
    d = decisions.copy()
    d["det"] = ag["det_idx"].to_numpy()[d["idx"].to_numpy()]
    sd = d[d["decision"].isin(["confirm_shift", "cancel_shift"])].drop_duplicates("det", keep="last")
    shift_decision[sd["det"].to_numpy()] = np.where(sd["decision"].eq("confirm_shift").to_numpy(bool), 1, 2)
    nwr = d.loc[d["decision"].eq("not_work_related"), "det"].unique()
    not_work_related[nwr] = True
    ag["_shift_decision"] = shift_decision
    ag["not_work_related"] = not_work_related
    return ag


def _status_and_cases(ag: pd.DataFrame) -> pd.DataFrame:
    """Add sts (in force), shift_status, recordable_criteria and recordable."""
    det = ag["determination"].to_numpy(bool)
    dec = ag["_shift_decision"].to_numpy(np.int8)
    retest = ag["retest_status"]
    r_cancelled = retest.eq("cancelled").to_numpy(bool)
    r_confirmed = retest.eq("confirmed").to_numpy(bool)
    confirmed_by_reviewer = dec == 1
    cancelled_by_reviewer = dec == 2
    active = ((det & ~r_cancelled) | confirmed_by_reviewer) & ~cancelled_by_reviewer
    ag["sts"] = active
    nwr = ag["not_work_related"].to_numpy(bool)
    nr_pending = ag["nr_234"].to_numpy(bool) & ag["baseline_date"].notna().to_numpy() & ~active
    words = ["", "cancelled by reviewer", "not work-related", "confirmed by reviewer", "cancelled by retest",
             "confirmed by retest", "shift", "not computed (NR)"]
    status = np.select(
        [cancelled_by_reviewer, confirmed_by_reviewer & nwr, confirmed_by_reviewer, active & nwr,
         det & r_cancelled, active & r_confirmed, active, nr_pending],
        [1, 2, 3, 2, 4, 5, 6, 7], default=0)
    ag["shift_status"] = _enum(status, words)
    crit = active & ~nwr & _ge(ag["avg_234"], SETTINGS["recordable_db"])
    ag["recordable_criteria"] = crit
    first = pd.Series(crit).groupby([_ear_key(ag), ag["baseline_date"].to_numpy().view(np.int64)],
                                    sort=False).cumsum()
    ag["recordable"] = crit & (first.to_numpy() == 1)
    # determination date: the retest when it confirmed, else the audiogram
    ag["determined_on"] = ag["retest_date"].where(r_confirmed, ag["date"])
    return ag


# ---------------------------------------------------------------------------------------
# audiometer checks


def _meter_rows(ag: pd.DataFrame, meters: pd.DataFrame) -> np.ndarray:
    """Return, per audiogram row, the row of *meters* for its audiometer and test day (-1 where none)."""
    if not len(ag) or meters.empty:
        return np.full(len(ag), -1, dtype=np.int64)
    ud, _ = _date_index(ag)
    nd = max(len(ud), 1)
    ids = pd.Index(pd.unique(meters["audiometer_id"].to_numpy(object)))
    code = ids.get_indexer(ag["audiometer_id"].to_numpy(object))
    mt = meters["date"].to_numpy("datetime64[ns]")
    mr = np.clip(np.searchsorted(ud, mt.view(np.int64)), 0, nd - 1)
    ok = ~np.isnat(mt) & (ud[mr] == mt.view(np.int64)) if len(ud) else np.zeros(len(mt), dtype=bool)
    mkey = ids.get_indexer(meters["audiometer_id"].to_numpy(object)).astype(np.int64) * nd + mr
    first = pd.Series(np.arange(len(meters)), index=mkey)[ok]
    first = first[~first.index.duplicated(keep="first")]
    at = pd.Index(first.index).get_indexer(code.astype(np.int64) * nd + ag["_drank"].to_numpy(np.int64))
    return np.where((code >= 0) & (at >= 0), first.to_numpy()[np.clip(at, 0, None)], -1).astype(np.int64)


def _case_rows(ag: pd.DataFrame, cases: pd.DataFrame) -> np.ndarray:
    """Return the recordable ear rows whose person and date make a case (CASE_COLUMNS rows)."""
    rec = ag["recordable"].to_numpy(bool)
    out = np.zeros(len(ag), dtype=bool)
    if cases.empty or not rec.any():
        return out
    ud, _ = _date_index(ag)
    nd = max(len(ud), 1)
    ids = pd.Index(ag["person_id"].to_numpy()[_person_rows(ag)])
    cp = ids.get_indexer(pd.Index(cases["person_id"].astype(str).to_numpy(object))).astype(np.int64)
    ct = cases["date"].to_numpy("datetime64[ns]").view(np.int64)
    cr = np.clip(np.searchsorted(ud, ct), 0, nd - 1)
    made = (cp * nd + cr)[(cp >= 0) & (ud[cr] == ct)]
    pos = np.flatnonzero(rec)
    out[pos] = np.isin(ag["_pid"].to_numpy(np.int64)[pos] * nd + ag["_drank"].to_numpy(np.int64)[pos], made)
    return out


def _audiometer_status(checks: AudiometerChecks) -> pd.DataFrame:
    """Return [audiometer_id, date, valid, reason] per test day (empty without audiometers.csv)."""
    cols = ["audiometer_id", "date", "valid", "reason"]
    if not checks.recorded:
        return pd.DataFrame(columns=cols)
    status = checks.status
    out = pd.DataFrame({"audiometer_id": status["audiometer_id"].astype(str), "date": _dates(status["date"]),
                        "valid": status["ok"].astype(bool), "reason": status["reason"].astype(str)})
    return out.reset_index(drop=True)


# ---------------------------------------------------------------------------------------
# baselines, follow-ups, actions


def _baselines(ag: pd.DataFrame, events: pd.DataFrame, min_quiet: float, cl: dict[str, str]) -> pd.DataFrame:
    """Return the baseline in force per person and ear with revision candidates."""
    cols = ["person_id", "ear", "group", "baseline_date", "source", "decided", "n_baselines", "quiet_hours",
            "quiet_ok", "valid_check", "candidate", "candidate_date", "candidate_detail"]
    if events.empty:
        return pd.DataFrame(columns=cols)
    cur = events.drop_duplicates(["person_id", "ear"], keep="last").copy()
    cur["n_baselines"] = events.groupby(["person_id", "ear"], sort=False)["baseline_date"].transform("size") \
        .loc[cur.index].to_numpy()
    # the baseline audiogram of each ear, by position (every event names an audiogram row)
    pos = _row_of(ag, cur["person_id"].to_numpy(object), cur["ear"].to_numpy(object), cur["baseline_date"])
    rcols = ["person_id", "ear", "baseline_date", "sts", "retest_status", "sts_computed", "shift_234", "date", "_key"]
    if (pos >= 0).all():
        cur = cur.reset_index(drop=True)
        for c in ("group", "quiet_hours", "valid_check"):
            cur[c] = ag[c].take(pos).reset_index(drop=True)
        key = _ear_key(ag)
        in_force = np.full(int(key.max()) + 1 if len(key) else 0, np.datetime64("NaT", "ns"), dtype="datetime64[ns]")
        in_force[key[pos]] = cur["baseline_date"].to_numpy("datetime64[ns]")
        # candidates among rows compared with the baseline now in force (the columns read below)
        now = ag["baseline_date"].to_numpy("datetime64[ns]") == in_force[key]
        rows = ag[rcols[3:]][now].reset_index(drop=True)
    else:
        info = ag[["person_id", "ear", "date", "group", "quiet_hours", "valid_check"]].rename(
            columns={"date": "baseline_date"})
        cur = cur.merge(info, on=["person_id", "ear", "baseline_date"], how="left")
        rows = ag[rcols].merge(cur[["person_id", "ear", "baseline_date"]], on=["person_id", "ear", "baseline_date"])
    q = cur["quiet_hours"]
    cur["quiet_ok"] = _nbool(_ge(q, min_quiet), q.notna())
    # person and ear as one integer (codes in sorted id order, so sorted keys follow the ids)
    ids = pd.Index(ag["person_id"].to_numpy()[_person_rows(ag)]) if len(ag) else pd.Index([], dtype=object)
    rkey = rows["_key"].to_numpy(np.int64)
    ckey = ids.get_indexer(pd.Index(cur["person_id"].to_numpy(object))).astype(np.int64) * 2 \
        + (cur["ear"].to_numpy(object) == "R")
    sts = rows["sts"].to_numpy(bool)
    n_det = np.bincount(rkey[sts], minlength=len(ids) * 2) if len(ids) else np.zeros(0, dtype=np.int64)
    confirmed = sts & (rows["retest_status"].to_numpy(object) == "confirmed")
    pers_keys = np.zeros(len(n_det), dtype=bool)
    pers_keys[n_det >= 2] = True
    pers_keys[rkey[confirmed]] = True
    computed = rows["sts_computed"].fillna(False).to_numpy(bool)
    rdate = rows["date"].to_numpy("datetime64[ns]")
    latest_shift = pd.Series(rdate[computed]).groupby(rkey[computed], sort=True).max()
    better = rows["shift_234"].to_numpy(float) <= -SETTINGS["improvement_db"]
    same_prev = np.r_[False, rkey[1:] == rkey[:-1]] if len(rkey) else np.zeros(0, dtype=bool)
    prev_better = np.r_[False, better[:-1]] & same_prev if len(rkey) else better
    imp = better & prev_better
    impr = pd.Series(rdate[imp]).groupby(rkey[imp], sort=True).max()
    is_pers = (ckey >= 0) & pers_keys[np.clip(ckey, 0, None)] if len(pers_keys) else np.zeros(len(cur), dtype=bool)
    is_impr = np.isin(ckey, impr.index.to_numpy())
    key = pd.Series(ckey, index=cur.index)
    # 0 none, 1 improvement, 2 persistent shift: each text made once and shared by its rows
    cand = np.where(is_pers, 2, is_impr.astype(np.int64))
    cur["candidate"] = _words(cand, ["", "improvement", "persistent shift"]).to_numpy()
    def at(dates: pd.Series) -> pd.Series:
        if dates.empty:
            return pd.Series(pd.NaT, index=key.index, dtype="datetime64[ns]")
        return _dates(key.map(_dates(dates)))

    pers_date = at(latest_shift)
    impr_date = at(impr)
    cur["candidate_date"] = pers_date.where(is_pers, impr_date.where(is_impr))
    cur["candidate_detail"] = _words(cand, [
        "", f"2000/3000/4000 Hz average {SETTINGS['improvement_db']:g} dB or more better than "
            f"baseline on two tests in a row: the reviewer may revise the baseline ({cl['baseline_revision']})",
        "shift in force on more than one test against this baseline: the reviewer may revise the "
        f"baseline ({cl['baseline_revision']})"]).to_numpy()
    return cur[cols].sort_values(["person_id", "ear"], kind="mergesort").reset_index(drop=True)


def _classify(due: pd.Series, done: pd.Series, as_of: pd.Timestamp) -> np.ndarray:
    """Return 'on time', 'late', 'missing' or 'not yet due' per follow-up."""
    return np.select([done.notna() & (done <= due), done.notna(), due < as_of],
                     ["on time", "late", "missing"], default="not yet due")


def _first_on_or_after(left: pd.DataFrame, events: pd.DataFrame, left_on: str) -> pd.Series:
    """Return, per row of *left*, the first event date on or after left[left_on] for the same person."""
    if events.empty or left.empty:
        return pd.Series(pd.NaT, index=left.index, dtype="datetime64[ns]")
    l2 = left[["person_id", left_on]].copy()
    l2["_i"] = np.arange(len(l2))
    l2 = l2.sort_values(left_on, kind="mergesort")
    ev = events[["person_id", "date"]].rename(columns={"date": "_done"}).sort_values("_done", kind="mergesort")
    ev["_key"] = ev["_done"]
    m = pd.merge_asof(l2, ev, left_on=left_on, right_on="_key", by="person_id", direction="forward")
    m = m.sort_values("_i", kind="mergesort")
    return pd.Series(_dates(m["_done"]).to_numpy(), index=left.index)


def _followups(programme: Programme, ag: pd.DataFrame, decisions: pd.DataFrame,
               as_of: pd.Timestamp, cl: dict[str, str]) -> pd.DataFrame:
    """Return notices, retests, refits and referrals with their timeliness."""
    cfg = programme.config.audiometry
    notices = programme.table("notices")
    notices = pd.DataFrame({"person_id": _col(notices, "person_id", "").astype(str),
                            "date": _dates(_col(notices, "date", pd.NaT)),
                            "about": _col(notices, "about", "").fillna("").astype(str)}).dropna(subset=["date"])
    fits = programme.table("protector_fits")
    fits = pd.DataFrame({"person_id": _col(fits, "person_id", "").astype(str),
                         "date": _dates(_col(fits, "date", pd.NaT))}).dropna(subset=["date"])
    parts = []
    # only the columns each follow-up reads: no copy of the wide frame
    det = ag[["person_id", "ear", "date", "next_date"]][ag["determination"].to_numpy(bool)]
    if not det.empty:
        due = det["date"] + pd.Timedelta(days=int(cfg.retest_days))
        done = det["next_date"]
        parts.append(pd.DataFrame({"person_id": det["person_id"], "ear": det["ear"], "kind": "retest",
                                   "trigger_date": det["date"], "due_date": due, "done_date": done,
                                   "clause": cl["retest"]}))
    act = ag[["person_id", "ear", "date", "determined_on", "not_work_related"]][ag["sts"].to_numpy(bool)]
    if not act.empty:
        trig = act["determined_on"]
        due = trig + pd.Timedelta(days=int(cfg.notice_days))
        done = _first_on_or_after(act, notices, "date")
        parts.append(pd.DataFrame({"person_id": act["person_id"], "ear": act["ear"], "kind": "notice",
                                   "trigger_date": trig, "due_date": due, "done_date": done,
                                   "clause": cl["notice"]}))
        wr = act[~act["not_work_related"]]
        if not wr.empty:
            trig = wr["determined_on"]
            due = trig + pd.Timedelta(days=int(SETTINGS["refit_days"]))
            done = _first_on_or_after(wr, fits, "date")
            parts.append(pd.DataFrame({"person_id": wr["person_id"], "ear": wr["ear"], "kind": "refit",
                                       "trigger_date": trig, "due_date": due, "done_date": done,
                                       "clause": cl["refit"]}))
    ref = decisions[decisions["decision"].eq("refer")] if not decisions.empty else decisions
    if not ref.empty:
        rows = ag[["person_id", "ear"]].take(ref["idx"].to_numpy())
        rr = pd.DataFrame({"person_id": rows["person_id"].to_numpy(), "ear": rows["ear"].to_numpy(),
                           "trigger_date": _dates(ref["review_date"]).to_numpy()})
        due = rr["trigger_date"] + pd.Timedelta(days=int(SETTINGS["referral_days"]))
        told = notices[notices["about"].str.contains("refer", case=False, regex=False)]
        done = _first_on_or_after(rr, told, "trigger_date")
        parts.append(pd.DataFrame({"person_id": rr["person_id"], "ear": rr["ear"], "kind": "referral",
                                   "trigger_date": rr["trigger_date"], "due_date": due, "done_date": done,
                                   "clause": cl["referral"]}))
    if not parts:
        return pd.DataFrame(columns=FOLLOWUP_COLUMNS)
    fu = pd.concat(parts, ignore_index=True)
    for c in ("trigger_date", "due_date", "done_date"):
        fu[c] = _dates(fu[c])
    fu["status"] = _classify(fu["due_date"], fu["done_date"], as_of)
    # after the leave date no retest or refit is due (there is no one left to retest or refit);
    # the written notice of a shift, also one found on an exit audiogram, is still due
    # (1910.95(g)(8)(i) applies to every determination)
    people = programme.table("people")
    leave = pd.Series(_dates(_col(people, "leave_date", pd.NaT)).to_numpy(),
                      index=_col(people, "person_id", "").astype(str).to_numpy())
    leave = leave[~leave.index.duplicated(keep="last")]
    left = _dates(fu["person_id"].map(leave))
    gone = fu["kind"].isin(["retest", "refit"]) & left.notna() & (fu["due_date"] > left) & fu["done_date"].isna()
    fu.loc[gone, "status"] = LEFT_STATUS
    fu = fu[FOLLOWUP_COLUMNS].sort_values(["trigger_date", "person_id", "ear", "kind"], kind="mergesort")
    return fu.reset_index(drop=True)


def _fmt_date(s: pd.Series) -> pd.Series:
    """Return dates as YYYY-MM-DD text ('' for missing)."""
    return _dates(s).dt.strftime("%Y-%m-%d").fillna("")


def _actions(ag: pd.DataFrame, fu: pd.DataFrame, baselines: pd.DataFrame, start: pd.Timestamp,
             as_of: pd.Timestamp, cl: dict[str, str]) -> pd.DataFrame:
    """Return the hearing action list (refits are listed by the compliance stage)."""
    parts = []
    if not fu.empty:
        f = fu[fu["kind"].isin(["notice", "retest", "referral"]) & fu["status"].isin(["late", "missing", "not yet due"])
               & (fu["due_date"] >= start)]
        f = f[~(f["kind"].eq("retest") & f["status"].eq("late"))]
        words = {"notice": "written notice of a shift", "retest": "retest within the retest window",
                 "referral": "referral asked for by the reviewer"}
        what = f["kind"].map(words)
        ear = f["ear"].map(EAR_NAMES).fillna(f["ear"])
        detail = np.select(
            [f["status"].eq("late"), f["status"].eq("missing")],
            [what + " (" + ear + ", shift of " + _fmt_date(f["trigger_date"]) + ") given late on "
             + _fmt_date(f["done_date"]),
             what + " (" + ear + ", " + _fmt_date(f["trigger_date"]) + ") not on record"],
            default=what + " (" + ear + ", " + _fmt_date(f["trigger_date"]) + ") due")
        parts.append(pd.DataFrame({"subject": f["person_id"], "subject_type": "person",
                                   "kind": f["kind"] + " " + f["status"].replace({"not yet due": "due"}),
                                   "detail": detail, "due_date": f["due_date"], "clause": f["clause"]}))
    if not baselines.empty:
        b = baselines[baselines["candidate"].ne("")]
        if not b.empty:
            parts.append(pd.DataFrame({
                "subject": b["person_id"], "subject_type": "person", "kind": "baseline review",
                "detail": b["ear"].map(EAR_NAMES) + ": " + b["candidate"] + " (latest "
                + _fmt_date(b["candidate_date"]) + "); " + b["candidate_detail"],
                "due_date": pd.NaT, "clause": cl["baseline_revision"]}))
    pending = ag["shift_status"].eq("not computed (NR)") & (ag["date"] >= start) & (ag["date"] <= as_of)
    nr = ag[["person_id", "ear", "date"]][pending.to_numpy(bool)]
    if not nr.empty:
        parts.append(pd.DataFrame({
            "subject": nr["person_id"], "subject_type": "person", "kind": "shift review (NR)",
            "detail": nr["ear"].map(EAR_NAMES) + " " + _fmt_date(nr["date"])
            + ": no response at 2000-4000 Hz; the shift is at least as large as the audiometer's limit allows "
              "and is not computed — for the reviewer",
            "due_date": pd.NaT, "clause": cl["review"]}))
    if not parts:
        return pd.DataFrame(columns=ACTION_COLUMNS)
    out = pd.concat(parts, ignore_index=True)
    out["due_date"] = _dates(out["due_date"])
    out = out[ACTION_COLUMNS].sort_values(["due_date", "subject", "kind", "detail"], kind="mergesort",
                                          na_position="last")
    return out.reset_index(drop=True)


# ---------------------------------------------------------------------------------------
# population views


def _last_per_year(ag: pd.DataFrame) -> np.ndarray:
    """Return the positions of the latest audiogram per person, ear and year, retests of a shift left out."""
    pos = np.flatnonzero(~ag["is_retest_of_shift"].to_numpy(bool))
    key = _ear_key(ag)[pos]
    yr = ag["year"].to_numpy()[pos]
    last = np.ones(len(pos), dtype=bool)
    if len(pos) > 1:
        last[:-1] = (key[1:] != key[:-1]) | (yr[1:] != yr[:-1])
    # positions only: the population views read the few columns they need from the frame
    return pos[last]


def _per_person_year(ag: pd.DataFrame, last: np.ndarray) -> pd.DataFrame:
    """Return one row per person and year: group, tested, sts, recordable, mean 2/3/4 kHz average."""
    cols = ["_pid", "year", "person_id", "group", "sts", "recordable", "avg_234", "n_nr", "prev_avg", "prev_year",
            "within_change"]
    if ag.empty:
        return pd.DataFrame(columns=cols)
    year = ag["year"].to_numpy(np.int64)
    y0 = int(year.min())
    ny = int(year.max()) - y0 + 1
    # person and year as one integer (sorted like the pair)
    code = ag["_pid"].to_numpy(np.int64) * ny + (year - y0)
    gid, u = pd.factorize(code, sort=True)
    sts = np.bincount(gid, weights=ag["sts"].to_numpy(bool), minlength=len(u)) > 0
    rec = np.bincount(gid, weights=ag["case"].to_numpy(bool), minlength=len(u)) > 0
    pids = u // ny
    firsts = _person_rows(ag)  # person code -> first row (id and group are the person's)
    # the mean 2/3/4 kHz average and the NR count over each person-year's latest row per ear
    # (at most two rows a person-year, so a plain sum is the sum pandas' mean adds up)
    at = np.searchsorted(u, code[last])
    la = ag["avg_234"].to_numpy(float)[last]
    known = ~np.isnan(la)
    n_avg = np.bincount(at[known], minlength=len(u))
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n_avg > 0, np.bincount(at[known], weights=la[known], minlength=len(u)) / n_avg, np.nan)
    n_nr = np.bincount(at, weights=ag["nr_234"].to_numpy(bool)[last], minlength=len(u)).astype(np.int64)
    with_last = np.bincount(at, minlength=len(u)) > 0
    avg = {"avg_234": mean,  # (a person-year with no latest row has no figures: NaN, as a reindex gives)
           "n_nr": n_nr if with_last.all() else np.where(with_last, n_nr, np.nan)}
    py = pd.DataFrame({"_pid": pids, "year": u % ny + y0,
                       "person_id": ag["person_id"].take(firsts).to_numpy()[pids],
                       "group": ag["group"].take(firsts).to_numpy()[pids],
                       "sts": sts, "recordable": rec, "avg_234": avg["avg_234"], "n_nr": avg["n_nr"]})
    same = np.r_[False, pids[1:] == pids[:-1]]
    py["prev_avg"] = np.where(same, np.r_[np.nan, py["avg_234"].to_numpy(float)[:-1]], np.nan)
    py["prev_year"] = np.where(same, np.r_[np.nan, py["year"].to_numpy(float)[:-1]], np.nan)
    py["within_change"] = (py["avg_234"] - py["prev_avg"]).where(py["prev_year"] == py["year"] - 1)
    return py


def _with_all(df: pd.DataFrame) -> pd.DataFrame:
    """Return *df* plus a copy labelled group 'all'."""
    return pd.concat([df, df.assign(group="all")], ignore_index=True)


def _add_rates(p: pd.DataFrame) -> None:
    """Add STS and recordable rates with exact (Clopper-Pearson) intervals to a count table."""
    level = SETTINGS["ci_level"]
    for what in ("sts", "recordable"):
        p[f"{what}_rate"] = p[f"n_{what}"] / p["n_tested"]
        p[f"{what}_ci_low"], p[f"{what}_ci_high"] = clopper_pearson(p[f"n_{what}"], p["n_tested"], level)


def _population(py: pd.DataFrame) -> pd.DataFrame:
    """Return per group and year: counts, rates with exact 95 % CIs, mean average and change."""
    cols = ["group", "year", "n_tested", "n_sts", "n_recordable", "sts_rate", "sts_ci_low", "sts_ci_high",
            "recordable_rate", "recordable_ci_low", "recordable_ci_high", "mean_avg_234", "n_avg",
            "n_nr_excluded", "change_mean_avg", "mean_within_change", "n_within"]
    if py.empty:
        return pd.DataFrame(columns=cols)
    # every person-year counted in its group and again in "all": groups as integer codes in the
    # order of their text ("all" among them), rows in their order within each group
    gcode, glabel = pd.factorize(np.r_[py["group"].to_numpy(object), np.array(["all"], dtype=object)], sort=True)
    all_code = gcode[-1]
    gcode = gcode[:-1]
    own = np.flatnonzero(gcode >= 0)  # a missing group counts in "all" only
    both = np.r_[own, np.arange(len(py))]
    d = py[["year", "sts", "recordable", "avg_234", "n_nr", "within_change"]].take(both)
    # group and year as one integer key (sorted as the pair): one grouping key instead of two
    year = d["year"].to_numpy(np.int64)
    y0 = int(year.min())
    ny = int(year.max()) - y0 + 1
    key = np.r_[gcode[own], np.full(len(py), all_code)].astype(np.int64) * ny + (year - y0)
    p = d.groupby(key, sort=True).agg(
        n_tested=("year", "size"), n_sts=("sts", "sum"), n_recordable=("recordable", "sum"),
        mean_avg_234=("avg_234", "mean"), n_avg=("avg_234", "count"), n_nr_excluded=("n_nr", "sum"),
        mean_within_change=("within_change", "mean"), n_within=("within_change", "count"))
    k = p.index.to_numpy(np.int64)
    p = p.reset_index(drop=True)
    p.insert(0, "year", (k % ny + y0).astype(d["year"].dtype))
    p.insert(0, "group", np.asarray(glabel, dtype=object)[k // ny])
    for c in ("n_tested", "n_sts", "n_recordable", "n_avg", "n_nr_excluded", "n_within"):
        p[c] = p[c].astype(int)
    _add_rates(p)
    prev = p.groupby("group", sort=False)["mean_avg_234"].shift(1)
    prev_year = p.groupby("group", sort=False)["year"].shift(1)
    p["change_mean_avg"] = (p["mean_avg_234"] - prev).where(prev_year == p["year"] - 1)
    return p[cols]


def _period_groups(py: pd.DataFrame, start: pd.Timestamp, end: pd.Timestamp) -> pd.DataFrame:
    """Return per group the distinct people tested, with an STS and with a case in the period."""
    cols = ["group", "n_tested", "n_sts", "n_recordable", "sts_rate", "sts_ci_low", "sts_ci_high",
            "recordable_rate", "recordable_ci_low", "recordable_ci_high"]
    d = py[(py["year"] >= start.year) & (py["year"] <= end.year)]
    if d.empty:
        return pd.DataFrame(columns=cols)
    # person codes follow the sorted ids
    per = d.groupby("_pid", sort=True).agg(group=("group", "last"), sts=("sts", "any"),
                                           recordable=("recordable", "any")).reset_index()
    p = _with_all(per).groupby("group", sort=True).agg(n_tested=("_pid", "size"), n_sts=("sts", "sum"),
                                                        n_recordable=("recordable", "sum")).reset_index()
    for c in ("n_tested", "n_sts", "n_recordable"):
        p[c] = p[c].astype(int)
    _add_rates(p)
    return p[cols]


def _indicators(ag: pd.DataFrame, last: np.ndarray) -> pd.DataFrame:
    """Return %Worse-sequential and %Better-or-Worse-sequential per group and year."""
    cols = ["group", "year", "n_pairs", "n_worse", "pct_worse", "n_better_or_worse", "pct_better_or_worse",
            "n_incomplete"]
    hl = [f"hl_{f}" for f in NIOSH_FREQS]
    if not len(last):
        return pd.DataFrame(columns=cols)
    k = ag["_pid"].to_numpy(np.int64)[last] * 10000 + ag["year"].to_numpy(np.int64)[last]
    kcode, uk = pd.factorize(k, sort=True)
    right = (_ear_key(ag)[last] & 1).astype(bool)
    firsts = _person_rows(ag)  # person code -> first row of that person
    pids = uk // 10000
    years = uk % 10000
    # sequential annual pairs: the same person's test of the previous calendar year
    same = np.r_[False, (pids[1:] == pids[:-1]) & (years[1:] == years[:-1] + 1)]
    pair = np.flatnonzero(same)
    if not len(pair):
        return pd.DataFrame(columns=cols)
    lim = SETTINGS["indicator_db"]
    # one ear and frequency at a time: the change from the previous year on the pair rows,
    # judged only where every ear and frequency of the pair is known (the rows counted below)
    complete = np.ones(len(pair), dtype=bool)
    any_worse = np.zeros(len(pair), dtype=bool)
    any_bw = np.zeros(len(pair), dtype=bool)
    vals = np.empty(len(uk))
    for r in (False, True):  # left ear, then right ear
        sel = right == r
        at = kcode[sel]
        for c in hl:
            vals.fill(np.nan)
            vals[at] = ag[c].to_numpy(float)[last[sel]]
            d = vals[pair] - vals[pair - 1]
            complete &= np.isfinite(d)
            np.round(d, 6, out=d)
            any_worse |= d >= lim
            any_bw |= np.abs(d, out=d) >= lim
    del vals
    worse = complete & any_worse
    bw = complete & any_bw
    # one group per person (people.csv), as an integer code in the order of the group text
    gcode, glabel = pd.factorize(pd.Series(ag["group"].to_numpy(object)[firsts], dtype=object).fillna(""),
                                 sort=True)
    counts = pd.DataFrame({"g": gcode[pids[pair]], "year": years[pair], "complete": complete,
                           "worse": worse, "bw": bw})
    spec = dict(n_pairs=("complete", "sum"), n_worse=("worse", "sum"), n_better_or_worse=("bw", "sum"),
                n_all=("complete", "size"))
    by_group = counts.groupby(["g", "year"], sort=True).agg(**spec).reset_index()
    by_group.insert(0, "group", np.asarray(glabel, dtype=object)[by_group.pop("g").to_numpy()])
    every = counts.groupby("year", sort=True).agg(**spec).reset_index()
    every.insert(0, "group", "all")
    # a group named "all" adds to the whole-population row, as the group labels do
    out = pd.concat([by_group, every], ignore_index=True).groupby(["group", "year"], sort=True).sum().reset_index()
    for c in ("n_pairs", "n_worse", "n_better_or_worse", "n_all"):
        out[c] = out[c].astype(int)
    out["n_incomplete"] = out["n_all"] - out["n_pairs"]
    with np.errstate(invalid="ignore", divide="ignore"):
        out["pct_worse"] = np.where(out["n_pairs"] > 0, 100.0 * out["n_worse"] / out["n_pairs"].clip(lower=1),
                                    np.nan)
        out["pct_better_or_worse"] = np.where(out["n_pairs"] > 0,
                                              100.0 * out["n_better_or_worse"] / out["n_pairs"].clip(lower=1),
                                              np.nan)
    return out[cols]


def _latest_rows(ag: pd.DataFrame, as_of: pd.Timestamp) -> np.ndarray:
    """Return the positions of the latest audiogram per person and ear on or before *as_of*."""
    pos = np.flatnonzero((ag["date"] <= as_of).to_numpy(bool))
    key = _ear_key(ag)[pos]
    last = np.r_[key[1:] != key[:-1], True] if len(pos) else np.zeros(0, dtype=bool)
    return pos[last]


def _latest_per_ear(ag: pd.DataFrame, as_of: pd.Timestamp, columns: list[str]) -> pd.DataFrame:
    """Return *columns* of the latest audiogram per person and ear on or before *as_of* (no wide copy)."""
    return ag[columns].take(_latest_rows(ag, as_of))


def _age_norms(ag: pd.DataFrame, as_of: pd.Timestamp) -> pd.DataFrame:
    """Return observed hearing levels by age band, sex and frequency vs ISO 7029:2017."""
    cols = ["age_band", "sex", "freq", "n_ears", "n_nr", "mean_age", "observed_median", "observed_p90",
            "iso_median", "iso_p90", "share_worse_than_iso_p90"]
    lat = _latest_per_ear(ag, as_of, ["sex", "age"] + [f"{p}_{f}" for f in AUDIO_FREQS for p in ("hl", "nr")])
    lat = lat[lat["sex"].isin(["M", "F"]) & lat["age"].notna() & (lat["age"] >= 18)]
    if lat.empty:
        return pd.DataFrame(columns=cols)
    edges = list(SETTINGS["age_bands"])
    labels = [f"{lo}-{hi - 1}" if hi < 200 else f"{lo}+" for lo, hi in zip(edges[:-1], edges[1:])]
    band = pd.cut(lat["age"], bins=edges, right=False, labels=labels)
    # age band, sex and frequency as one integer, in the order of the band and sex text
    bcode, blabel = pd.factorize(band.astype(str).to_numpy(object), sort=True)
    scode, slabel = pd.factorize(lat["sex"].to_numpy(object), sort=True)
    nf = len(AUDIO_FREQS)
    cell = (bcode.astype(np.int64) * len(slabel) + scode) * nf
    # the ISO 7029 values depend on age and sex only: evaluated once per distinct pair
    ages = lat["age"].to_numpy(float)
    sexes = lat["sex"].to_numpy(object)
    acode, auniq = pd.factorize(ages)
    codes, uniq = pd.factorize(acode.astype(np.int64) * len(slabel) + scode)
    u_age = np.asarray(auniq, dtype=float)[uniq // len(slabel)]
    u_sex = np.asarray(slabel, dtype=object)[uniq % len(slabel)]
    parts: dict[str, list[np.ndarray]] = {k: [] for k in ("g", "obs", "nr", "age", "iso_md", "iso_p90", "worse")}
    for j, f in enumerate(AUDIO_FREQS):
        v = lat[f"hl_{f}"].to_numpy(float)
        nr = lat[f"nr_{f}"].to_numpy(bool)
        obs = np.where(nr, np.inf, v)  # NR ranks above every number
        p90 = norms.iso7029_percentile(u_age, f, u_sex, 0.10)[codes]
        keep = np.isfinite(obs) | nr
        parts["g"].append((cell + j)[keep])
        parts["obs"].append(obs[keep])
        parts["nr"].append(nr[keep])
        parts["age"].append(ages[keep])
        parts["iso_md"].append(norms.iso7029_median(u_age, f, u_sex)[codes][keep])
        parts["iso_p90"].append(p90[keep])
        parts["worse"].append((obs > p90)[keep].astype(float))
    d = pd.DataFrame({k: np.concatenate(v) for k, v in parts.items()})
    if d.empty:
        return pd.DataFrame(columns=cols)
    g = d.groupby("g", sort=True)
    out = g.agg(n_ears=("obs", "size"), n_nr=("nr", "sum"), mean_age=("age", "mean"), iso_median=("iso_md", "mean"),
                iso_p90=("iso_p90", "mean"), share_worse_than_iso_p90=("worse", "mean")).reset_index()
    gid = out.pop("g").to_numpy(np.int64)
    out.insert(0, "freq", np.asarray(AUDIO_FREQS, dtype=np.int64)[gid % nf])
    out.insert(0, "sex", np.asarray(slabel, dtype=object)[gid // nf % len(slabel)])
    out.insert(0, "age_band", np.asarray(blabel, dtype=object)[gid // nf // len(slabel)])
    out["observed_median"] = g["obs"].quantile(0.5, interpolation="midpoint").to_numpy()
    out["observed_p90"] = g["obs"].quantile(0.9, interpolation="higher").to_numpy()
    out["n_nr"] = out["n_nr"].astype(int)
    return out[cols]


def _noise_expected(ag: pd.DataFrame, ex: ExposureResult | None, as_of: pd.Timestamp) -> tuple[pd.DataFrame, list[str]]:
    """Return per group and frequency the ISO 1999:2013 expected change vs the observed change.

    ``expected_change`` is the combined age and noise change (ISO 1999:2013 Formula (1) at
    the test and at the baseline), not the sum of the two parts.
    """
    cols = ["group", "freq", "lex_8h", "n_ears", "n_nr_excluded", "mean_years", "nipts_at_mean_years",
            "expected_noise_change", "expected_age_change", "expected_change", "observed_change"]
    notes: list[str] = []
    people = getattr(ex, "people", None)
    groups = getattr(ex, "groups", None)
    if people is None or groups is None or not isinstance(people, pd.DataFrame):
        notes.append("No exposure results: the expected noise-induced shift (ISO 1999:2013) is not shown.")
        return pd.DataFrame(columns=cols), notes
    rows = _latest_rows(ag, as_of)
    lat = ag[["person_id", "group", "sex", "date", "baseline_date", "age", "base_age"]
             + [f"{p}_{f}" for f in NOISE_FREQS for p in ("hl", "nr")]].take(rows)
    # hire dates and baseline thresholds, by position
    lat["hire_date"] = ag["hire_date"].to_numpy("datetime64[ns]")[rows]
    for f in NOISE_FREQS:
        lat[f"base_hl_{f}"] = _base(ag, f"hl_{f}", rows)
    lat = lat[lat["baseline_date"].notna() & (lat["date"] > lat["baseline_date"])]
    if lat.empty:
        return pd.DataFrame(columns=cols), notes
    pcols = [c for c in ("person_id", "lex_8h", "first_exposed_date") if c in people.columns]
    pl = people[pcols].drop_duplicates("person_id").rename(columns={"lex_8h": "p_lex"})
    pl["person_id"] = pl["person_id"].astype(str)
    gl = groups[["group", "lex_8h"]].drop_duplicates("group").rename(columns={"lex_8h": "g_lex"})
    gl["group"] = gl["group"].astype(str)
    lat = lat.merge(pl, on="person_id", how="left").merge(gl, on="group", how="left")
    lex = pd.to_numeric(_col(lat, "p_lex"), errors="coerce").fillna(pd.to_numeric(lat["g_lex"], errors="coerce"))
    start = _dates(_col(lat, "first_exposed_date", pd.NaT)).fillna(lat["hire_date"])
    yrs_now = years_between(start, lat["date"]).clip(lower=0)
    yrs_base = years_between(start, lat["baseline_date"]).clip(lower=0)
    frames = []
    for f in NOISE_FREQS:
        n_now = norms.iso1999_nipts(f, lex.to_numpy(float), yrs_now.to_numpy(float))
        n_base = norms.iso1999_nipts(f, lex.to_numpy(float), yrs_base.to_numpy(float))
        sex = lat["sex"].to_numpy(object)
        a_now = norms.iso7029_median(lat["age"].to_numpy(float), f, sex)
        a_base = norms.iso7029_median(lat["base_age"].to_numpy(float), f, sex)
        obs = (lat[f"hl_{f}"] - lat[f"base_hl_{f}"]).to_numpy(float)
        # ISO 1999:2013 Formula (1) combines the age and noise parts at each date; the expected
        # change is the combined level now less the combined level at the baseline
        both = norms.iso1999_combine(a_now, n_now) - norms.iso1999_combine(a_base, n_base)
        frames.append(pd.DataFrame({"group": lat["group"].to_numpy(), "freq": f, "lex": lex.to_numpy(float),
                                    "years": yrs_now.to_numpy(float), "noise": n_now - n_base,
                                    "age": a_now - a_base, "both": both, "obs": obs,
                                    "nr": lat[f"nr_{f}"].to_numpy(bool)}))
    d = pd.concat(frames, ignore_index=True)
    d = d[np.isfinite(d["lex"]) & np.isfinite(d["years"])]
    if d.empty:
        notes.append("No LEX,8h for the tested people: the expected noise-induced shift is not shown.")
        return pd.DataFrame(columns=cols), notes
    out = d.groupby(["group", "freq"], sort=True).agg(
        lex_8h=("lex", "mean"), n_ears=("obs", "count"), n_nr_excluded=("nr", "sum"), mean_years=("years", "mean"),
        expected_noise_change=("noise", "mean"), expected_age_change=("age", "mean"),
        expected_change=("both", "mean"), observed_change=("obs", "mean")).reset_index()
    out["n_nr_excluded"] = out["n_nr_excluded"].astype(int)
    out["nipts_at_mean_years"] = norms.iso1999_nipts(out["freq"].to_numpy(float), out["lex_8h"].to_numpy(float),
                                                     out["mean_years"].to_numpy(float))
    return out[cols], notes


def expected_verdict(observed: Any, expected: Any, tolerance: float | None = None) -> np.ndarray:
    """Return "above", "within" or "below" per pair: the observed change against the expected one.

    Within means |observed - expected| <= *tolerance* dB (default: the programme's setting);
    "" where either is unknown.
    """
    tol = SETTINGS["expected_tolerance_db"] if tolerance is None else float(tolerance)
    d = np.round(np.asarray(observed, dtype=float) - np.asarray(expected, dtype=float), 6)
    out = np.where(d > tol, "above", np.where(d < -tol, "below", "within")).astype(object)
    return np.where(np.isnan(d), "", out).astype(object)


def person_cases(ag: pd.DataFrame) -> pd.DataFrame:
    """Return the recordable cases of 29 CFR 1904.10, one row per case of a person (CASE_COLUMNS).

    An ear meets the criteria (``recordable``) once per baseline. The case is the person's,
    "in one or both ears" (1904.10(a)): the ears of one audiogram make one case, and a later
    audiogram makes a new case only when it is compared with a baseline revised after the
    earlier case (1904.10(b)(2)(i)); an ear still on its original baseline joins the person's
    first case.
    """
    rec = ag.loc[ag["recordable"].astype(bool)] if "recordable" in ag.columns else ag.iloc[0:0]
    if rec.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in CASE_COLUMNS}).astype(
            {"date": "datetime64[ns]", "avg_234": float, "shift": float})
    src = rec["baseline_source"] if "baseline_source" in rec.columns else pd.Series("", index=rec.index)
    revised = src.astype(str).eq("revised by review")
    # the baseline epoch of each row: every original baseline of a person is one epoch
    epoch = pd.to_datetime(rec["baseline_date"]).where(revised, pd.Timestamp.min)
    r = rec.assign(_epoch=epoch.to_numpy()).sort_values(["person_id", "date", "ear"], kind="mergesort")
    first = r.groupby(["person_id", "_epoch"], sort=False)["date"].transform("min")
    r = r[r["date"].eq(first)]
    shift = r["shift_driving"] if "shift_driving" in r.columns else r.get("shift_234")
    ear = r["ear"].astype(str)
    r = r.assign(_shift=pd.to_numeric(shift, errors="coerce"), _l=ear.eq("L").to_numpy(bool),
                 _r=ear.eq("R").to_numpy(bool))
    out = r.groupby(["person_id", "date"], sort=True, as_index=False).agg(
        _l=("_l", "any"), _r=("_r", "any"), avg_234=("avg_234", "max"),
        shift=("_shift", "max"), year=("year", "first"), group=("group", "first"))
    # the ears of the case, in text order: "L", "R" or "L R"
    out["ear"] = _words(out.pop("_l").to_numpy(bool) + 2 * out.pop("_r").to_numpy(bool), ["", "L", "R", "L R"])
    return out[CASE_COLUMNS].sort_values(["date", "person_id"], kind="mergesort").reset_index(drop=True)


def _incidence(cases: pd.DataFrame, years: list[int], hours: float | None, start: pd.Timestamp,
               end: pd.Timestamp) -> tuple[pd.DataFrame, int, float | None]:
    """Return cases per year, rates per 200,000 h where hours_worked is given, and the period figures.

    *cases* has one row per case of a person (person_cases); the rate is cases x 200,000 /
    hours worked (29 CFR 1904; 200,000 h = 100 full-time workers x 40 h x 50 weeks).
    """
    counts = cases.groupby("year").size() if not cases.empty else pd.Series(dtype=int)
    inc = pd.DataFrame({"year": sorted(set(years) | set(counts.index.tolist()))})
    inc["n_cases"] = inc["year"].map(counts).fillna(0).astype(int)
    single = start.year == end.year
    inc["hours_worked"] = np.where(single & (inc["year"] == end.year) & (hours is not None),
                                   float(hours or 0.0), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        inc["rate_per_200k"] = np.where(inc["hours_worked"] > 0, inc["n_cases"] * 200000.0 / inc["hours_worked"],
                                        np.nan)
    in_period = int(((cases["date"] >= start) & (cases["date"] <= end)).sum()) if not cases.empty else 0
    rate = (in_period * 200000.0 / hours) if hours else None
    return inc, in_period, rate


# ---------------------------------------------------------------------------------------
# findings


def _findings(programme: Programme, ag: pd.DataFrame, baselines: pd.DataFrame, min_quiet: float,
              cl: dict[str, str]) -> list[Finding]:
    """Return warnings about the audiogram data (NR, missing frequencies, quiet period, checks, sex)."""
    out: list[Finding] = []
    path = _path(programme, "audiograms")

    src_rows = ag["_row"].to_numpy()

    def add(mask: pd.Series | np.ndarray, column: str, message: Any, key: str) -> None:
        """Add one finding per flagged row; *message* is text or a function of the flagged positions."""
        pos = np.flatnonzero(np.asarray(mask, dtype=bool))
        if not len(pos):
            return
        msgs = message(pos) if callable(message) else [message] * len(pos)
        for r, m in zip(src_rows[pos], msgs):
            out.append(Finding(path, None if pd.isna(r) else int(r), column, WARNING, str(m), key=key))

    for f in AUDIO_FREQS:
        add(ag[f"nr_{f}"], f"hl_{f}", f"no response (NR) at {f} Hz: kept as a censored value at or beyond the "
            "audiometer's limit; averages and shifts that need it are not computed and are flagged for review",
            key=f"nr-{f}")
    for f in STS_FREQS:
        add(ag[f"hl_{f}"].isna() & ~ag[f"nr_{f}"], f"hl_{f}",
            f"{f} Hz not tested: the 2000/3000/4000 Hz average and the STS cannot be computed", key=f"blank-{f}")
    if not baselines.empty:
        b = np.zeros(len(ag), dtype=bool)
        at = _row_of(ag, baselines["person_id"].to_numpy(object), baselines["ear"].to_numpy(object),
                     baselines["baseline_date"])
        b[at[at >= 0]] = True
        q = ag["quiet_hours"]
        add(b & q.notna().to_numpy() & ~_ge(q, min_quiet), "quiet_hours",
            lambda pos: "baseline audiogram after " + q.iloc[pos].round(1).astype(str)
            + f" h without workplace noise (the programme asks for at least {min_quiet:g} h: {cl['quiet']}); "
              "the reviewer may want a new baseline",
            key="baseline-quiet")
        add(b & q.isna().to_numpy(), "quiet_hours", "baseline audiogram: the quiet period before the test is not "
            "recorded", key="baseline-quiet-missing")
    vc = ag["valid_check"]
    bad = vc.notna() & ~vc.fillna(True).astype(bool)
    add(bad, "audiometer_id", lambda pos: "audiogram on a day without a valid audiometer check: "
        + ag["check_reason"].iloc[pos].fillna("").astype(str), key="audiometer-check")
    no_sex = ag["sex"].eq("") & ag["baseline_date"].notna()
    if no_sex.any():
        ppath = _path(programme, "people")
        people = programme.table("people")
        pid = set(ag.loc[no_sex, "person_id"])
        rows = people.loc[people["person_id"].astype(str).isin(pid), "_row"] if "_row" in people.columns \
            else pd.Series([None] * len(pid))
        for r in sorted(rows.dropna().astype(int).tolist()):
            out.append(Finding(ppath, r, "sex", WARNING, "sex not given: no App. F age correction for this "
                               "person's audiograms; the uncorrected STS is used", key="no-sex"))
    return out


# ---------------------------------------------------------------------------------------
# the stage


def compute(programme: Programme, *, exposure: ExposureResult | None = None,
            checks: AudiometerChecks | None = None, rules: RuleSet | None = None) -> HearingResult:
    """Compute baselines, shifts, recordable cases, follow-ups and population views.

    *exposure* gives the levels for the expected noise-induced change (none: not shown);
    *checks* the audiometer checks of each test day (none: computed here); *rules* the headline
    rule set, whose clauses the follow-ups and actions cite (none: programme.yaml's).
    """
    cfg = programme.config
    if rules is None:
        rules = load_rule_set(cfg.rules, cfg)
    cl = clauses_of(rules)
    if checks is None:
        checks = audiometers.compute(programme, rules)
    start = pd.Timestamp(cfg.period.start)
    as_of = pd.Timestamp(cfg.period.end)
    findings: list[Finding] = []
    notes: list[str] = []
    ag = _prepare(programme)
    decisions = _reviews(programme, ag, findings)
    events = _baseline_events(ag, decisions)
    ag = _attach_baseline(ag, events)
    ag = _shifts(ag, cfg.audiometry.age_correction)
    ag = _retests(ag, cfg.audiometry.retest_days)
    ag = _apply_reviews(ag, decisions)
    ag = _status_and_cases(ag)

    meters = _audiometer_status(checks)
    if meters.empty:
        ag["valid_check"] = pd.Series(pd.NA, index=ag.index, dtype="boolean")
        ag["check_reason"] = ""
        if not programme.has("audiometers") and not ag.empty:
            notes.append("No audiometer records (data/audiometers.csv): audiograms are not checked against "
                         "the audiometer's daily check, calibrations and booth levels.")
    else:
        at = _meter_rows(ag, meters)
        found = at >= 0
        at0 = np.clip(at, 0, None)
        known = ag["audiometer_id"].ne("").to_numpy() & found
        ag["valid_check"] = _nbool(found & meters["valid"].to_numpy(bool)[at0], known)
        ag["check_reason"] = np.where(found, meters["reason"].to_numpy(object)[at0], "")

    baselines = _baselines(ag, events, cfg.audiometry.min_quiet_hours, cl)
    cases = person_cases(ag)
    # the ear rows that make a person's case (the population counts people with a case)
    ag["case"] = _case_rows(ag, cases)
    incidence, period_cases, period_rate = _incidence(cases, sorted(ag["year"].unique().tolist()),
                                                      cfg.hours_worked, start, as_of)
    followups = _followups(programme, ag, decisions, as_of, cl)
    actions = _actions(ag, followups, baselines, start, as_of, cl)
    data_findings = _findings(programme, ag, baselines, cfg.audiometry.min_quiet_hours, cl)
    # the working columns no later step reads go now, before the population views
    ag = _drop(ag, LATE_UNUSED)
    last = _last_per_year(ag)
    indicators = _indicators(ag, last)
    py = _per_person_year(ag, last)
    del last
    population = _population(py)
    period_groups = _period_groups(py, start, as_of)
    del py
    age_norms = _age_norms(ag, as_of)
    noise_expected, n_notes = _noise_expected(ag, exposure, as_of)
    notes.extend(n_notes)
    findings.extend(data_findings)
    if ag.empty:
        notes.append("No audiograms (data/audiograms.csv): there are no shifts or recordable cases to show.")

    inper = (ag["date"] >= start) & (ag["date"] <= as_of)
    fu_p = followups[(followups["due_date"] >= start) & (followups["due_date"] <= as_of)
                     & followups["status"].ne(LEFT_STATUS)] if not followups.empty else followups
    inp = inper.to_numpy(bool)
    pid = ag["_pid"].to_numpy(np.int64)
    ud, _ = _date_index(ag)
    summary = {
        "people_tested": int(np.unique(pid[inp]).size),
        "audiograms": int(np.unique(pid[inp] * max(len(ud), 1) + ag["_drank"].to_numpy(np.int64)[inp]).size),
        "people_with_sts": int(np.unique(pid[inp & ag["sts"].to_numpy(bool)]).size),
        "recordable_cases": int(period_cases),
        "recordable_rate_per_200k": None if period_rate is None else round(float(period_rate), 3),
        "niosh_shifts": int(np.unique(pid[inp & ag["niosh_shift"].to_numpy(bool)]).size),
        "followups_due": int(len(fu_p)),
        "followups_on_time": int((fu_p["status"] == "on time").sum()) if len(fu_p) else 0,
        "followups_late_or_missing": int(fu_p["status"].isin(["late", "missing"]).sum()) if len(fu_p) else 0,
        "baseline_candidates": int((baselines["candidate"] != "").sum()) if not baselines.empty else 0,
        "age_correction": bool(cfg.audiometry.age_correction),
    }
    summary = dict(sorted(summary.items()))
    sts_people = frozenset(ag.loc[ag["sts"] & (ag["date"] <= as_of), "person_id"].astype(str))
    # the published frame: the columns later stages, pages and exports read, without a copy;
    # the working columns (keys, positions, dates of follow-ups) go with the working frame
    ag = _drop(ag, WORK_COLUMNS)
    log.info("hearing: %d audiogram rows, %d recordable cases", len(ag), len(cases))
    return HearingResult(audiograms=ag, baselines=baselines, baseline_history=events, cases=cases,
                         incidence=incidence, followups=followups, population=population, period_groups=period_groups,
                         indicators=indicators,
                         age_norms=age_norms, noise_expected=noise_expected, actions=actions, audiometer_ok=meters,
                         summary=summary, findings=findings, notes=notes,
                         sts_people=sts_people)
