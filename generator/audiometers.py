"""Audiometer and booth checks: is each test day covered by a valid check?

Computed once per build and read by the hearing stage (valid check on the test day) and
the compliance stage (audiometer actions, flagged audiograms).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .frames import add_months, as_bool as _bool, as_dates as _as_dates, col as _col, dates as _dates, \
    empty as _empty, lookup as _lookup, table as _table
from .model import Programme
from .rules import RuleSet

#: Booth background limits, dB, per octave band: the programme's own setting. The numbers are
#: those of 29 CFR 1910.95 App. D Table D-1 as printed in 49 CFR 227 App. D Table D-1
#: ("supra-aural earphones"); OSHA's own table was not read, so no clause is cited for them.
BOOTH_LIMITS: dict[int, float] = {500: 40.0, 1000: 40.0, 2000: 47.0, 4000: 57.0, 8000: 62.0}
#: Audiometer check intervals in calendar months when no rule set is given; a rule set's
#: acoustic_calibration_months / exhaustive_calibration_months govern (29 CFR 1910.95(h)(5):
#: acoustic calibration at least annually per App. E, exhaustive every two years).
ACOUSTIC_MONTHS = 12
EXHAUSTIVE_MONTHS = 24

STATUS_COLUMNS = ["audiometer_id", "date", "functional_ok", "acoustic_ok", "exhaustive_ok", "booth_ok",
                  "ok", "reason"]
FLAGGED_COLUMNS = ["person_id", "date", "ear", "audiometer_id", "reason"]


@dataclass(frozen=True)
class AudiometerChecks:
    """The audiometer checks of a programme, judged for every test day."""

    #: one row per audiometer and test day: STATUS_COLUMNS
    status: pd.DataFrame
    #: audiograms on a day without a valid check: FLAGGED_COLUMNS
    flagged: pd.DataFrame
    #: latest state of each audiometer (see _audiometer_overview)
    audiometers: pd.DataFrame
    #: True when data/audiometers.csv was given
    recorded: bool

# ---------------------------------------------------------------------------------------
# audiometer and booth


def _asof_check(tests: pd.DataFrame, checks: pd.DataFrame, kind: str, name: str) -> pd.DataFrame:
    """Attach the latest passing *kind* check on or before each test date."""
    c = checks.loc[checks["check"].eq(kind) & checks["result"].ne("fail"), ["audiometer_id", "date"]]
    c = c.rename(columns={"date": name}).sort_values(name, kind="mergesort")
    c["_key"] = c[name]
    t = tests.sort_values("date", kind="mergesort")
    if c.empty:
        t[name] = pd.Series(pd.NaT, index=t.index, dtype="datetime64[ns]")
        return t
    m = pd.merge_asof(t, c, left_on="date", right_on="_key", by="audiometer_id", direction="backward")
    return m.drop(columns="_key")


def booth_judgement(checks: pd.DataFrame) -> pd.DataFrame:
    """Judge booth measurements against BOOTH_LIMITS; add booth_pass, booth_detail."""
    b = checks.loc[checks["check"].eq("booth")].copy()
    over = []
    measured = pd.Series(False, index=b.index)
    for f, lim in BOOTH_LIMITS.items():
        col = pd.to_numeric(_col(b, f"ob_{f}"), errors="coerce")
        measured |= col.notna()
        text = f"{f} Hz " + col.round(1).map("{:g}".format).astype(str) + f" dB > {lim:g} dB"
        over.append(np.where(col > lim, text, ""))
    detail = pd.Series([""] * len(b), index=b.index, dtype=object)
    for o in over:
        o = pd.Series(o, index=b.index)
        detail = detail.where(o.eq(""), np.where(detail.eq(""), o, detail + "; " + o))
    failed = b["result"].eq("fail")
    b["booth_pass"] = measured & detail.eq("") & ~failed
    detail = detail.where(measured, "no octave-band levels recorded")
    detail = detail.where(~(failed & detail.eq("")), "booth check recorded as failed")
    b["booth_detail"] = detail
    return b


def compute(programme: Programme, rule: RuleSet | None = None) -> AudiometerChecks:
    """Judge every test day against the audiometer's checks (once per build).

    The calibration intervals are the rule set's (*rule*; the module defaults without one).
    """
    acoustic = ACOUSTIC_MONTHS if rule is None or rule.acoustic_calibration_months is None \
        else rule.acoustic_calibration_months
    exhaustive = EXHAUSTIVE_MONTHS if rule is None or rule.exhaustive_calibration_months is None \
        else rule.exhaustive_calibration_months
    status, flagged, meters = _audiometer_checks(programme, float(acoustic), float(exhaustive))
    return AudiometerChecks(status=status, flagged=flagged, audiometers=meters,
                            recorded=programme.has("audiometers"))


def _audiometer_checks(programme: Programme, acoustic: float, exhaustive: float
                       ) -> tuple[pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    aud = _table(programme, "audiograms")
    when = _dates(aud)
    dated = when.notna().to_numpy()
    # test days: one per audiometer and date; audiometer ids as integer codes in sorted order
    meter_code, meter_ids = pd.factorize(_col(aud, "audiometer_id", "").astype(str).to_numpy()[dated], sort=True,
                                         use_na_sentinel=False)
    date_ns = when.to_numpy(dtype="datetime64[ns]")[dated]
    raw = _table(programme, "audiometers")
    checks = pd.DataFrame({"audiometer_id": _col(raw, "audiometer_id", "").astype(str), "date": _dates(raw),
                           "check": _col(raw, "check", "").astype(str),
                           "result": _col(raw, "result", "").astype(str)})
    for f in BOOTH_LIMITS:
        checks[f"ob_{f}"] = pd.to_numeric(_col(raw, f"ob_{f}"), errors="coerce")
    checks = checks.dropna(subset=["date"])
    if not len(date_ns):
        no_use = pd.Series(dtype="datetime64[ns]")
        return _empty(STATUS_COLUMNS), _empty(FLAGGED_COLUMNS), _audiometer_overview(checks, no_use, acoustic,
                                                                                     exhaustive)
    date_rank, uniq_dates = pd.factorize(date_ns.view(np.int64), sort=True)
    day_of_test, day_keys = pd.factorize(meter_code.astype(np.int64) * len(uniq_dates) + date_rank, sort=True)
    day_meter = day_keys // len(uniq_dates)
    days = pd.DataFrame({"audiometer_id": pd.Series(np.asarray(meter_ids, dtype=object)[day_meter],
                                                    dtype=object).astype(str),
                         "date": uniq_dates[day_keys % len(uniq_dates)].view("datetime64[ns]")})
    # the last day of each audiometer (days are sorted by audiometer, then date)
    last_day = np.r_[day_meter[1:] != day_meter[:-1], True]
    last_used = pd.Series(days["date"].to_numpy()[last_day], index=days["audiometer_id"].to_numpy()[last_day])
    func = checks.loc[checks["check"].eq("functional") & checks["result"].ne("fail"),
                      ["audiometer_id", "date"]].drop_duplicates()
    func["functional_ok"] = True
    st = days.merge(func, on=["audiometer_id", "date"], how="left")
    st["functional_ok"] = _bool(st["functional_ok"])
    st = _asof_check(st, checks, "acoustic", "last_acoustic")
    st = _asof_check(st, checks, "exhaustive", "last_exhaustive")
    booths = booth_judgement(checks)
    bcols = booths[["audiometer_id", "date", "booth_pass", "booth_detail"]].rename(
        columns={"date": "last_booth"}).sort_values("last_booth", kind="mergesort")
    if bcols.empty:
        st["last_booth"] = pd.NaT
        st["booth_pass"] = False
        st["booth_detail"] = "no booth measurement recorded"
    else:
        bcols["_key"] = bcols["last_booth"]
        st = pd.merge_asof(st.sort_values("date", kind="mergesort"), bcols, left_on="date", right_on="_key",
                           by="audiometer_id", direction="backward").drop(columns="_key")
        st["booth_detail"] = st["booth_detail"].fillna("no booth measurement recorded")
        st["booth_pass"] = _bool(st["booth_pass"])
    # acoustic and exhaustive calibrations within their intervals before the test (inclusive)
    st["acoustic_ok"] = st["last_acoustic"].notna() & (add_months(st["last_acoustic"], acoustic) >= st["date"])
    st["exhaustive_ok"] = st["last_exhaustive"].notna() & (add_months(st["last_exhaustive"], exhaustive)
                                                          >= st["date"])
    st["booth_ok"] = st["booth_pass"]
    known = st["audiometer_id"].ne("")
    for c in ("functional_ok", "acoustic_ok", "exhaustive_ok", "booth_ok"):
        st[c] = st[c] & known
    st["ok"] = st["functional_ok"] & st["acoustic_ok"] & st["exhaustive_ok"] & st["booth_ok"]
    reasons = [
        (~known, "audiometer not recorded"),
        (known & ~st["functional_ok"], "no functional check that day"),
        (known & ~st["acoustic_ok"], f"no acoustic calibration within {acoustic:g} months"),
        (known & ~st["exhaustive_ok"], f"no exhaustive calibration within {exhaustive:g} months"),
        (known & ~st["booth_ok"], "booth: " + st["booth_detail"].astype(str)),
    ]
    reason = pd.Series([""] * len(st), index=st.index, dtype=object)
    for mask, text in reasons:
        reason = reason.where(~mask, np.where(reason.eq(""), text, reason + "; " + text))
    st["reason"] = reason
    st = st.sort_values(["audiometer_id", "date"], kind="mergesort").reset_index(drop=True)
    status = st[STATUS_COLUMNS].copy()


    # the audiograms of the days without valid checks (status rows are the days, in order)
    bad = ~status["ok"].to_numpy(bool)
    rows = np.flatnonzero(dated)[bad[day_of_test]]
    on_day = day_of_test[bad[day_of_test]]
    flagged = pd.DataFrame({"person_id": _col(aud, "person_id", "").astype(str).iloc[rows].reset_index(drop=True),
                            "date": status["date"].to_numpy()[on_day],
                            "ear": _col(aud, "ear", "").iloc[rows].astype(str).reset_index(drop=True),
                            "audiometer_id": status["audiometer_id"].iloc[on_day].reset_index(drop=True),
                            "reason": status["reason"].iloc[on_day].reset_index(drop=True)})
    flagged = flagged[FLAGGED_COLUMNS].sort_values(["date", "person_id", "ear"], kind="mergesort") \
        .reset_index(drop=True)
    return status, flagged, _audiometer_overview(checks, last_used, acoustic, exhaustive)


def _audiometer_overview(checks: pd.DataFrame, last_used: pd.Series, acoustic: float = ACOUSTIC_MONTHS,
                         exhaustive: float = EXHAUSTIVE_MONTHS) -> pd.DataFrame:
    """Return the latest check of each kind per audiometer and the next calibration dates.

    *last_used*: the last test date of each audiometer id that has audiograms.
    """
    cols = ["audiometer_id", "last_functional", "last_acoustic", "acoustic_due", "last_exhaustive",
            "exhaustive_due", "last_booth", "booth_ok", "booth_detail", "last_used"]
    ids = sorted(set(checks["audiometer_id"]) | set(last_used.index) - {""})
    if not ids:
        return _empty(cols)
    out = pd.DataFrame({"audiometer_id": ids})
    ok = checks[checks["result"].ne("fail")]
    for kind in ("functional", "acoustic", "exhaustive"):
        last = ok[ok["check"].eq(kind)].groupby("audiometer_id")["date"].max()
        out[f"last_{kind}"] = _as_dates(_lookup(out["audiometer_id"], last))
    out["acoustic_due"] = add_months(out["last_acoustic"], acoustic)
    out["exhaustive_due"] = add_months(out["last_exhaustive"], exhaustive)
    booths = booth_judgement(checks).sort_values(["audiometer_id", "date"], kind="mergesort")
    latest = booths.drop_duplicates("audiometer_id", keep="last").set_index("audiometer_id")
    out["last_booth"] = _as_dates(_lookup(out["audiometer_id"], latest["date"]))
    out["booth_ok"] = _bool(_lookup(out["audiometer_id"], latest["booth_pass"]))
    out["booth_detail"] = _lookup(out["audiometer_id"], latest["booth_detail"]).fillna(
        "no booth measurement recorded")
    if len(last_used):
        out["last_used"] = _as_dates(_lookup(out["audiometer_id"], last_used))
    else:
        out["last_used"] = pd.Series(pd.NaT, index=out.index, dtype="datetime64[ns]")
    return out[cols]

