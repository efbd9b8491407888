"""Noise exposure: per-measurement dose/TWA/LEX,8h, group LEX,8h with ISO 9612 uncertainty, bands.

``compute(programme, results)`` returns an :class:`ExposureResult` of DataFrames:

* ``measurements``: one row per noise.csv row with the contract's exposure_results.csv
  columns, plus per rule set ``dose_<id>``, ``twa_<id>``, ``shift_twa_<id>``, ``band_<id>``
  and ``peak_flag_<id>`` (and ``limit_dose_<id>``/``limit_twa_<id>`` where the rule set
  counts a different threshold for its limit, as OSHA's PEL dose does);
* ``groups``: one row per similar exposure group, ISO 9612:2009 job-based (Clause 10) or
  task-based (Clause 9) LEX,8h with the Annex C uncertainty budget, bands per rule set
  judged on LEX,8h and on LEX,8h + U;
* ``tasks``, ``people``, ``weekly``, ``logs``, ``actions``, ``findings``, ``noise_map``.

Choices (also listed in :data:`PARAMETERS` for the methods page):

* basis ``log``: a logged time history gives the exact dose for every rule (criterion,
  exchange rate, threshold), LAeq and duration; ``dosimeter``: the OSHA dose/TWA reported by
  the instrument is used as is, every other dose is an estimate from LAeq; ``steady_level``:
  every dose is an estimate from LAeq assumed steady over the run. An average cannot tell
  which part of the run was above a threshold, so an estimate counts the whole run, with no
  threshold (29 CFR 1910.95 App. A, T = 8/2^((L-90)/5), D = 100 C/T, applied to LAeq): 87.9
  dB(A) for 11.25 h gives a PEL dose estimate of 105 %, not 0 %. ``dose_estimate`` marks the
  rows whose doses are estimates (3-dB figures from LAeq are exact energy figures).
* an area reading is a level at a place, not a person's dose: area rows carry laeq (and
  LCpeak) only, never a dose, a TWA or an LEX,8h.
* a person or group is exposed for each duty of the rule set (``exposed_<duty>``) when its
  level reaches the value the duty starts at, or its highest LCpeak reaches the duty's peak
  value (EU: either parameter alone starts the duty); ``exposed`` is the audiometry duty.
* the dose counts the real run time; LEX,8h uses Te = max(run time, the group's shift), so
  a sample shorter than the shift stands for the whole shift (ISO 9612 sampling), and a run
  longer than the shift counts its real length. ``shift_twa_<id>`` projects the dose the
  same way (D·Te/T); people and groups are judged on these shift figures.
* a group's figures use its personal measurements dated within ``stale_after_years`` of its
  latest one (the current survey) and not after the end of the review period; a person's
  own figure likewise uses their measurements within that interval of their latest one.
"""
from __future__ import annotations

import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from . import levels as lv
from .findings import WARNING, Finding
from .frames import shared_codes
from .inputs.spec import OCTAVE_BANDS
from .model import LazyFrames, NoiseLogs, Programme
from .rules import CONTRACT_RULES, DUTY_KEYS, RuleSet, load_rule_set, rule_sets_for

log = logging.getLogger(__name__)

#: ISO 9612:2009 Table C.5: standard uncertainty u2 of the instrument (dB) by class;
#: a personal sound exposure meter (IEC 61252) counts as 1.5 dB.
U2_BY_CLASS = {1: 0.7, 2: 1.5}
#: ISO 9612:2009 C.6: standard uncertainty u3 of the microphone position (dB).
U3 = 1.0
#: ISO 9612:2009 Annex C: coverage factor k of the one-sided 95 % expanded uncertainty.
K_COVERAGE = 1.65
#: 10/ln 10 (= 4.34 in ISO 9612:2009 Eq. C.5): sensitivity of the level to a duration change.
C1B_FACTOR = 10.0 / math.log(10.0)

#: ISO 9612:2009 Table C.4: c1·u1 (dB) by number of samples N (rows) and u1 (columns, dB).
#: Rows N = 3 and 4 apply to the full-day strategy only (Table C.4, NOTE 1).
TABLE_C4_N = (3, 4, 5, 6, 7, 8, 9, 10, 12, 14, 16, 18, 20, 25, 30)
TABLE_C4_U1 = (0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0)
TABLE_C4 = np.array([
    [0.6, 1.6, 3.1, 5.2, 8.0, 11.5, 15.7, 20.6, 26.1, 32.2, 39.0, 46.5],
    [0.4, 0.9, 1.6, 2.5, 3.6, 5.0, 6.7, 8.6, 10.9, 13.4, 16.1, 19.2],
    [0.3, 0.7, 1.2, 1.7, 2.4, 3.3, 4.4, 5.6, 6.9, 8.5, 10.2, 12.1],
    [0.3, 0.6, 0.9, 1.4, 1.9, 2.6, 3.3, 4.2, 5.2, 6.3, 7.6, 8.9],
    [0.2, 0.5, 0.8, 1.2, 1.6, 2.2, 2.8, 3.5, 4.3, 5.1, 6.1, 7.2],
    [0.2, 0.5, 0.7, 1.1, 1.4, 1.9, 2.4, 3.0, 3.6, 4.4, 5.2, 6.1],
    [0.2, 0.4, 0.7, 1.0, 1.3, 1.7, 2.1, 2.6, 3.2, 3.9, 4.6, 5.4],
    [0.2, 0.4, 0.6, 0.9, 1.2, 1.5, 1.9, 2.4, 2.9, 3.5, 4.1, 4.8],
    [0.2, 0.3, 0.5, 0.8, 1.0, 1.3, 1.7, 2.0, 2.5, 2.9, 3.5, 4.0],
    [0.1, 0.3, 0.5, 0.7, 0.9, 1.2, 1.5, 1.8, 2.2, 2.6, 3.0, 3.5],
    [0.1, 0.3, 0.5, 0.6, 0.8, 1.1, 1.3, 1.6, 2.0, 2.3, 2.7, 3.2],
    [0.1, 0.3, 0.4, 0.6, 0.8, 1.0, 1.2, 1.5, 1.8, 2.1, 2.5, 2.9],
    [0.1, 0.3, 0.4, 0.5, 0.7, 0.9, 1.1, 1.4, 1.7, 2.0, 2.3, 2.6],
    [0.1, 0.2, 0.3, 0.5, 0.6, 0.8, 1.0, 1.2, 1.4, 1.7, 2.0, 2.3],
    [0.1, 0.2, 0.3, 0.4, 0.6, 0.7, 0.9, 1.1, 1.3, 1.5, 1.7, 2.0],
])
#: ISO 9612:2009 10.4: revise the sampling plan when c1·u1 exceeds this (dB).
C1U1_REVISE = 3.5
#: ISO 9612:2009 10.3: minimum number of job-based samples.
MIN_JOB_SAMPLES = 5
#: ISO 9612:2009 9.3: minimum samples per task, and the spread that asks for more.
MIN_TASK_SAMPLES = 3
TASK_SPREAD_DB = 3.0
#: Largest spread (dB) between a log's LAeq and the reported one before a warning (common practice).
LOG_LAEQ_TOLERANCE_DB = 1.0
#: Largest difference between computed and reported A-weighted level from octave bands (dB).
OCTAVE_TOLERANCE_DB = 1.0
#: Points per downsampled time history.
LOG_POINTS = 500
#: Inverse-distance-weighting power of the noise map.
IDW_POWER = 2.0

