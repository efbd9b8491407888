"""Checks of generator.hearing against 29 CFR 1910.95, 29 CFR 1904.10, NIOSH 98-126 and
ANSI S12.13 TR definitions, with small programmes written by tests/progkit.py."""
from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from generator import hearing
from generator.inputs.reader import load_programme
from tests.progkit import make_programme

FREQS = (500, 1000, 2000, 3000, 4000, 6000, 8000)


def ag(pid: str, date: str, ear: str, hl: dict[int, Any] | tuple, kind: str = "periodic", **extra: Any) -> dict:
    """Return one audiograms.csv row; *hl* maps Hz -> level or is (2000, 3000, 4000)."""
    if isinstance(hl, tuple):
        hl = {2000: hl[0], 3000: hl[1], 4000: hl[2]}
    row = {"person_id": pid, "date": date, "ear": ear, "kind": kind}
    for f in FREQS:
        row[f"hl_{f}"] = hl.get(f, 5)
    row.update(extra)
    return row


def run(tmp_path: Path, audiograms: list[dict], people: list[dict] | None = None, config: dict | None = None,
        **files: list[dict]) -> hearing.HearingResult:
    """Write a programme, load it and run the exposure-free hearing stage."""
    data = {"audiograms.csv": audiograms}
    if people is not None:
        data["people.csv"] = people
    for name, rows in files.items():
        data[f"{name}.csv"] = rows
    root = make_programme(tmp_path / "prog", data, config=config)
    prog = load_programme(root)
    errors = [f.format() for f in prog.findings.errors]
    assert not errors, errors
    return hearing.compute(prog)


def person(pid: str, sex: str, birth: str, group: str = "G1") -> dict:
    return {"person_id": pid, "group": group, "sex": sex, "birth_date": birth, "hire_date": "2000-01-01"}


def row(res: hearing.HearingResult, pid: str, date: str, ear: str) -> pd.Series:
    a = res.audiograms
    hit = a[(a["person_id"] == pid) & (a["date"] == pd.Timestamp(date)) & (a["ear"] == ear)]
    assert len(hit) == 1
    return hit.iloc[0]


# ---------------------------------------------------------------------------------------
# 29 CFR 1910.95 App. F worked example


# 29 CFR 1910.95 App. F worked example (male, right ear), hearing levels at
# 1000/2000/3000/4000/6000 Hz at age 27 (baseline) and 32 (most recent)
APPF_BASE = {1000: 0, 2000: 0, 3000: 0, 4000: 5, 6000: 5}
APPF_LATEST = {1000: 5, 2000: 10, 3000: 10, 4000: 25, 6000: 20}


@pytest.mark.parametrize("age_correction", [True, False])
def test_appf_worked_example(tmp_path, age_correction):
    people = [person("M32", "M", "1990-03-01")]
    auds = [ag("M32", "2017-06-01", "R", APPF_BASE, kind="baseline"),  # age 27
            ag("M32", "2022-06-01", "R", APPF_LATEST)]  # age 32
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": age_correction}})
    r = row(res, "M32", "2022-06-01", "R")
    assert r["age"] == 32 and r["base_age"] == 27
    assert r["baseline_date"] == pd.Timestamp("2017-06-01")
    # 29 CFR 1910.95 App. F worked example: 20 dB shift at 4000 Hz (25 - 5), 17 dB after the
    # age correction (Table F-1: 10 at age 32 minus 7 at age 27 = 3 dB)
    # (the per-frequency values are not kept per row: the App. F lookup gives them)
    corr = hearing._appf(np.array([32.0, 27.0]), (np.array([True, True]), np.array([False, False])))
    assert APPF_LATEST[4000] - APPF_BASE[4000] == 20
    assert APPF_LATEST[4000] - APPF_BASE[4000] - (corr[0, 2] - corr[1, 2]) == pytest.approx(17.0)
    # STS, 1910.95(g)(10): mean shift at 2/3/4 kHz ((10 + 10 + 20) / 3 = 13.3 dB) and, age
    # corrected with Table F-1 differences 1/1/3 dB, (9 + 9 + 17) / 3 = 11.7 dB: both >= 10
    assert r["shift_234"] == pytest.approx(40 / 3)
    assert r["shift_234_age_corrected"] == pytest.approx(35 / 3)
    assert bool(r["osha_sts"]) and bool(r["osha_sts_age_corrected"])
    assert bool(r["sts"])
    assert r["sts_basis"] == ("age corrected" if age_correction else "not age corrected")
    # 29 CFR 1904.10: the current 2/3/4 kHz average is (10 + 10 + 25) / 3 = 15 dB < 25: not recordable
    assert r["avg_234"] == pytest.approx(15.0)
    assert not r["recordable"]


def test_appf_female_and_unknown_sex(tmp_path):
    # 29 CFR 1910.95 App. F, Table F-2 (females): age 30 -> 6/5/5, age 50 -> 10/11/12 at 2/3/4 kHz;
    # the differences 4/6/7 dB (mean 5.67) come off the raw mean shift of 12 dB
    people = [person("F1", "F", "1970-01-01"), person("U1", "", "1970-01-01")]
    base = (5, 5, 5)
    now = (17, 17, 17)  # raw shift 12 dB at each frequency
    auds = [ag("F1", "2000-06-01", "L", base, kind="baseline"), ag("F1", "2020-06-01", "L", now),
            ag("U1", "2000-06-01", "L", base, kind="baseline"), ag("U1", "2020-06-01", "L", now)]
    res = run(tmp_path, auds, people)
    f = row(res, "F1", "2020-06-01", "L")
    assert f["shift_234"] == pytest.approx(12.0)
    assert f["shift_234_age_corrected"] == pytest.approx(12.0 - 17 / 3)
    assert bool(f["osha_sts"]) and not bool(f["osha_sts_age_corrected"])
    assert not f["sts"]  # age correction on (the default): corrected 6.3 dB is no STS
    u = row(res, "U1", "2020-06-01", "L")
    # sex unknown: no App. F correction, the uncorrected STS drives the actions (flagged)
    assert pd.isna(u["osha_sts_age_corrected"])
    assert bool(u["sts"]) and u["sts_basis"].startswith("not age corrected")
    assert any(x.key == "no-sex" for x in res.findings)


# ---------------------------------------------------------------------------------------
# 29 CFR 1904.10 recordability


def test_recordable_needs_25_db_average(tmp_path):
    # 29 CFR 1904.10(a): STS and a 2/3/4 kHz average of 25 dB or more in the same ear;
    # baseline average 10 dB, current averages 24 (not recordable) and 25 (recordable)
    people = [person("A", "M", "1995-01-01"), person("B", "M", "1995-01-01")]
    auds = [ag("A", "2020-01-10", "R", (5, 10, 15), kind="baseline"), ag("A", "2021-01-10", "R", (19, 24, 29)),
            ag("B", "2020-01-10", "R", (5, 10, 15), kind="baseline"), ag("B", "2021-01-10", "R", (20, 25, 30))]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}})
    a = row(res, "A", "2021-01-10", "R")
    b = row(res, "B", "2021-01-10", "R")
    assert bool(a["sts"]) and bool(b["sts"])
    assert a["avg_234"] == pytest.approx(24.0) and not a["recordable"]
    assert b["avg_234"] == pytest.approx(25.0) and b["recordable"]
    assert list(res.cases["person_id"]) == ["B"]


def test_age_correction_changes_sts_not_the_25_db_test(tmp_path):
    # 29 CFR 1904.10(b)(3): age correction is allowed for the STS but not for the 25 dB test.
    # Male, baseline at 40 (Table F-1 6/10/14), current at 60 (13/23/33): differences 7/13/19.
    people = [person("OLD", "M", "1960-01-01"), person("OK", "M", "1960-01-01")]
    auds = [
        # raw shift 20 -> corrected 7: STS only without correction
        ag("OLD", "2000-06-01", "L", (10, 10, 10), kind="baseline"), ag("OLD", "2020-06-01", "L", (30, 30, 30)),
        # raw shift 26 -> corrected 13: STS either way; current average 26 dB HL is >= 25
        # although the age-corrected level (26 - 13 = 13 dB) would not be
        ag("OK", "2000-06-01", "L", (0, 0, 0), kind="baseline"), ag("OK", "2020-06-01", "L", (26, 26, 26)),
    ]
    on = run(tmp_path / "on", auds, people, config={"audiometry": {"age_correction": True}})
    off = run(tmp_path / "off", auds, people, config={"audiometry": {"age_correction": False}})
    o_on, o_off = row(on, "OLD", "2020-06-01", "L"), row(off, "OLD", "2020-06-01", "L")
    assert o_on["shift_234_age_corrected"] == pytest.approx(7.0)
    assert not o_on["sts"] and not o_on["recordable"]
    assert o_off["sts"] and o_off["recordable"]
    k_on = row(on, "OK", "2020-06-01", "L")
    assert k_on["shift_234_age_corrected"] == pytest.approx(13.0)
    assert k_on["sts"] and k_on["recordable"]
    assert k_on["avg_234"] == pytest.approx(26.0)


def test_retest_within_30_days(tmp_path):
    # 29 CFR 1904.10(b)(4): a retest within 30 days that does not confirm the STS cancels it;
    # one that confirms it keeps it (one case, not two)
    people = [person("C", "M", "1990-01-01"), person("K", "M", "1990-01-01"), person("L", "M", "1990-01-01")]
    base = (10, 10, 10)
    shift = (25, 25, 30)  # mean shift 16.7 dB, average 26.7 dB HL
    auds = [
        ag("C", "2024-01-05", "R", base, kind="baseline"), ag("C", "2025-01-06", "R", shift),
        ag("C", "2025-01-30", "R", (15, 15, 15), kind="retest"),
        ag("K", "2024-01-05", "R", base, kind="baseline"), ag("K", "2025-01-06", "R", shift),
        ag("K", "2025-02-01", "R", shift, kind="retest"),
        # the next test 40 days later is outside the window: it neither cancels nor is a retest
        ag("L", "2024-01-05", "R", base, kind="baseline"), ag("L", "2025-01-06", "R", shift),
        ag("L", "2025-02-15", "R", (15, 15, 15)),
    ]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}})
    c = row(res, "C", "2025-01-06", "R")
    assert c["retest_status"] == "cancelled" and not c["sts"] and not c["recordable"]
    assert c["shift_status"] == "cancelled by retest"
    k = row(res, "K", "2025-01-06", "R")
    assert k["retest_status"] == "confirmed" and k["sts"] and k["recordable"]
    k2 = row(res, "K", "2025-02-01", "R")
    assert k2["is_retest_of_shift"] and not k2["sts"] and not k2["recordable"]
    assert (res.cases["person_id"] == "K").sum() == 1
    l1 = row(res, "L", "2025-01-06", "R")
    assert l1["retest_status"] == "no retest" and l1["sts"] and l1["recordable"]