PARAMETERS: list[tuple[str, Any, str, str]] = [
    ("u2, sound level meter class 1", 0.7, "dB", "ISO 9612:2009 Table C.5"),
    ("u2, sound level meter class 2 or personal exposure meter", 1.5, "dB", "ISO 9612:2009 Table C.5"),
    ("u3, microphone position", U3, "dB", "ISO 9612:2009 C.6"),
    ("coverage factor k (one-sided 95 %)", K_COVERAGE, "", "ISO 9612:2009 Annex C"),
    ("c1·u1 for job-based sampling", "Table C.4, bilinear in N and u1; u1 = 0 gives 0 dB; "
     "N above 30 uses the N = 30 row; u1 above 6 dB extends the last column linearly (warned); "
     "exact at the table cells", "dB", "ISO 9612:2009 Table C.4 (interpolation: ours)"),
    ("c1b, sensitivity to task duration", "10/ln 10 · c1a / T̄m", "dB/h", "ISO 9612:2009 Eq. C.5"),
    ("u1b, task duration uncertainty", "½ (longest − shortest observed duration)", "h",
     "ISO 9612:2009 Eq. C.7 NOTE"),
    ("u1a, task level uncertainty", "standard error of the mean of the task samples (I(I−1))", "dB",
     "ISO 9612:2009 Eq. C.6"),
    ("minimum job-based samples", MIN_JOB_SAMPLES, "", "ISO 9612:2009 10.3"),
    ("task sample spread asking for more samples", TASK_SPREAD_DB, "dB", "ISO 9612:2009 9.3"),
    ("c1·u1 asking for a revised sampling plan", C1U1_REVISE, "dB", "ISO 9612:2009 10.4"),
    ("minimum cumulative job-based duration", "5 h up to 5 workers; +0.5 h per worker to 15; "
     "+0.25 h per worker to 40; split larger groups", "h", "ISO 9612:2009 Table 1"),
    ("reference duration T0", lv.T0_HOURS, "h", "ISO 1999:2013 3.6 / Directive 2003/10/EC Art. 2"),
    ("TWA from dose", "TWA = q/lg 2 · lg(D/100) + Lc", "dB(A)", "29 CFR 1910.95 App. A (q = 5, Lc = 90)"),
    ("noise map interpolation", f"inverse distance weighting of dB values, power {IDW_POWER:g}", "",
     "common practice; for orientation only"),
]

#: Doses the contract always reports (column prefix -> rule set id, which dose); the rule sets
#: behind the fixed export columns are declared once, in generator.rules.CONTRACT_RULES.
CONTRACT_DOSES = {"osha": (CONTRACT_RULES["osha"], None), "osha_pel": (CONTRACT_RULES["osha"], "limit"),
                  "niosh": (CONTRACT_RULES["niosh"], None)}
#: The rule set whose dose a dosimeter reports (its osha_dose_pct / osha_twa input columns).
REPORTED_RULE = CONTRACT_RULES["osha"]
#: How the pages name each basis of a measurement's doses.
BASIS_LABELS = {"log": "time history", "dosimeter": "dosimeter (other doses: estimate from LAeq)",
                "steady_level": "estimate from LAeq"}
#: Figures an area reading never carries (a level at a place is not a person's dose).
PERSONAL_ONLY = ("lex_8h", "osha_dose_pct", "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa")

MEASUREMENT_COLUMNS = ["measurement_id", "person_id", "group", "date", "duration_h", "laeq", "lex_8h",
                       "osha_dose_pct", "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa",
                       "lcpeak", "basis"]
GROUP_COLUMNS = ["group", "name", "n_people", "n_samples", "strategy", "lex_8h", "u", "u_expanded",
                 "lex_8h_upper", "band", "osha_twa", "niosh_twa", "max_lcpeak", "last_measured", "stale",
                 "exposed", "u1", "c1u1", "u2", "u3", "te_h", "cum_hours", "first_row"]
TASK_COLUMNS = ["group", "task", "n_samples", "lp_aeq", "t_mean_h", "lex_8h_m", "share_of_dose", "u1a",
                "c1a", "c1b", "u1b", "u2", "spread_db", "first_row"]
ACTION_COLUMNS = ["subject", "subject_type", "kind", "detail", "due_date", "clause"]


@dataclass
class NoiseMap:
    """Area measurements with positions and an interpolated grid (for orientation only)."""

    #: measurement positions: x_m, y_m, location, laeq (energy mean per position), n, last_date
    points: pd.DataFrame
    #: grid cell centres (m) and interpolated levels z[y, x] (dB(A)); empty when < 3 points
    x: np.ndarray
    y: np.ndarray
    z: np.ndarray


@dataclass
class ExposureResult:
    """Everything the exposure stage computed (see the module docstring)."""

    measurements: pd.DataFrame
    groups: pd.DataFrame
    tasks: pd.DataFrame
    people: pd.DataFrame
    weekly: pd.DataFrame
    logs: Mapping[str, pd.DataFrame]
    actions: pd.DataFrame
    findings: list[Finding]
    noise_map: NoiseMap
    rules: dict[str, RuleSet] = field(default_factory=dict)
    headline: str = ""


# ---------------------------------------------------------------------------------------
# small pure helpers (tested directly)


def c1u1_table(n: Any, u1: Any) -> np.ndarray:
    """Return c1·u1 (dB) from ISO 9612 Table C.4, bilinear in N and u1 (NaN for N < 3)."""
    shape = np.broadcast(np.asarray(n), np.asarray(u1)).shape
    n_arr, u_arr = np.broadcast_arrays(np.atleast_1d(np.asarray(n, dtype=float)),
                                       np.atleast_1d(np.asarray(u1, dtype=float)))
    cols = np.concatenate([[0.0], TABLE_C4_U1])
    tab = np.hstack([np.zeros((len(TABLE_C4_N), 1)), TABLE_C4])
    # interpolate along u1 in every row (linear extension beyond 6 dB from the last segment)
    rows = np.empty((len(TABLE_C4_N), u_arr.size))
    uf = u_arr.ravel()
    for k in range(len(TABLE_C4_N)):
        inside = np.interp(uf, cols, tab[k])
        slope = (tab[k, -1] - tab[k, -2]) / (cols[-1] - cols[-2])
        rows[k] = np.where(uf > cols[-1], tab[k, -1] + slope * (uf - cols[-1]), inside)
    nf = np.clip(n_arr.ravel(), TABLE_C4_N[0], TABLE_C4_N[-1])
    ns = np.asarray(TABLE_C4_N, dtype=float)
    hi = np.clip(np.searchsorted(ns, nf, side="left"), 1, len(ns) - 1)
    lo = hi - 1
    frac = (nf - ns[lo]) / (ns[hi] - ns[lo])
    idx = np.arange(uf.size)
    out = rows[lo, idx] * (1 - frac) + rows[hi, idx] * frac
    out = np.where((n_arr.ravel() < TABLE_C4_N[0]) | np.isnan(uf) | np.isnan(n_arr.ravel()), np.nan, out)
    return out.reshape(shape)


def min_cumulative_hours(n_workers: Any) -> np.ndarray:
    """Return ISO 9612 Table 1's minimum cumulative job-based sampling duration (h)."""
    n = np.asarray(n_workers, dtype=float)
    return np.select([n <= 5, n <= 15, n <= 40], [5.0, 5.0 + 0.5 * (n - 5), 10.0 + 0.25 * (n - 15)], 17.0)


def job_based(levels: Any, te_hours: float, u2: float = 1.5, u3: float = U3) -> dict[str, float]:
    """Return ISO 9612 job-based LEX,8h and its uncertainty from sample levels (Eq. 11–13, C.9)."""
    L = np.asarray(levels, dtype=float)
    n = L.size
    laeq = float(lv.db_mean(L))
    u1 = float(np.std(L, ddof=1)) if n > 1 else float("nan")
    c1u1 = float(c1u1_table(n, u1)) if n >= 3 else float("nan")
    u = math.sqrt(c1u1 ** 2 + u2 ** 2 + u3 ** 2)
    lex = float(lv.lex_8h(laeq, te_hours))
    return {"n": n, "laeq": laeq, "lex_8h": lex, "u1": u1, "c1u1": c1u1, "u2": u2, "u3": u3, "u": u,
            "U": K_COVERAGE * u, "lex_8h_upper": lex + K_COVERAGE * u}


def task_table(tasks: pd.DataFrame, include_duration: bool = True, u3: float = U3) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return (per-task, per-group) ISO 9612 task-based figures from sample rows.

    *tasks* has columns group, task, task_hours, laeq and optionally instrument_class and
    _row. Per task: energy mean level (Eq. 7), mean duration (Eq. 5), LEX,8h,m (Eq. 8),
    u1a (C.6), c1a (C.4), c1b (C.5), u1b (C.7 NOTE); per group: LEX,8h (Eq. 10) and u
    (C.3), U = 1.65 u.
    """
    t = tasks.copy()
    if "instrument_class" not in t:
        t["instrument_class"] = np.nan
    if "_row" not in t:
        t["_row"] = np.arange(len(t)) + 2
    t["_e"] = lv.energy(t["laeq"].to_numpy(float))
    t["_u2"] = np.where(t["instrument_class"].to_numpy(float) == 1, U2_BY_CLASS[1], U2_BY_CLASS[2])
    g = t.groupby(["group", "task"], sort=True)
    per = g.agg(n_samples=("laeq", "size"), _e=("_e", "mean"), t_mean_h=("task_hours", "mean"),
                _tmax=("task_hours", "max"), _tmin=("task_hours", "min"), _lmax=("laeq", "max"),
                _lmin=("laeq", "min"), _lmean=("laeq", "mean"), u2=("_u2", "max"),
                first_row=("_row", "min")).reset_index()
    per["lp_aeq"] = lv.level(per["_e"].to_numpy())
    t = t.merge(per[["group", "task", "_lmean"]], on=["group", "task"], how="left")
    t["_sq"] = (t["laeq"] - t["_lmean"]) ** 2
    ss = t.groupby(["group", "task"], sort=True)["_sq"].sum().to_numpy()
    i = per["n_samples"].to_numpy(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        per["u1a"] = np.where(i > 1, np.sqrt(ss / (i * (i - 1))), 0.0)
    per["u1b"] = 0.5 * (per["_tmax"] - per["_tmin"])
    per["spread_db"] = per["_lmax"] - per["_lmin"]
    per["lex_8h_m"] = lv.lex_8h(per["lp_aeq"].to_numpy(), per["t_mean_h"].to_numpy())
    e_m = lv.energy(per["lex_8h_m"].to_numpy())
    gid = per["group"].to_numpy()
    tot = pd.Series(e_m).groupby(gid).transform("sum").to_numpy()
    per["share_of_dose"] = e_m / tot
    lex_group = lv.level(tot)
    per["c1a"] = per["t_mean_h"] / lv.T0_HOURS * lv.energy(per["lp_aeq"].to_numpy() - lex_group)
    per["c1b"] = C1B_FACTOR * per["c1a"] / per["t_mean_h"]
    term = per["c1a"] ** 2 * (per["u1a"] ** 2 + per["u2"] ** 2 + u3 ** 2)
    if include_duration:
        term = term + (per["c1b"] * per["u1b"]) ** 2
    per["_term"] = term
    grp = per.groupby("group", sort=True).agg(
        n_samples=("n_samples", "sum"), n_tasks=("task", "size"), _e=("lex_8h_m", lambda s: lv.energy(s).sum()),
        _u2=("_term", "sum"), u2=("u2", "max"), te_h=("t_mean_h", "sum")).reset_index()
    grp["lex_8h"] = lv.level(grp["_e"].to_numpy())
    grp["u"] = np.sqrt(grp["_u2"])
    grp["u_expanded"] = K_COVERAGE * grp["u"]
    grp["lex_8h_upper"] = grp["lex_8h"] + grp["u_expanded"]
    per = per[TASK_COLUMNS].reset_index(drop=True)
    return per, grp.drop(columns=["_e", "_u2"])


def band_edges(rule: RuleSet) -> list[float]:
    """Return the sorted distinct action/limit values of *rule* that separate its bands."""
    vals = [v for v in (rule.lower_action_value, rule.upper_action_value, rule.limit_value) if v is not None]
    return sorted(set(vals))


def band_names(rule: RuleSet) -> list[str]:
    """Return the band labels of *rule* in increasing order (as RuleSet.band_labels when consistent)."""
    edges = band_edges(rule)
    labels = rule.band_labels()
    if len(labels) == len(edges) + 1:
        return labels
    out = [f"below {edges[0]:g}"] if edges else ["all"]
    out += [f"{a:g}–{b:g}" for a, b in zip(edges[:-1], edges[1:])]
    if edges:
        out.append(f"at or above {edges[-1]:g}")
    return out


def band_of(values: Any, rule: RuleSet, limit_values: Any = None) -> np.ndarray:
    """Return the band label of each level for *rule* ("" where the level is unknown).

    With *limit_values* (the level of the limit dose, e.g. OSHA's PEL dose counting only
    levels >= 90 dB(A)), the top band needs that level to reach the limit value too.
    """
    v = np.asarray(values, dtype=float)
    edges = np.asarray(band_edges(rule), dtype=float)
    names = np.asarray(band_names(rule), dtype=object)
    idx = np.searchsorted(edges, np.where(np.isnan(v), 0.0, v), side="right")
    if limit_values is not None and rule.limit_value is not None and len(edges):
        lim = np.nan_to_num(np.asarray(limit_values, dtype=float), nan=-np.inf)
        top = len(edges)
        idx = np.where((idx == top) & (lim < rule.limit_value), top - 1, idx)
    return np.where(np.isnan(v), "", names[idx]).astype(object)


def action_value(rule: RuleSet) -> float:
    """Return the level at which the rule set's audiometry duty starts (who is "exposed")."""
    level, _ = rule.duty_values("audiometry")
    return float(level) if level is not None else float("inf")


def exposed_for(rule: RuleSet, duty: str, level: Any, peak: Any) -> np.ndarray:
    """Return whether each level (dB(A)) or highest LCpeak (dB(C)) reaches the start of *duty*.

    Either parameter alone starts the duty (Directive 2003/10/EC Art. 3(1): each action value
    is a daily exposure level and a peak sound pressure); a rule set with no peak value for the
    duty judges the level only.
    """
    lvl, pk = rule.duty_values(duty)
    L = np.nan_to_num(np.asarray(level, dtype=float), nan=-np.inf)
    P = np.nan_to_num(np.asarray(peak, dtype=float), nan=-np.inf)
    out = np.zeros(np.broadcast(L, P).shape, dtype=bool)
    if lvl is not None:
        out |= L >= lvl
    if pk is not None:
        out |= P >= pk
    return out


def peak_flag(lcpeak: Any, rule: RuleSet) -> np.ndarray:
    """Return which peak value of *rule* each LCpeak reaches ("limit", "upper action", "lower action" or "")."""
    p = np.asarray(lcpeak, dtype=float)
    out = np.full(p.shape, "", dtype=object)
    for val, name in ((rule.peak_lower_action, "lower action"), (rule.peak_upper_action, "upper action"),
                      (rule.peak_limit, "limit")):
        if val is not None:
            out = np.where(p >= val, name, out)
    return out