def test_one_case_per_person_until_baseline_revised(tmp_path):
    # 29 CFR 1904.10(b)(2)(i): after a recorded case, later shifts compare with the revised
    # baseline; the program records one case per ear until a reviewer revises it
    people = [person("R1", "M", "1990-01-01")]
    auds = [ag("R1", "2020-03-01", "L", (10, 10, 10), kind="baseline"),
            ag("R1", "2021-03-01", "L", (25, 25, 30)),
            ag("R1", "2022-03-01", "L", (25, 30, 30)),
            ag("R1", "2023-03-01", "L", (40, 40, 45)),
            ag("R1", "2021-03-01", "R", (10, 10, 10)), ag("R1", "2022-03-01", "R", (25, 25, 25))]
    res = run(tmp_path / "a", auds, people, config={"audiometry": {"age_correction": False}})
    a = res.audiograms
    ears = a[a["recordable"]].set_index("ear")["date"]
    # each ear meets the criteria once on its baseline ...
    assert ears.loc["L"] == pd.Timestamp("2021-03-01") and ears.loc["R"] == pd.Timestamp("2022-03-01")
    # ... but the case is the person's (1904.10(a), "one or both ears"): the right ear's later
    # shift against the original baseline is not a new case
    assert res.cases["date"].tolist() == [pd.Timestamp("2021-03-01")]
    b = res.baselines.set_index("ear").loc["L"]
    assert b["candidate"] == "persistent shift"  # flagged for the reviewer, never applied
    assert b["baseline_date"] == pd.Timestamp("2020-03-01")
    # the reviewer revises the left baseline to the 2022 audiogram: 2023 compares with it
    reviews = [{"person_id": "R1", "ear": "L", "date": "2022-04-01", "decision": "revise_baseline",
                "audiogram_date": "2022-03-01", "reviewer_role": "audiologist"}]
    res2 = run(tmp_path / "b", auds, people, config={"audiometry": {"age_correction": False}}, reviews=reviews)
    r23 = row(res2, "R1", "2023-03-01", "L")
    assert r23["baseline_date"] == pd.Timestamp("2022-03-01")
    assert r23["shift_234"] == pytest.approx((15 + 10 + 15) / 3)
    assert res2.cases["date"].tolist() == [pd.Timestamp("2021-03-01"), pd.Timestamp("2023-03-01")]
    assert res2.cases["ear"].tolist() == ["L", "L"]
    assert res2.baselines.set_index("ear").loc["L", "source"] == "revised by review"


def test_reviewer_decisions_applied(tmp_path):
    # 29 CFR 1904.10(b)(6): a physician or licensed health care professional may find the
    # loss not work-related; the reviewer's cancel/confirm decisions are applied and shown
    people = [person(p, "M", "1990-01-01") for p in ("N", "X", "Y")]
    base, shift = (10, 10, 10), (25, 25, 30)
    auds = [ag(p, "2024-01-05", "R", base, kind="baseline") for p in ("N", "X", "Y")] + [
        ag("N", "2025-01-06", "R", shift), ag("X", "2025-01-06", "R", shift),
        ag("Y", "2025-01-06", "R", shift), ag("Y", "2025-01-20", "R", base, kind="retest")]
    reviews = [
        {"person_id": "N", "ear": "R", "date": "2025-02-01", "decision": "not_work_related",
         "audiogram_date": "2025-01-06"},
        {"person_id": "X", "ear": "R", "date": "2025-02-01", "decision": "cancel_shift",
         "audiogram_date": "2025-01-06"},
        # confirms although the retest did not
        {"person_id": "Y", "ear": "R", "date": "2025-02-01", "decision": "confirm_shift",
         "audiogram_date": "2025-01-06"},
    ]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}}, reviews=reviews)
    n, x, y = (row(res, p, "2025-01-06", "R") for p in ("N", "X", "Y"))
    assert n["sts"] and not n["recordable"] and n["shift_status"] == "not work-related"
    assert n["review_decision"] == "not_work_related"
    assert not x["sts"] and x["shift_status"] == "cancelled by reviewer"
    assert y["sts"] and y["recordable"] and y["shift_status"] == "confirmed by reviewer"
    # no refit is due for a loss judged not work-related (1910.95(g)(8)(ii))
    fu = res.followups
    assert not ((fu["person_id"] == "N") & (fu["kind"] == "refit")).any()
    assert ((fu["person_id"] == "N") & (fu["kind"] == "notice")).any()


# ---------------------------------------------------------------------------------------
# NIOSH 98-126


def test_niosh_shift_confirmed_vs_not(tmp_path):
    # DHHS (NIOSH) 98-126: 15 dB or more at any of 500-6000 Hz in either ear, confirmed at the
    # same frequency on the next test
    people = [person("Q", "M", "1990-01-01"), person("Z", "M", "1990-01-01")]
    b = {f: 5 for f in FREQS}
    w4 = {**b, 4000: 20}  # +15 at 4000 Hz
    w6 = {**b, 6000: 20}  # +15 at 6000 Hz only
    w14 = {**b, 4000: 19}  # +14 at 4000 Hz
    auds = [ag("Q", "2023-01-01", "L", b, kind="baseline"), ag("Q", "2024-01-01", "L", w4),
            ag("Q", "2025-01-01", "L", w4),
            ag("Z", "2023-01-01", "L", b, kind="baseline"), ag("Z", "2024-01-01", "L", w4),
            ag("Z", "2025-01-01", "L", w6), ag("Z", "2025-03-01", "L", w14)]
    res = run(tmp_path, auds, people)
    assert row(res, "Q", "2024-01-01", "L")["niosh_shift"]
    assert row(res, "Q", "2024-01-01", "L")["niosh_freqs"] == "4000"
    assert not row(res, "Q", "2025-01-01", "L")["niosh_shift"]  # not yet confirmed by a next test
    assert row(res, "Q", "2025-01-01", "L")["niosh_15"]
    assert not row(res, "Z", "2024-01-01", "L")["niosh_shift"]  # next test: 6000 Hz, not 4000 Hz
    assert not row(res, "Z", "2025-01-01", "L")["niosh_shift"]  # 6000 Hz then 14 dB: not confirmed


# ---------------------------------------------------------------------------------------
# NR, follow-ups, audiometer checks, export columns


def test_nr_is_censored_not_averaged(tmp_path):
    people = [person("NR1", "M", "1990-01-01")]
    auds = [ag("NR1", "2024-01-01", "L", (10, 10, 10), kind="baseline"),
            ag("NR1", "2025-01-01", "L", {2000: 20, 3000: 30, 4000: "NR"})]
    res = run(tmp_path, auds, people)
    r = row(res, "NR1", "2025-01-01", "L")
    assert r["nr_any"] and r["nr_4000"]
    assert np.isnan(r["avg_234"]) and np.isnan(r["shift_234"]) and pd.isna(r["osha_sts"])
    assert r["shift_status"] == "not computed (NR)"
    assert (res.actions["kind"] == "shift review (NR)").any()
    assert any(f.key == "nr-4000" and f.column == "hl_4000" for f in res.findings)


def test_followups_notice_retest_refit(tmp_path):
    # 29 CFR 1910.95(g)(8)(i): written notice within 21 days of the determination
    people = [person(p, "M", "1990-01-01") for p in ("T1", "T2", "T3")]
    base, shift = (10, 10, 10), (25, 25, 30)
    auds = [ag(p, "2024-01-05", "R", base, kind="baseline") for p in ("T1", "T2", "T3")] + [
        ag("T1", "2025-03-03", "R", shift), ag("T2", "2025-03-03", "R", shift), ag("T3", "2025-03-03", "R", shift)]
    notices = [{"person_id": "T1", "date": "2025-03-24", "about": "sts"},  # day 21: on time
               {"person_id": "T2", "date": "2025-03-25", "about": "sts"}]  # day 22: late
    fits = [{"person_id": "T1", "protector_id": "EM1", "date": "2025-03-10"}]
    protectors = [{"protector_id": "EM1", "type": "earmuff", "nrr": 25}]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}}, notices=notices,
              protector_fits=fits, protectors=protectors)
    fu = res.followups.set_index(["person_id", "kind"])
    assert fu.loc[("T1", "notice"), "status"] == "on time"
    assert fu.loc[("T1", "notice"), "due_date"] == pd.Timestamp("2025-03-24")
    assert fu.loc[("T2", "notice"), "status"] == "late"
    assert fu.loc[("T3", "notice"), "status"] == "missing"
    assert fu.loc[("T1", "refit"), "status"] == "on time"
    assert fu.loc[("T2", "refit"), "status"] == "missing"
    assert fu.loc[("T1", "retest"), "status"] == "missing"  # no test within 30 days
    kinds = set(res.actions["kind"])
    assert {"notice late", "notice missing", "retest missing"} <= kinds
    assert "refit missing" not in kinds  # refits are listed by the compliance stage


def test_valid_check_from_audiometers(tmp_path):
    # 29 CFR 1910.95(h)(5): functional check each day, acoustic calibration yearly,
    # exhaustive every two years; App. D Table D-1 booth limits 40/40/47/57/62 dB
    people = [person("V", "M", "1990-01-01")]
    auds = [ag("V", "2025-02-03", "L", (10, 10, 10), kind="baseline", audiometer_id="AU1", quiet_hours=16),
            ag("V", "2025-02-04", "L", (10, 10, 10), audiometer_id="AU1")]
    meters = [
        {"audiometer_id": "AU1", "date": "2025-02-03", "check": "functional", "result": "pass"},
        {"audiometer_id": "AU1", "date": "2024-06-01", "check": "acoustic", "result": "pass"},
        {"audiometer_id": "AU1", "date": "2024-06-01", "check": "exhaustive", "result": "pass"},
        {"audiometer_id": "AU1", "date": "2024-06-01", "check": "booth", "result": "pass", "ob_500": 35,
         "ob_1000": 35, "ob_2000": 40, "ob_4000": 50, "ob_8000": 55},
    ]
    res = run(tmp_path, auds, people, audiometers=meters)
    assert row(res, "V", "2025-02-03", "L")["valid_check"] == True  # noqa: E712
    assert row(res, "V", "2025-02-04", "L")["valid_check"] == False  # noqa: E712  no functional check
    assert any(f.key == "audiometer-check" for f in res.findings)
    assert res.baselines.iloc[0]["quiet_ok"] == True  # noqa: E712


def test_hearing_results_columns(tmp_path):
    people = [person("E", "F", "1985-01-01")]
    res = run(tmp_path, [ag("E", "2025-01-01", "L", (5, 5, 5), kind="baseline")], people)
    # the contract's hearing_results.csv columns, in order
    assert list(res.hearing_results().columns) == [
        "person_id", "ear", "date", "kind", "baseline_date", "avg_234", "shift_234", "shift_234_age_corrected",
        "osha_sts", "osha_sts_age_corrected", "niosh_shift", "recordable"]
    # quiet period not recorded on the baseline: flagged
    assert any(f.key == "baseline-quiet-missing" for f in res.findings)


# ---------------------------------------------------------------------------------------
# population views