def idw_grid(x: Any, y: Any, values: Any, cells: int, power: float = IDW_POWER
             ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return grid centres (gx, gy) and inverse-distance-weighted dB values z[gy, gx]."""
    px = np.asarray(x, dtype=float)
    py = np.asarray(y, dtype=float)
    pv = np.asarray(values, dtype=float)
    span_x = max(px.max() - px.min(), 1.0)
    span_y = max(py.max() - py.min(), 1.0)
    gx = np.linspace(px.min() - 0.05 * span_x, px.max() + 0.05 * span_x, cells)
    gy = np.linspace(py.min() - 0.05 * span_y, py.max() + 0.05 * span_y, cells)
    xx, yy = np.meshgrid(gx, gy)
    d = np.hypot(xx[..., None] - px, yy[..., None] - py)
    exact = d < 1e-9
    with np.errstate(divide="ignore"):
        w = np.where(exact, 1.0, 1.0 / np.power(d, power))
    anyexact = exact.any(axis=-1, keepdims=True)
    w = np.where(anyexact, exact.astype(float), w)
    z = (w * pv).sum(axis=-1) / w.sum(axis=-1)
    return gx, gy, z


# ---------------------------------------------------------------------------------------
# compute


@dataclass(frozen=True)
class _DoseSpec:
    criterion_level: float
    criterion_hours: float
    exchange_rate: float
    threshold: float | None
    upper_limit: float | None


def _spec(rule: RuleSet, which: str | None = None) -> _DoseSpec:
    thr = rule.threshold
    if which == "limit" and rule.limit_dose_threshold is not None:
        thr = rule.limit_dose_threshold
    return _DoseSpec(rule.criterion_level, rule.criterion_hours, rule.exchange_rate,
                     thr if thr and thr > 0 else None, rule.upper_limit)


def _lookup(keys: pd.Series, values: pd.Series) -> pd.Series:
    """Return values[key] for each key (NaN/NaT where missing), keeping the values' dtype."""
    values = values[~values.index.duplicated()]
    return pd.Series(values.reindex(keys.to_numpy()).to_numpy(), index=keys.index)


def _in_scope(people: pd.DataFrame, start: pd.Timestamp, end: pd.Timestamp) -> pd.DataFrame:
    """Return the people in scope during [start, end]: hired by its end and not gone before its start."""
    keep = pd.Series(True, index=people.index)
    if "hire_date" in people.columns:
        hire = pd.to_datetime(people["hire_date"], errors="coerce")
        keep &= hire.isna() | (hire <= end)
    if "leave_date" in people.columns:
        leave = pd.to_datetime(people["leave_date"], errors="coerce")
        keep &= leave.isna() | (leave >= start)
    return people.loc[keep]


def _period_end(programme: Programme) -> pd.Timestamp:
    return pd.Timestamp(programme.config.period.end)


def _path(programme: Programme, name: str) -> str:
    return programme.present.get(name, f"data/{name}.csv")


def _group_frame(programme: Programme) -> pd.DataFrame:
    """Return one row per group: group, name, shift_hours, days_per_week."""
    gt = programme.table("groups")
    people = programme.table("people")
    noise = programme.table("noise")
    tasks = programme.table("tasks")
    codes = set().union(*(t["group"].unique().tolist() for t in (gt, people, noise, tasks)))
    codes.discard("")
    g = pd.DataFrame({"group": sorted(codes)})
    keep = [c for c in ("group", "name", "shift_hours", "days_per_week") if c in gt.columns]
    g = g.merge(gt[keep].drop_duplicates("group"), on="group", how="left")
    for c, d in (("name", ""), ("shift_hours", 8.0), ("days_per_week", 5.0)):
        if c not in g:
            g[c] = d
    g["name"] = g["name"].fillna("").astype(str)
    g["name"] = np.where(g["name"] == "", g["group"], g["name"])
    g["shift_hours"] = g["shift_hours"].astype(float).fillna(8.0)
    g["days_per_week"] = g["days_per_week"].astype(float).fillna(5.0)
    return g


def _log_arrays(programme: Programme, mids: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                                   np.ndarray, list[str]]:
    """Concatenate every log of *mids*: (row index, levels, interval hours, start ns, ids with a log)."""
    pos = {m: i for i, m in enumerate(mids)}
    have = sorted(m for m in programme.noise_logs if m in pos)
    if not have:
        e = np.empty(0)
        return e.astype(np.int64), e, e, e.astype(np.int64), []
    logs = programme.noise_logs
    if isinstance(logs, NoiseLogs):  # (the reader's: every log's rows already in one frame)
        sizes, start, lev = logs.arrays(have)
    else:
        frames = [logs[m] for m in have]
        sizes = np.array([len(f) for f in frames], dtype=np.int64)
        # one concatenation of every log (taking the columns of each log in turn costs more)
        every = pd.concat(frames, ignore_index=True)
        lev = every["laeq"].to_numpy(float)
        start = every["start"].to_numpy("datetime64[ns]").astype(np.int64)
    idx = np.repeat(np.array([pos[m] for m in have], dtype=np.int64), sizes)
    step = np.repeat(np.array([programme.log_interval_s.get(m, 60.0) for m in have], dtype=float) / 3600.0,
                     sizes)
    return idx, lev, step, start, have


class LogHistories(LazyFrames):
    """The downsampled time history of each logged measurement, by measurement id (sorted).

    The bins of every log are computed at once into flat arrays; the frame of one log
    (start, laeq = energy mean, lmax, n samples) is made when it is first asked for, since
    the pages chart and list only some of them.
    """

    def __init__(self, ids: list[str], first: np.ndarray, nbins: np.ndarray, start: np.ndarray,
                 energy: np.ndarray, lmax: np.ndarray, count: np.ndarray) -> None:
        super().__init__(ids)
        self._first, self._nbins = first, nbins
        self._start, self._energy, self._lmax, self._count = start, energy, lmax, count

    def _make(self, i: int) -> pd.DataFrame:
        sl = slice(self._first[i], self._first[i] + self._nbins[i])
        c = self._count[sl]
        return pd.DataFrame({"start": self._start[sl].view("datetime64[ns]"),
                             "laeq": lv.level(self._energy[sl] / c), "lmax": self._lmax[sl], "n": c})

    def peak(self, mid: str) -> float:
        """Return the highest bin maximum of log *mid* (NaN when none is known): its frame's
        ``lmax.max()``, without making the frame."""
        i = self._pos[mid]
        values = self._lmax[self._first[i]:self._first[i] + self._nbins[i]]
        values = values[~np.isnan(values)]
        return float(values.max()) if values.size else float("nan")


def _downsample(idx: np.ndarray, lev: np.ndarray, start: np.ndarray, mids: np.ndarray,
                have: list[str], energy: np.ndarray | None = None) -> LogHistories:
    """Return per-measurement downsampled histories (≤ LOG_POINTS bins: energy mean, max, start).

    *energy* is lv.energy(lev) when the caller has it already.
    """
    if not have:
        none, no_ints = np.empty(0), np.empty(0, dtype=np.int64)
        return LogHistories([], no_ints, no_ints, no_ints, none, none, no_ints)
    n_rows = len(mids)
    counts = np.bincount(idx, minlength=n_rows)
    # samples are concatenated log by log: the position within a log is a running index from its first sample
    seg_first = np.flatnonzero(np.r_[True, idx[1:] != idx[:-1]])
    seg_len = np.diff(np.r_[seg_first, idx.size])
    order = np.arange(idx.size) - np.repeat(seg_first, seg_len)
    per_bin = np.maximum(1, np.ceil(counts / LOG_POINTS)).astype(np.int64)
    nbins = np.ceil(counts / per_bin).astype(np.int64)
    bin_off = np.concatenate([[0], np.cumsum(nbins)[:-1]])
    b = bin_off[idx] + order // per_bin[idx]
    total = int(nbins.sum())
    e = np.bincount(b, weights=lv.energy(lev) if energy is None else energy, minlength=total)
    c = np.bincount(b, minlength=total)
    # bins are contiguous runs of the concatenated samples: reduce each run at its first sample
    firsts = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
    mx = np.empty(total)
    mx[b[firsts]] = np.maximum.reduceat(lev, firsts)
    st = np.empty(total, dtype=np.int64)
    st[b[firsts]] = start[firsts]
    pos = {m: i for i, m in enumerate(mids)}
    rows = np.array([pos[m] for m in have], dtype=np.int64)
    return LogHistories(list(have), bin_off[rows], nbins[rows], st, e, mx, c)


def _contract_rules(programme: Programme) -> dict[str, RuleSet]:
    """Return the rule sets behind the contract's fixed columns and the reported dose, each read once."""
    ids = sorted({REPORTED_RULE, *CONTRACT_RULES.values()})
    return {rid: load_rule_set(rid, programme.config) for rid in ids}


def _measurements(programme: Programme, rules: dict[str, RuleSet], groups: pd.DataFrame,
                  findings: list[Finding], contract: dict[str, RuleSet]) -> tuple[pd.DataFrame, LogHistories]:
    noise = programme.table("noise").copy().reset_index(drop=True)
    people = programme.table("people")
    path = _path(programme, "noise")
    # each person's group (the last row of a person named twice, as a dict of the rows would give)
    pgroup = people.drop_duplicates("person_id", keep="last").set_index("person_id")["group"]
    m = noise
    for c in ("person_id", "group", "location", "kind"):
        if c not in m:
            m[c] = ""
    for c in ("lcpeak", "osha_dose_pct", "osha_twa", "x_m", "y_m", "instrument_class"):
        if c not in m:
            m[c] = np.nan
    if "_row" not in m:
        m["_row"] = np.arange(len(m)) + 2
    m["group"] = np.where(m["group"].astype(str) == "", m["person_id"].map(pgroup).fillna(""), m["group"])
    m["laeq_reported"] = m["laeq"].astype(float)
    m["duration_reported_h"] = m["duration_h"].astype(float)
    n = len(m)
    mids = m["measurement_id"].to_numpy()

    # octave bands -> A- and C-weighted levels
    oct_cols = [f"oct_{f}" for f in OCTAVE_BANDS]
    if all(c in m for c in oct_cols) and n:
        bands = m[oct_cols].to_numpy(float)
        m["laeq_octaves"] = lv.weighted_from_bands(bands, OCTAVE_BANDS, "A")
        m["lceq_octaves"] = lv.weighted_from_bands(bands, OCTAVE_BANDS, "C")
        diff = (m["laeq_octaves"] - m["laeq_reported"]).abs()
        bad = m[diff > OCTAVE_TOLERANCE_DB]
        for r, d, a in zip(bad["_row"], bad["laeq_octaves"], bad["laeq_reported"]):
            findings.append(Finding(path, int(r), "laeq", WARNING,
                                    f"A-weighted level from the octave bands is {d:.1f} dB(A), {abs(d - a):.1f} dB "
                                    f"from the reported {a:.1f} dB(A) (more than {OCTAVE_TOLERANCE_DB:g} dB)",
                                    key="octave-laeq-mismatch"))
    else:
        m["laeq_octaves"] = np.nan
        m["lceq_octaves"] = np.nan

    # logs
    idx, lev, step, start, have = _log_arrays(programme, mids)
    lev_energy = lv.energy(lev)  # (each sample's energy, worked out once for both uses)
    has_log = np.bincount(idx, minlength=n) > 0
    if have:
        log_hours = np.bincount(idx, weights=step, minlength=n)
        log_laeq = lv.level(np.bincount(idx, weights=lev_energy * step, minlength=n) /
                            np.where(log_hours > 0, log_hours, 1.0))
        dl = np.abs(log_laeq - m["laeq_reported"].to_numpy())
        for i in np.flatnonzero(has_log & (dl > LOG_LAEQ_TOLERANCE_DB)):
            findings.append(Finding(path, int(m["_row"].iat[i]), "laeq", WARNING,
                                    f"the time history of {mids[i]} gives LAeq {log_laeq[i]:.1f} dB(A), "
                                    f"{dl[i]:.1f} dB from the reported {m['laeq_reported'].iat[i]:.1f}; the "
                                    "time history is used", key="log-laeq-mismatch"))
        dh = np.abs(log_hours - m["duration_reported_h"].to_numpy())
        for i in np.flatnonzero(has_log & (dh > 0.1 * m["duration_reported_h"].to_numpy())):
            findings.append(Finding(path, int(m["_row"].iat[i]), "duration_h", WARNING,
                                    f"the time history of {mids[i]} covers {log_hours[i]:.2f} h, the row says "
                                    f"{m['duration_reported_h'].iat[i]:.2f} h; the time history is used",
                                    key="log-duration-mismatch"))
        m["laeq"] = np.where(has_log, log_laeq, m["laeq_reported"])
        m["duration_h"] = np.where(has_log, log_hours, m["duration_reported_h"])
    dosim = ~has_log & (m["osha_dose_pct"].notna() | m["osha_twa"].notna()).to_numpy()
    m["basis"] = np.where(has_log, "log", np.where(dosim, "dosimeter", "steady_level"))

    m["dose_estimate"] = ~has_log
    reported_rule = contract[REPORTED_RULE]
    reported_spec = _spec(reported_rule)
    rep_dose = m["osha_dose_pct"].to_numpy(float)
    rep_twa = m["osha_twa"].to_numpy(float)
    rep_dose = np.where(np.isnan(rep_dose), lv.dose_from_twa(rep_twa, reported_rule.criterion_level,
                                                             reported_rule.exchange_rate), rep_dose)
    laeq = m["laeq"].to_numpy(float)
    hours = m["duration_h"].to_numpy(float)
    upper_seen: dict[float, set[str]] = {}
    cache: dict[tuple[_DoseSpec, bool], np.ndarray] = {}

    def dose(spec: _DoseSpec, reported: bool) -> np.ndarray:
        """Return the dose of every measurement under *spec* (computed once per spec)."""
        key = (spec, reported)
        if key not in cache:
            cache[key] = _dose(spec, reported)
        return cache[key]

    def _dose(spec: _DoseSpec, reported: bool) -> np.ndarray:
        # LAeq assumed steady: an estimate over the whole run, with no threshold (an average
        # cannot tell which part of the run was above it)
        steady = lv.steady_dose_pct(laeq, hours, spec.criterion_level, spec.criterion_hours,
                                    spec.exchange_rate, None)
        if reported:
            steady = np.where(dosim, rep_dose, steady)
        if have:
            logged = lv.grouped_dose_pct(lev, step, idx, n, spec.criterion_level, spec.criterion_hours,
                                         spec.exchange_rate, spec.threshold, spec.upper_limit)
            steady = np.where(has_log, logged, steady)
            if spec.upper_limit is not None and spec.upper_limit not in upper_seen:
                over = np.bincount(idx[lev > spec.upper_limit], minlength=n) > 0
                upper_seen[spec.upper_limit] = set(mids[over].tolist())
        return steady

    shift = m["group"].map(dict(zip(groups["group"], groups["shift_hours"]))).fillna(8.0).to_numpy(float)
    te = np.maximum(hours, shift)
    m["te_h"] = te
    m["lex_8h"] = lv.lex_8h(laeq, te)
    proj = te / hours

    def twa(d: np.ndarray, spec: _DoseSpec) -> np.ndarray:
        t = lv.twa_from_dose(d, spec.criterion_level, spec.exchange_rate)
        return np.where(d > 0, t, np.nan)

    for prefix, (rid, which) in CONTRACT_DOSES.items():
        rule = contract[rid]
        spec = _spec(rule, which)
        d = dose(spec, reported=(spec == reported_spec))
        m[f"{prefix}_dose_pct"] = d
        if prefix != "osha_pel":
            m[f"{prefix}_twa"] = twa(d, spec)
    for rid, rule in rules.items():
        spec = _spec(rule)
        d = dose(spec, reported=(spec == reported_spec))
        m[f"dose_{rid}"] = d
        m[f"twa_{rid}"] = twa(d, spec)
        sd = d * proj
        m[f"shift_twa_{rid}"] = twa(sd, spec)
        judged = m["lex_8h"].to_numpy() if rule.metric == "lex" else \
            np.where(sd > 0, m[f"shift_twa_{rid}"].to_numpy(), -np.inf)
        m[f"level_{rid}"] = judged
        limit_level = None
        if rule.limit_dose_threshold is not None and rule.metric == "twa":
            spec_l = _spec(rule, "limit")
            dl = dose(spec_l, reported=False)
            m[f"limit_dose_{rid}"] = dl
            limit_level = np.where(dl > 0, twa(dl * proj, spec_l), -np.inf)
            m[f"limit_twa_{rid}"] = np.where(dl > 0, limit_level, np.nan)
        m[f"band_{rid}"] = band_of(np.where(np.isnan(laeq), np.nan, judged), rule, limit_level)
        m[f"peak_flag_{rid}"] = peak_flag(m["lcpeak"].to_numpy(float), rule)
    # an area reading is a level at a place: no personal dose, TWA or LEX,8h
    area = (m["kind"] == "area").to_numpy()
    per_rule = [c for c in m.columns if c.startswith(("dose_", "twa_", "shift_twa_", "level_", "limit_"))]
    for c in list(PERSONAL_ONLY) + per_rule:
        m[c] = np.where(area, np.nan, m[c].to_numpy(float))
    for c in [c for c in m.columns if c.startswith("band_")]:
        m[c] = np.where(area, "", m[c].to_numpy(object)).astype(object)
    m["dose_estimate"] = m["dose_estimate"].to_numpy(bool) & ~area
    for ul, ids in sorted(upper_seen.items()):
        for mid in sorted(ids):
            lf = programme.noise_logs[mid]
            first = int(lf["_row"].to_numpy()[lf["laeq"].to_numpy(float) > ul][0]) if "_row" in lf else None
            findings.append(Finding(f"data/noise_logs/{mid}.csv", first, "laeq", WARNING,
                                    f"levels above {ul:g} dB(A), the upper end of the integration range, are "
                                    "counted at their measured level", key="above-integration-range"))
    logs = _downsample(idx, lev, start, mids, have, lev_energy)
    front = MEASUREMENT_COLUMNS + ["dose_estimate", "kind", "location", "x_m", "y_m", "te_h", "laeq_reported",
                                   "duration_reported_h", "laeq_octaves", "lceq_octaves", "instrument_class",
                                   "_row"]
    rest = [c for c in m.columns if c not in front and (c.startswith(("dose_", "twa_", "shift_twa_", "band_",
                                                                      "peak_flag_", "level_", "limit_")))]
    out = m[front + rest].copy()
    out["date"] = pd.to_datetime(out["date"])
    return out.sort_values(["date", "measurement_id"], kind="stable").reset_index(drop=True), logs


def _current(personal: pd.DataFrame, years: float) -> pd.DataFrame:
    """Keep each group's measurements within *years* of its latest one."""
    if personal.empty:
        return personal
    last = personal.groupby("group")["date"].transform("max")
    return personal[personal["date"] >= last - pd.to_timedelta(years * 365.25, unit="D")]


def _group_dose(df: pd.DataFrame, key: str, col: str) -> pd.Series:
    """Return the mean shift-projected dose per *key* of dose column *col*."""
    return (df[col] * df["te_h"] / df["duration_h"]).groupby(df[key]).mean()


def compute(programme: Programme, rules: dict[str, RuleSet] | None = None) -> ExposureResult:
    """Compute every exposure figure of *programme* for each rule set (see the module docstring).

    *rules* are the programme's rule sets, headline first (default: those of programme.yaml).
    """
    cfg = programme.config
    if rules is None:
        rules = rule_sets_for(cfg)
    head_id = cfg.rules
    head = rules[head_id]
    findings: list[Finding] = []
    end = _period_end(programme)
    groups = _group_frame(programme)
    contract = _contract_rules(programme)
    m, logs = _measurements(programme, rules, groups, findings, contract)
    people = programme.table("people")
    noise_path = _path(programme, "noise")
    tasks_path = _path(programme, "tasks")

    # ---- groups: job-based from personal measurements
    personal = m[(m["kind"] == "personal") & (m["group"] != "") & (m["date"] <= end) & m["laeq"].notna()]
    cur = _current(personal, cfg.exposure.stale_after_years)
    u2s = np.where(cur["instrument_class"].to_numpy(float) == 1, U2_BY_CLASS[1], U2_BY_CLASS[2])
    cur = cur.assign(_e=lv.energy(cur["laeq"].to_numpy(float)), _u2=u2s)
    jg = cur.groupby("group").agg(n_samples=("laeq", "size"), _e=("_e", "mean"), u1=("laeq", "std"),
                                  u2=("_u2", "max"), cum_hours=("duration_h", "sum"),
                                  _first_row=("_row", "min"))
    g = groups.set_index("group")
    # headcount: people in the group in scope during the review period (hired on or before its
    # end, not gone before its start); people who left earlier are not in the group any more
    g["n_people"] = _in_scope(people, pd.Timestamp(cfg.period.start), end).groupby("group").size() \
        .reindex(g.index).fillna(0).astype(int)
    job = jg.reindex(g.index)
    job_lex = lv.lex_8h(lv.level(job["_e"].to_numpy(float)), g["shift_hours"].to_numpy(float))
    c1u1 = c1u1_table(job["n_samples"].fillna(0).to_numpy(float), job["u1"].to_numpy(float))
    job_u = np.sqrt(c1u1 ** 2 + job["u2"].to_numpy(float) ** 2 + U3 ** 2)

    # ---- task-based
    tasks = programme.table("tasks")
    if len(tasks):
        undated_or_in = tasks["date"].isna() | (tasks["date"] <= end) if "date" in tasks else True
        tasks_in = tasks[tasks["group"].isin(g.index) & tasks["laeq"].notna() & undated_or_in]
    else:
        tasks_in = tasks
    if len(tasks_in):
        per_task, tg = task_table(tasks_in)
        tg = tg.set_index("group").reindex(g.index)
    else:
        per_task = pd.DataFrame(columns=TASK_COLUMNS)
        tg = pd.DataFrame(index=g.index, columns=["n_samples", "lex_8h", "u", "u_expanded", "u2", "te_h"],
                          dtype=float)
    is_task = tg["lex_8h"].notna().to_numpy()
    is_job = ~is_task & job["n_samples"].notna().to_numpy()
    g["strategy"] = np.where(is_task, "task", np.where(is_job, "job", "none"))
    g["n_samples"] = np.where(is_task, tg["n_samples"].to_numpy(float),
                              job["n_samples"].fillna(0).to_numpy(float)).astype(int)
    g["lex_8h"] = np.where(is_task, tg["lex_8h"].to_numpy(float), np.where(is_job, job_lex, np.nan))
    g["u1"] = np.where(is_job, job["u1"].to_numpy(float), np.nan)
    g["c1u1"] = np.where(is_job, c1u1, np.nan)
    g["u2"] = np.where(is_task, tg["u2"].to_numpy(float), np.where(is_job, job["u2"].to_numpy(float), np.nan))
    g["u3"] = np.where(is_task | is_job, U3, np.nan)
    g["u"] = np.where(is_task, tg["u"].to_numpy(float), np.where(is_job, job_u, np.nan))
    g["u_expanded"] = K_COVERAGE * g["u"]
    g["lex_8h_upper"] = g["lex_8h"] + g["u_expanded"]
    g["te_h"] = np.where(is_task, tg["te_h"].to_numpy(float), g["shift_hours"].to_numpy(float))
    g["cum_hours"] = np.where(is_job, job["cum_hours"].to_numpy(float), np.nan)
    g["first_row"] = job["_first_row"].to_numpy(float)

    # ---- group dose-based figures: mean shift-projected dose (job) or steady task levels (task)
    task_rows = per_task.merge(g[["te_h"]], left_on="group", right_index=True, how="left") \
        if len(per_task) else per_task

    def group_twa(rule: RuleSet, which: str | None = None) -> np.ndarray:
        spec = _spec(rule, which)
        col = f"_dose_{rule.id}_{which}"
        d = lv.steady_dose_pct(cur["laeq"].to_numpy(float), cur["duration_h"].to_numpy(float),
                               spec.criterion_level, spec.criterion_hours, spec.exchange_rate,
                               None)  # LAeq assumed steady: estimate without the threshold
        src = f"dose_{rule.id}" if which is None else f"limit_dose_{rule.id}"
        if src in cur:
            d = cur[src].to_numpy(float)
        jd = _group_dose(cur.assign(**{col: d}), "group", col).reindex(g.index).to_numpy(float)
        if len(task_rows):
            td = lv.steady_dose_pct(task_rows["lp_aeq"].to_numpy(float), task_rows["t_mean_h"].to_numpy(float),
                                    spec.criterion_level, spec.criterion_hours, spec.exchange_rate,
                                    None)  # steady task levels: estimate without the threshold
            tdg = pd.Series(td).groupby(task_rows["group"].to_numpy()).sum().reindex(g.index).to_numpy(float)
        else:
            tdg = np.full(len(g), np.nan)
        dd = np.where(is_task, tdg, np.where(is_job, jd, np.nan))
        return np.where(dd > 0, lv.twa_from_dose(dd, spec.criterion_level, spec.exchange_rate),
                        np.where(dd == 0, -np.inf, np.nan))

    cur = cur.copy()
    # the contract's fixed group columns (osha_twa, niosh_twa) from the declared rule sets
    for prefix, rid in sorted(CONTRACT_RULES.items()):
        if f"dose_{rid}" not in cur:
            cur[f"dose_{rid}"] = m.loc[cur.index, f"{prefix}_dose_pct"]
        g[f"{prefix}_twa"] = group_twa(contract[rid])
    U = g["u_expanded"].to_numpy(float)
    for rid, rule in rules.items():
        val = g["lex_8h"].to_numpy(float) if rule.metric == "lex" else group_twa(rule)
        lim = None
        if rule.limit_dose_threshold is not None and rule.metric == "twa":
            lim = group_twa(rule, "limit")
            g[f"limit_twa_{rid}"] = np.where(np.isneginf(lim), np.nan, lim)
        g[f"level_{rid}"] = val
        g[f"level_upper_{rid}"] = val + U
        g[f"band_{rid}"] = band_of(val, rule, lim)
        g[f"band_upper_{rid}"] = band_of(val + U, rule, None if lim is None else lim + U)
    for c in ("osha_twa", "niosh_twa"):
        g[c] = np.where(np.isneginf(g[c]), np.nan, g[c])
    g["band"] = g[f"band_upper_{head_id}"] if head.judge_with_uncertainty else g[f"band_{head_id}"]
    # with too few samples for an uncertainty the band rests on the level alone
    g["band"] = np.where(g["band"] == "", g[f"band_{head_id}"], g["band"])
    hv = g[f"level_{head_id}"].to_numpy(float)
    judged = np.where(head.judge_with_uncertainty & ~np.isnan(U), hv + np.nan_to_num(U), hv)
    g["max_lcpeak"] = m[(m["group"] != "") & (m["date"] <= end)].groupby("group")["lcpeak"].max().reindex(g.index)
    for duty in DUTY_KEYS:
        g[f"exposed_{duty}"] = exposed_for(head, duty, judged, g["max_lcpeak"].to_numpy(float))
    g["exposed"] = g["exposed_audiometry"]
    dates = [personal[["group", "date"]]]
    if len(tasks_in) and "date" in tasks_in:
        dates.append(tasks_in[["group", "date"]])
    alld = pd.concat(dates, ignore_index=True)
    g["last_measured"] = pd.to_datetime(alld.groupby("group")["date"].max().reindex(g.index))
    limit_age = end - pd.to_timedelta(cfg.exposure.stale_after_years * 365.25, unit="D")
    g["stale"] = g["last_measured"].isna() | (g["last_measured"] < limit_age)
    for c in [c for c in g.columns if c.startswith("level_")]:
        g[c] = np.where(np.isneginf(g[c].to_numpy(float)), np.nan, g[c])
    g = g.reset_index()
    extra = [c for c in g.columns if c.startswith(("band_", "level_", "limit_", "exposed_"))]
    g = g[GROUP_COLUMNS + ["shift_hours", "days_per_week"] + extra]

    _sampling_findings(g, per_task, noise_path, tasks_path, findings)

    # ---- people
    pp = _people(people, m, g, head, end, cfg.exposure.stale_after_years)
    weekly = _weekly(m, groups, end)
    actions = _actions(g, head, cfg, end, m)
    nmap = _noise_map(m, cfg.exposure.map_grid, end)
    findings.sort(key=lambda f: (f.path, f.row if f.row is not None else -1, f.column or "", f.message))
    log.info("exposure: %d measurements, %d groups, %d findings", len(m), len(g), len(findings))
    return ExposureResult(measurements=m, groups=g, tasks=per_task, people=pp, weekly=weekly, logs=logs,
                          actions=actions, findings=findings, noise_map=nmap, rules=rules, headline=head_id)


def _sampling_findings(g: pd.DataFrame, per_task: pd.DataFrame, noise_path: str, tasks_path: str,
                       findings: list[Finding]) -> None:
    """Add warnings where sampling falls short of ISO 9612's minimums."""
    job = g[g["strategy"] == "job"]
    for r in job.itertuples(index=False):
        grp = r.group
        row = None if pd.isna(r.first_row) else int(r.first_row)
        if r.n_samples < MIN_JOB_SAMPLES:
            findings.append(Finding(noise_path, row, "group", WARNING,
                                    f"group {grp}: {r.n_samples} personal sample(s); ISO 9612:2009 10.3 asks for at "
                                    f"least {MIN_JOB_SAMPLES} for job-based sampling"
                                    + ("; no uncertainty can be given below 3" if r.n_samples < 3 else ""),
                                    key="job-few-samples"))
        need = float(min_cumulative_hours(r.n_people))
        if r.cum_hours < need:
            findings.append(Finding(noise_path, row, "duration_h", WARNING,
                                    f"group {grp}: {r.cum_hours:.1f} h sampled in total; ISO 9612:2009 Table 1 asks "
                                    f"for at least {need:g} h for {r.n_people} worker(s)", key="job-short-duration"))
        if r.n_people > 40:
            findings.append(Finding(noise_path, row, "group", WARNING,
                                    f"group {grp}: {r.n_people} workers; ISO 9612:2009 Table 1 suggests splitting "
                                    "groups of more than 40", key="job-large-group"))
        if r.c1u1 > C1U1_REVISE:
            findings.append(Finding(noise_path, row, "laeq", WARNING,
                                    f"group {grp}: c1·u1 = {r.c1u1:.1f} dB exceeds {C1U1_REVISE:g} dB; ISO 9612:2009 "
                                    "10.4 asks for a revised sampling plan", key="job-c1u1"))
        if r.u1 > TABLE_C4_U1[-1]:
            findings.append(Finding(noise_path, row, "laeq", WARNING,
                                    f"group {grp}: samples spread u1 = {r.u1:.1f} dB, beyond ISO 9612 Table C.4 "
                                    "(6 dB); c1·u1 is extrapolated", key="job-u1-beyond-table"))
    for r in per_task.itertuples(index=False):
        if r.n_samples < MIN_TASK_SAMPLES:
            findings.append(Finding(tasks_path, int(r.first_row), "laeq", WARNING,
                                    f"group {r.group}, task '{r.task}': {r.n_samples} sample(s); ISO 9612:2009 9.3 "
                                    f"asks for at least {MIN_TASK_SAMPLES} unless the task adds little to the dose",
                                    key="task-few-samples"))
        if r.spread_db >= TASK_SPREAD_DB:
            findings.append(Finding(tasks_path, int(r.first_row), "laeq", WARNING,
                                    f"group {r.group}, task '{r.task}': samples span {r.spread_db:.1f} dB (≥ "
                                    f"{TASK_SPREAD_DB:g} dB); ISO 9612:2009 9.3 asks for more or longer samples or a "
                                    "finer split of the task", key="task-spread"))


def _people(people: pd.DataFrame, m: pd.DataFrame, g: pd.DataFrame, head: RuleSet,
            end: pd.Timestamp, years: float) -> pd.DataFrame:
    """Return one row per person: personal (or group) exposure, exposed, first exposure date."""
    hid = head.id
    every = m[(m["kind"] == "personal") & (m["person_id"] != "") & (m["date"] <= end) & m["laeq"].notna()]
    p = people[["person_id", "group"]].copy()
    # person ids as integers once, shared by the people rows and the measurements: each grouping
    # below is by person, in row order within a person, as a grouping on the id text is
    every = every[every["person_id"].notna().to_numpy()]  # (a grouping on the id text drops a missing id)
    pcode, ecode = shared_codes(p["person_id"], every["person_id"])
    # a person's own figure uses their measurements within the survey interval of their latest one
    last = every["date"].groupby(ecode).transform("max")
    recent = (every["date"] >= last - pd.to_timedelta(years * 365.25, unit="D")).to_numpy()
    pm = every[recent].copy()
    pm["_e"] = lv.energy(pm["lex_8h"].to_numpy(float))
    pm["_sd"] = pm[f"dose_{hid}"] * pm["te_h"] / pm["duration_h"]
    agg = pm.groupby(ecode[recent]).agg(_e=("_e", "mean"), _sd=("_sd", "mean"), _pk=("lcpeak", "max"))
    if "hire_date" in people:
        p["_hire"] = pd.to_datetime(people["hire_date"])
    else:
        p["_hire"] = pd.NaT
    a = agg.reindex(pcode)
    own_lex = lv.level(a["_e"].to_numpy(float))
    if head.metric == "lex":
        own = own_lex
    else:
        sd = a["_sd"].to_numpy(float)
        own = np.where(sd > 0, lv.twa_from_dose(sd, head.criterion_level, head.exchange_rate),
                       np.where(sd == 0, -np.inf, np.nan))
    gi = g.set_index("group")
    glex = _lookup(p["group"], gi["lex_8h"]).to_numpy(float)
    glev = _lookup(p["group"], gi[f"level_{hid}"]).to_numpy(float)
    gU = _lookup(p["group"], gi["u_expanded"]).to_numpy(float)
    has_own = ~np.isnan(own_lex)
    has_grp = ~np.isnan(glex)
    # a group with a level but no dose above the threshold sits below every band edge
    glev = np.where(np.isnan(glev) & has_grp, -np.inf, glev)
    p["lex_8h"] = np.where(has_own, own_lex, glex)
    val = np.where(has_own, own, glev)
    p["twa"] = np.where(np.isneginf(val), np.nan, val)
    p["source"] = np.where(has_own, "personal", np.where(has_grp, "group", "none"))
    judged = np.where(head.judge_with_uncertainty & ~np.isnan(gU), val + np.nan_to_num(gU), val)
    # the highest LCpeak: the person's own, else the group's
    own_pk = a["_pk"].to_numpy(float)
    peak = np.where(np.isnan(own_pk), _lookup(p["group"], gi["max_lcpeak"]).to_numpy(float), own_pk)
    p["max_lcpeak"] = peak
    for duty in DUTY_KEYS:
        p[f"exposed_{duty}"] = exposed_for(head, duty, judged, peak)
    p["exposed"] = p["exposed_audiometry"]
    #: the level compared with the headline rule set's values (with U where it judges with U)
    p["judged_level"] = np.where(np.isneginf(judged), np.nan, judged)
    # first exposure: first personal measurement at/above, else first group measurement at/above
    hit = np.asarray(exposed_for(head, "audiometry", every[f"level_{hid}"], every["lcpeak"]), dtype=bool)
    first_own = every["date"][hit].groupby(ecode[hit]).min()
    pers = m[(m["kind"] == "personal") & (m["group"] != "") & (m["date"] <= end)]
    gm = pers[exposed_for(head, "audiometry", pers[f"level_{hid}"], pers["lcpeak"])]
    first_grp = gm.groupby("group")["date"].min()
    fo = pd.to_datetime(pd.Series(first_own.astype("datetime64[ns]").reindex(pcode).to_numpy(), index=p.index))
    fg = pd.to_datetime(_lookup(p["group"], first_grp.astype("datetime64[ns]")))
    first = fo.where(fo.notna(), fg)
    first = first.where(~(first.notna() & p["_hire"].notna() & (first < p["_hire"])), p["_hire"])
    p["first_exposed_date"] = pd.to_datetime(first)
    return p.drop(columns=["_hire"]).sort_values("person_id", kind="stable").reset_index(drop=True)


def _weekly(m: pd.DataFrame, groups: pd.DataFrame, end: pd.Timestamp) -> pd.DataFrame:
    """Return LEX,w per person and week where a person has personal measurements on several days."""
    cols = ["person_id", "group", "week_start", "n_days", "lex_w", "max_daily_lex", "days_per_week", "complete"]
    pm = m[(m["kind"] == "personal") & (m["person_id"] != "") & m["lex_8h"].notna() & (m["date"] <= end)]
    if pm.empty:
        return pd.DataFrame(columns=cols)
    pm = pm.assign(_e=lv.energy(pm["lex_8h"].to_numpy(float)))
    day = pm.groupby(["person_id", "group", "date"], as_index=False)["_e"].mean()
    day["week_start"] = day["date"] - pd.to_timedelta(day["date"].dt.day_of_week, unit="D")
    day["_lex"] = lv.level(day["_e"].to_numpy())
    wk = day.groupby(["person_id", "group", "week_start"], as_index=False).agg(
        n_days=("_e", "size"), _s=("_e", "sum"), max_daily_lex=("_lex", "max"))
    wk = wk[wk["n_days"] >= 2].copy()
    wk["lex_w"] = lv.level(wk["_s"].to_numpy() / lv.NOMINAL_WEEK_DAYS)
    wk["days_per_week"] = wk["group"].map(dict(zip(groups["group"], groups["days_per_week"]))).fillna(5.0).astype(float)
    wk["complete"] = wk["n_days"] >= wk["days_per_week"]
    return wk[cols].sort_values(["person_id", "week_start"]).reset_index(drop=True)


def _actions(g: pd.DataFrame, head: RuleSet, cfg: Any, end: pd.Timestamp, m: pd.DataFrame) -> pd.DataFrame:
    """Return the exposure actions: surveys due, controls, peaks."""
    rows: list[dict[str, Any]] = []
    years = cfg.exposure.stale_after_years
    mon = head.clause("monitoring")
    measures_at = head.duties["programme_of_measures"].starts_at if "programme_of_measures" in head.duties else None
    m_level, m_peak = head.duty_values("programme_of_measures")
    # the programme of measures is the limit value's controls, or starts below the limit (EU: upper values)
    ctl = head.clause("programme_of_measures") if measures_at == "limit" else head.clause("limit_value")
    limit_band = band_names(head)[-1] if head.limit_value is not None else None
    names = band_names(head)
    edges = band_edges(head)
    from_band = edges.index(m_level) + 1 if m_level is not None and m_level in edges else None
    for r in g.sort_values("group").itertuples(index=False):
        if pd.isna(r.last_measured):
            rows.append(dict(subject=r.group, subject_type="group", kind="exposure survey",
                             detail="no noise measurement on record for this group", due_date=end.normalize(),
                             clause=mon))
        elif r.stale:
            due = r.last_measured + pd.to_timedelta(years * 365.25, unit="D")
            rows.append(dict(subject=r.group, subject_type="group", kind="exposure survey",
                             detail=f"latest measurement {r.last_measured:%Y-%m-%d} is older than {years:g} years",
                             due_date=due.normalize(), clause=mon))
        if limit_band is not None and r.band == limit_band:
            if head.protectors_count_for_limit:
                detail = (f"group level at or above the limit value {head.limit_value:g} dB(A) without protectors: "
                          "check the exposure under the protectors and reduce the noise")
            else:
                metric = "LEX,8h" if head.metric == "lex" else "8-h TWA"
                detail = (f"group level at or above the {head.short} limit value {head.limit_value:g} dB(A) "
                          f"({metric}): feasible engineering or administrative controls")
            rows.append(dict(subject=r.group, subject_type="group", kind="noise controls", detail=detail,
                             due_date=pd.NaT, clause=ctl))
        elif measures_at not in (None, "limit") and (
                (from_band is not None and r.band in names[from_band:])
                or (m_peak is not None and m_peak != head.peak_limit and not pd.isna(r.max_lcpeak)
                    and r.max_lcpeak >= m_peak)):
            what = f"group level at or above {m_level:g} dB(A)" if m_level is not None else "group level"
            if m_peak is not None:
                what += f" or highest LCpeak at or above {m_peak:g} dB(C)"
            rows.append(dict(subject=r.group, subject_type="group", kind="noise control programme",
                             detail=f"{what} (the {measures_at} action value): programme of technical and "
                                    "organisational measures",
                             due_date=pd.NaT, clause=head.clause("programme_of_measures")))
        if head.peak_limit is not None and not pd.isna(r.max_lcpeak) and r.max_lcpeak >= head.peak_limit:
            rows.append(dict(subject=r.group, subject_type="group", kind="peak level",
                             detail=f"highest LCpeak {r.max_lcpeak:.1f} dB(C) at or above {head.peak_limit:g} dB(C)",
                             due_date=pd.NaT, clause=head.clause("peak_limit")))
    if m.empty:
        rows.append(dict(subject="programme", subject_type="programme", kind="exposure survey",
                         detail="no noise measurements in the records", due_date=end.normalize(), clause=mon))
    a = pd.DataFrame(rows, columns=ACTION_COLUMNS)
    a["due_date"] = pd.to_datetime(a["due_date"])
    return a


def _noise_map(m: pd.DataFrame, cells: int, end: pd.Timestamp) -> NoiseMap:
    """Return the area measurement points (energy mean per position) and the IDW grid."""
    am = m[(m["kind"] == "area") & m["x_m"].notna() & m["y_m"].notna() & m["laeq"].notna() & (m["date"] <= end)]
    if am.empty:
        pts = pd.DataFrame(columns=["x_m", "y_m", "location", "laeq", "n", "last_date"])
        e = np.empty(0)
        return NoiseMap(pts, e, e, np.empty((0, 0)))
    am = am.assign(_e=lv.energy(am["laeq"].to_numpy(float)))
    pts = am.groupby(["x_m", "y_m"], as_index=False).agg(location=("location", "first"), _e=("_e", "mean"),
                                                           n=("_e", "size"), last_date=("date", "max"))
    pts["laeq"] = lv.level(pts["_e"].to_numpy())
    pts = pts.drop(columns="_e")[["x_m", "y_m", "location", "laeq", "n", "last_date"]]
    if len(pts) < 3:
        e = np.empty(0)
        return NoiseMap(pts, e, e, np.empty((0, 0)))
    gx, gy, z = idw_grid(pts["x_m"], pts["y_m"], pts["laeq"], cells)
    return NoiseMap(pts, gx, gy, z)