def test_clopper_pearson_against_scipy():
    # oracle: scipy.stats.beta (tests only); Clopper & Pearson (1934), Biometrika 26:404-413
    from scipy.stats import beta

    k = np.array([0, 1, 3, 10, 50, 99, 100, 7, 0, 1200])
    n = np.array([100, 100, 20, 40, 100, 100, 100, 7, 1, 15000])
    for level in (0.95, 0.90):
        lo, hi = hearing.clopper_pearson(k, n, level)
        a = 1 - level
        with np.errstate(all="ignore"):
            want_lo = np.where(k == 0, 0.0, beta.ppf(a / 2, np.maximum(k, 1), n - k + 1))
            want_hi = np.where(k == n, 1.0, beta.ppf(1 - a / 2, k + 1, np.maximum(n - k, 1)))
        assert lo == pytest.approx(want_lo, abs=1e-9)
        assert hi == pytest.approx(want_hi, abs=1e-9)
    lo, hi = hearing.clopper_pearson([0], [0])
    assert np.isnan(lo[0]) and np.isnan(hi[0])
    # the incomplete beta function and its inverse against scipy.stats.beta (tests only)
    a = np.array([0.5, 2.0, 5.0, 40.0, 300.0])
    b = np.array([0.5, 5.0, 2.0, 900.0, 30.0])
    x = np.array([0.2, 0.3, 0.8, 0.05, 0.9])
    assert hearing.betainc_reg(a, b, x) == pytest.approx(beta.cdf(x, a, b), abs=1e-12)
    assert hearing.beta_ppf([0.025, 0.3, 0.5, 0.9, 0.975], a, b) == pytest.approx(
        beta.ppf([0.025, 0.3, 0.5, 0.9, 0.975], a, b), abs=1e-10)


def test_sequential_indicators(tmp_path):
    # ANSI/ASA S12.13 TR-2002: %Worse-sequential and %Better-or-Worse-sequential over sequential
    # audiogram pairs, 15 dB at any of 500-6000 Hz in either ear (from memory: frequency set)
    people = [person(p, "M", "1990-01-01") for p in ("W", "B", "S")]
    b = {f: 10 for f in FREQS}
    auds = []
    for p in ("W", "B", "S"):
        for e in ("L", "R"):
            auds.append(ag(p, "2024-02-01", e, b, kind="baseline"))
    auds += [ag("W", "2025-02-01", "L", {**b, 6000: 25}), ag("W", "2025-02-01", "R", b),
             ag("B", "2025-02-01", "L", b), ag("B", "2025-02-01", "R", {**b, 500: -5}),
             ag("S", "2025-02-01", "L", {**b, 3000: 24}), ag("S", "2025-02-01", "R", b)]
    # a person tested in 2023 and 2025 only has no sequential (annual) pair in 2025
    people.append(person("GAP", "M", "1990-01-01"))
    auds += [ag("GAP", "2023-02-01", "L", b, kind="baseline"), ag("GAP", "2025-02-01", "L", {**b, 4000: 40})]
    res = run(tmp_path, auds, people)
    ind = res.indicators.set_index(["group", "year"]).loc[("all", 2025)]
    assert ind["n_pairs"] == 3
    assert ind["n_worse"] == 1 and ind["pct_worse"] == pytest.approx(100 / 3)
    assert ind["n_better_or_worse"] == 2 and ind["pct_better_or_worse"] == pytest.approx(200 / 3)


def test_population_rates_and_age_norms(tmp_path):
    people = [person(f"P{i}", "M", "1975-01-01") for i in range(4)]
    auds = []
    for i in range(4):
        auds.append(ag(f"P{i}", "2024-02-01", "L", (10, 10, 10), kind="baseline"))
        auds.append(ag(f"P{i}", "2025-02-01", "L", (30, 30, 30) if i == 0 else (10, 10, 15)))
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}})
    pop = res.population.set_index(["group", "year"]).loc[("G1", 2025)]
    assert pop["n_tested"] == 4 and pop["n_sts"] == 1 and pop["n_recordable"] == 1
    assert pop["sts_rate"] == pytest.approx(0.25)
    from scipy.stats import beta  # oracle (tests only)
    assert pop["sts_ci_low"] == pytest.approx(beta.ppf(0.025, 1, 4), abs=1e-9)
    assert pop["sts_ci_high"] == pytest.approx(beta.ppf(0.975, 2, 3), abs=1e-9)
    # mean 2/3/4 kHz average: (30 + 3 * 11.67) / 4; change from 2024 (10 dB)
    assert pop["mean_avg_234"] == pytest.approx((30 + 3 * 35 / 3) / 4)
    assert pop["change_mean_avg"] == pytest.approx((30 + 3 * 35 / 3) / 4 - 10)
    # ISO 7029:2017 Table 1: median at the band's ages, male 50 y at 4 kHz = 3.40e-3 * 32^2.325
    an = res.age_norms.set_index(["age_band", "sex", "freq"]).loc[("50-59", "M", 4000)]
    assert an["n_ears"] == 4
    assert an["iso_median"] == pytest.approx(3.40e-3 * 32 ** 2.325, abs=1e-6)
    assert an["observed_median"] == pytest.approx(15.0)


# ---------------------------------------------------------------------------------------
# pages


def _site_programme(tmp_path: Path) -> Path:
    people = [person(f"RAWID{i}", "M", "1980-01-01", "G1") for i in range(3)] + [
        person("RAWLONE", "F", "1985-01-01", "G2")]
    auds = []
    for p in ("RAWID0", "RAWID1", "RAWID2", "RAWLONE"):
        for e in ("L", "R"):
            auds.append(ag(p, "2024-02-01", e, (10, 10, 10), kind="baseline"))
            auds.append(ag(p, "2025-02-01", e, (30, 30, 35) if p in ("RAWID0", "RAWLONE") else (10, 15, 10)))
    return make_programme(tmp_path / "site", {"people.csv": people, "audiograms.csv": auds},
                          config={"privacy": {"min_group_size": 2}})


def test_pages_public_and_restricted(tmp_path):
    from generator.build import build_site

    root = _site_programme(tmp_path)
    pub = build_site(root, tmp_path / "pub")
    assert "hearing" in pub.pages and "hearing/g1" in pub.pages and "hearing/g2" in pub.pages
    assert not any(s.startswith("people/") for s in pub.pages)
    assert not (tmp_path / "pub" / "people").exists()
    for f in sorted((tmp_path / "pub").rglob("*.html")):
        text = f.read_text(encoding="utf-8")
        assert "RAWID" not in text and "RAWLONE" not in text and "1980-01-01" not in text, f
    html = (tmp_path / "pub" / "hearing.html").read_text(encoding="utf-8")
    assert pub.context.code("RAWID0") in html  # the shift is listed by pseudonymous code
    g2 = (tmp_path / "pub" / "hearing" / "g2.html").read_text(encoding="utf-8")
    assert "suppressed" in g2 and pub.context.code("RAWLONE") not in g2
    assert 'id="hearing-1-figure"' in html and "%Worse-sequential" in html

    res = build_site(root, tmp_path / "res", restricted=True)
    people_pages = sorted(s for s in res.pages if s.startswith("people/"))
    assert people_pages == sorted(f"people/{res.context.code(p)}" for p in ("RAWID0", "RAWID1", "RAWID2", "RAWLONE"))
    over = (tmp_path / "res" / "hearing.html").read_text(encoding="utf-8")
    assert 'href="people.html"' in over  # the restricted overview links the index of person pages
    # the shift listed by code links to the person's page
    assert f'href="people/{res.context.code("RAWID0")}.html"' in over
    assert 'href="people' not in html  # the public one does not
    page = (tmp_path / "res" / f"{people_pages[0]}.html").read_text(encoding="utf-8").replace(" ", "")
    assert '"type":"log"' in page and '"autorange":"reversed"' in page


def test_no_audiograms(tmp_path):
    root = make_programme(tmp_path / "empty", {})
    prog = load_programme(root)
    res = hearing.compute(prog)
    assert res.audiograms.empty and res.cases.empty and res.followups.empty
    assert list(res.hearing_results().columns)[:3] == ["person_id", "ear", "date"]
    assert any("No audiograms" in n for n in res.notes)
    from generator.build import build_site
    rep = build_site(root, tmp_path / "out")
    assert "hearing" in rep.pages


def test_incidence_improvement_and_referral(tmp_path):
    # incidence rate = cases x 200,000 / hours worked (OSHA recordkeeping incidence-rate formula,
    # 29 CFR 1904 "Forms" instructions: N / EH x 200,000)
    people = [person("I1", "M", "1990-01-01"), person("I2", "M", "1990-01-01"), person("IM", "F", "1990-01-01")]
    auds = [ag("I1", "2024-01-10", "R", (10, 10, 10), kind="baseline"), ag("I1", "2025-01-10", "R", (25, 30, 30)),
            ag("I2", "2024-01-10", "L", (10, 10, 10), kind="baseline"), ag("I2", "2025-01-10", "L", (25, 30, 30)),
            # marked improvement on two tests in a row: a revision candidate, not applied
            ag("IM", "2023-01-10", "L", (25, 25, 25), kind="baseline"), ag("IM", "2024-01-10", "L", (15, 20, 20)),
            ag("IM", "2025-01-10", "L", (15, 15, 20))]
    reviews = [{"person_id": "I1", "ear": "R", "date": "2025-02-01", "decision": "refer",
                "audiogram_date": "2025-01-10"}]
    notices = [{"person_id": "I1", "date": "2025-02-10", "about": "referral to audiologist"}]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}, "hours_worked": 400000},
              reviews=reviews, notices=notices)
    assert res.summary["recordable_cases"] == 2
    assert res.summary["recordable_rate_per_200k"] == pytest.approx(1.0)
    inc = res.incidence.set_index("year").loc[2025]
    assert inc["n_cases"] == 2 and inc["rate_per_200k"] == pytest.approx(1.0)
    b = res.baselines.set_index("person_id").loc["IM"]
    assert b["candidate"] == "improvement" and b["candidate_date"] == pd.Timestamp("2025-01-10")
    assert b["baseline_date"] == pd.Timestamp("2023-01-10")  # never revised automatically
    fu = res.followups.set_index(["person_id", "kind"])
    assert fu.loc[("I1", "referral"), "status"] == "on time"
    assert fu.loc[("I1", "referral"), "done_date"] == pd.Timestamp("2025-02-10")
    assert res.sts_people == frozenset({"I1", "I2"})


def test_age_at_whole_years():
    # whole years at the test date (common practice: age at last birthday)
    birth = pd.Series(pd.to_datetime(["1990-03-01", "1990-03-01", "1990-03-01", None]))
    date = pd.Series(pd.to_datetime(["2022-02-28", "2022-03-01", "2023-12-31", "2022-01-01"]))
    got = hearing.age_at(birth, date)
    assert got.iloc[:3].tolist() == [31.0, 32.0, 33.0] and np.isnan(got.iloc[3])


def test_review_without_audiogram_date_and_unmatched(tmp_path):
    people = [person("RV", "M", "1990-01-01")]
    auds = [ag("RV", "2024-01-05", "R", (10, 10, 10), kind="baseline"), ag("RV", "2025-01-06", "R", (25, 25, 30))]
    reviews = [
        # no audiogram date: the latest audiogram of that ear on or before the decision
        {"person_id": "RV", "ear": "R", "date": "2025-02-01", "decision": "cancel_shift"},
        # names an audiogram that does not exist: reported, not applied
        {"person_id": "RV", "ear": "L", "date": "2025-02-01", "decision": "confirm_shift",
         "audiogram_date": "2025-01-06"},
    ]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}}, reviews=reviews)
    r = row(res, "RV", "2025-01-06", "R")
    assert r["review_decision"] == "cancel_shift" and not r["sts"] and r["shift_status"] == "cancelled by reviewer"
    assert [f.row for f in res.findings if f.key == "review-unmatched"] == [3]


# ---------------------------------------------------------------------------------------
# a revised baseline takes effect after the audiogram it names


@pytest.mark.parametrize("named", ["2025-01-06", "2025-01-20"])
def test_revised_baseline_applies_after_the_named_audiogram(tmp_path, named):
    # 29 CFR 1910.95(g)(9) and 1904.10(b)(2): a persistent shift allows the reviewer to revise
    # the baseline, and later audiograms are compared with the revised one; the audiogram that
    # showed the shift (and its retest, 1910.95(g)(7)(ii)) is still judged against the
    # baseline in force before the revision, so the shift, its follow-ups and its
    # recordability (1904.10(a): 2/3/4 kHz average >= 25 dB HL) stay.
    people = [person("RB", "M", "1990-01-01")]
    auds = [ag("RB", "2023-01-10", "R", (10, 10, 10), kind="baseline"),
            ag("RB", "2025-01-06", "R", (25, 25, 30)),  # shift (15 + 15 + 20) / 3 = 16.7 dB
            ag("RB", "2025-01-20", "R", (24, 24, 29), kind="retest"),  # 15.7 dB vs the old baseline
            ag("RB", "2025-11-03", "R", (26, 26, 31))]
    reviews = [{"person_id": "RB", "ear": "R", "date": "2025-02-10", "decision": "revise_baseline",
                "audiogram_date": named, "reviewer_role": "audiologist"}]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}}, reviews=reviews)
    a = row(res, "RB", "2025-01-06", "R")
    assert a["baseline_date"] == pd.Timestamp("2023-01-10")
    assert a["shift_234"] == pytest.approx(50 / 3)
    assert a["sts"] and a["determination"] and a["retest_status"] == "confirmed"
    assert a["shift_status"] == "confirmed by retest"
    assert a["recordable"]
    r = row(res, "RB", "2025-01-20", "R")
    assert r["is_retest_of_shift"] and not r["determination"] and not r["sts"]
    assert r["baseline_date"] == pd.Timestamp("2023-01-10" if named == "2025-01-20" else "2025-01-06")
    # the next annual test compares with the revised baseline: (1 + 1 + 1) or (2 + 2 + 2) / 3 dB
    n = row(res, "RB", "2025-11-03", "R")
    assert n["baseline_date"] == pd.Timestamp(named)
    assert n["shift_234"] == pytest.approx(1.0 if named == "2025-01-06" else 2.0)
    assert not n["sts"]
    assert res.cases["date"].tolist() == [pd.Timestamp("2025-01-06")]
    fu = res.followups.set_index("kind")
    assert {"retest", "notice", "refit"} <= set(fu.index)
    assert fu.loc["retest", "done_date"] == pd.Timestamp("2025-01-20")
    assert fu.loc["retest", "status"] == "on time"
    assert res.baselines.iloc[0]["baseline_date"] == pd.Timestamp(named)


def test_retest_against_old_baseline_can_cancel(tmp_path):
    # 29 CFR 1910.95(g)(7)(ii), 1904.10(b)(4): the retest cancels the shift when it shows no
    # shift against the baseline the flagged test was compared with (here 3.3 dB), even when
    # the reviewer later revised the baseline to the flagged test
    people = [person("RC", "M", "1990-01-01")]
    auds = [ag("RC", "2023-01-10", "R", (10, 10, 10), kind="baseline"),
            ag("RC", "2025-01-06", "R", (25, 25, 30)),
            ag("RC", "2025-01-20", "R", (12, 14, 14), kind="retest")]
    reviews = [{"person_id": "RC", "ear": "R", "date": "2025-02-10", "decision": "revise_baseline",
                "audiogram_date": "2025-01-06", "reviewer_role": "audiologist"}]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}}, reviews=reviews)
    a = row(res, "RC", "2025-01-06", "R")
    assert a["retest_status"] == "cancelled" and not a["sts"] and not a["recordable"]
    assert row(res, "RC", "2025-01-20", "R")["is_retest_of_shift"]


# ---------------------------------------------------------------------------------------
# leavers


def test_no_retest_or_refit_due_after_leaving_but_notice_still_due(tmp_path):
    # 29 CFR 1910.95(g)(8)(i): the written notice follows every determination, an exit
    # audiogram's too; the retest (1910.95(g)(7)(ii)) and the refit (1910.95(g)(8)(ii)) fall due
    # only while the person is employed (after the leave date there is no one to retest or refit)
    people = [dict(person("LV", "M", "1990-01-01"), leave_date="2025-06-30"),
              person("ST", "M", "1990-01-01")]
    auds = [ag(p, "2024-01-05", "R", (10, 10, 10), kind="baseline") for p in ("LV", "ST")] + [
        ag("LV", "2025-06-20", "R", (25, 25, 30), kind="exit"),  # shift 16.7 dB on the exit audiogram
        ag("ST", "2025-06-20", "R", (25, 25, 30))]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}})
    fu = res.followups.set_index(["person_id", "kind"])
    assert fu.loc[("LV", "retest"), "status"] == hearing.LEFT_STATUS  # due 2025-07-20, after leaving
    assert fu.loc[("LV", "refit"), "status"] == hearing.LEFT_STATUS  # due 2025-07-11, after leaving
    assert fu.loc[("LV", "notice"), "status"] == "missing"  # still due 21 days after the determination
    assert fu.loc[("ST", "retest"), "status"] == "missing"
    assert fu.loc[("ST", "refit"), "status"] == "missing"
    acts = res.actions
    lv = set(acts.loc[acts["subject"] == "LV", "kind"])
    assert lv == {"notice missing"}
    assert "retest missing" in set(acts.loc[acts["subject"] == "ST", "kind"])
    # due in the period: LV's notice, ST's notice, retest and refit
    assert res.summary["followups_due"] == 4
    assert res.summary["followups_late_or_missing"] == 4
    # the shift and the case stay: leaving changes what is due, not what was found
    assert row(res, "LV", "2025-06-20", "R")["recordable"]


def test_retest_done_before_leaving_still_counts(tmp_path):
    # 29 CFR 1910.95(g)(7)(ii): a retest taken within the window before the leave date is on time
    people = [dict(person("LW", "M", "1990-01-01"), leave_date="2025-06-30")]
    auds = [ag("LW", "2024-01-05", "R", (10, 10, 10), kind="baseline"),
            ag("LW", "2025-06-10", "R", (25, 25, 30)),
            ag("LW", "2025-06-24", "R", (25, 25, 30), kind="exit")]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}})
    fu = res.followups.set_index(["person_id", "kind"])
    assert fu.loc[("LW", "retest"), "status"] == "on time"
    assert fu.loc[("LW", "refit"), "status"] == hearing.LEFT_STATUS


def test_hearing_page_counts_one_case_per_person(tmp_path):
    # 29 CFR 1904.10(a): a shift with a 2/3/4 kHz average of 25 dB HL or more in the same ear;
    # both ears of one person meet it on one audiogram: one case ("in one or both ears")
    from generator.build import compute as run_stages, make_context
    from generator.pages import hearing as hearing_page

    people = [person("P2", "M", "1990-01-01"), person("P1", "M", "1990-01-01")]
    auds = [ag("P2", "2024-01-05", e, (10, 10, 10), kind="baseline") for e in "LR"] + [
        ag("P2", "2025-03-03", e, (25, 25, 30)) for e in "LR"] + [
        ag("P1", "2024-01-05", "R", (10, 10, 10), kind="baseline"), ag("P1", "2025-03-03", "R", (12, 12, 12))]
    root = make_programme(tmp_path / "prog", {"audiograms.csv": auds, "people.csv": people},
                          config={"audiometry": {"age_correction": False}})
    prog = load_programme(root)
    results = run_stages(prog)
    ctx = make_context(prog, results)
    page = [p for p in hearing_page.build(ctx) if p.slug == "hearing"][0]
    tile = [t for t in page.context["tiles"] if t.get("figure") == "recordable_cases"][0]
    assert tile["value"] == "1"
    assert tile["label"] == "recordable cases (29 CFR 1904.10), one per person and audiogram whatever the number of ears"
    gt = page.context["group_table"]
    col = gt.columns.index("People with a recordable case")
    assert [r[col] for r in gt.rows] == ["1", "1"]  # G1 and all groups: one person
    # the compliance summary behind the overview tile counts people too
    assert results.compliance.summary["recordables_this_period"] == 1


def _listing_ctx(restricted: bool = False):
    from types import SimpleNamespace

    # only ctx.code and ctx.restricted are read by the listing tables
    return SimpleNamespace(code=lambda p: "P-" + p[1:] + "Q", restricted=restricted)


def test_shift_listing_puts_recordable_cases_first_and_is_capped():
    from generator.pages import hearing as page

    n = page.MAX_ROWS + 50
    dates = pd.date_range("2025-01-01", periods=n, freq="D")
    a = pd.DataFrame({"person_id": [f"E{i:04d}" for i in range(n)], "ear": "R", "date": dates,
                      "avg_234": 20.0, "shift_234": 11.0, "shift_234_age_corrected": 10.5,
                      "shift_status": ["shift" if i % 2 else "cancelled by retest" for i in range(n)],
                      "retest_status": "", "recordable": [i in (3, n - 1) for i in range(n)],
                      "niosh_shift": False})
    t = page.shifts_table(a, _listing_ctx())
    assert len(t.rows) == page.MAX_ROWS
    assert f"Showing {page.MAX_ROWS} of {n:,}" in t.caption and "hearing_results.csv" in t.caption
    # recordable cases first (latest first), then shifts in force before cancelled ones
    assert [r[0] for r in t.rows[:2]] == [f"P-{n - 1:04d}Q", "P-0003Q"]
    status = [r[6] for r in t.rows[2:]]
    assert status == sorted(status, key=lambda s: s != "shift")
    assert len(page.shifts_table(a, _listing_ctx(restricted=True)).rows) == n


def test_followup_listing_puts_missing_first():
    from generator.pages import hearing as page

    fu = pd.DataFrame({"person_id": ["E1", "E2", "E3", "E4"], "ear": "R",
                       "kind": ["notice", "retest", "notice", "referral"],
                       "trigger_date": pd.Timestamp("2025-01-01"),
                       "due_date": pd.to_datetime(["2025-02-01", "2025-03-01", "2025-01-15", "2025-01-10"]),
                       "done_date": pd.to_datetime(["2025-02-10", None, None, "2025-01-09"]),
                       "status": ["late", "missing", "missing", "on time"], "clause": "c"})
    t = page.followups_table(fu, _listing_ctx())
    assert [r[0] for r in t.rows] == ["P-3Q", "P-2Q", "P-1Q"]  # missing by due date, then late; on time left out
    assert "Showing" not in t.caption
