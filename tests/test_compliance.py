"""Programme compliance rules at their boundaries, on small hand-made programmes.

Each check names the clause it follows. Date rules: "within N months" is N calendar
months (pandas DateOffset) and the due date itself is still on time.
"""
from __future__ import annotations

import datetime as dt
import json
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest

from generator import compliance, trends
from generator.config import Config, Period
from generator.findings import Findings
from generator.model import Programme
from generator.rules import load_rule_set

D = pd.Timestamp


def _frame(rows: list[dict], dates: tuple[str, ...] = ("date",)) -> pd.DataFrame:
    df = pd.DataFrame(rows)
    for c in dates:
        if c in df.columns:
            df[c] = pd.to_datetime(df[c])
    return df


def make(people: list[dict], *, audiograms: list[dict] | None = None, training: list[dict] | None = None,
         fits: list[dict] | None = None, audiometers: list[dict] | None = None,
         end: str = "2025-12-31", start: str = "2025-01-01", rules: str = "osha-1910.95",
         mobile_van: bool = False) -> Programme:
    """Return a Programme built directly from row dicts (spec conventions)."""
    cfg = Config()
    cfg.period = Period(start=dt.date.fromisoformat(start), end=dt.date.fromisoformat(end))
    cfg.rules = rules
    cfg.audiometry.mobile_van = mobile_van
    p = _frame(people, ("hire_date", "leave_date"))
    for c in ("hire_date", "leave_date"):
        if c not in p.columns:
            p[c] = pd.NaT
    tables = {"people": p}
    present = {"people": "data/people.csv"}
    for name, rows in (("audiograms", audiograms), ("training", training), ("protector_fits", fits),
                       ("audiometers", audiometers)):
        if rows is not None:
            tables[name] = _frame(rows)
            present[name] = f"data/{name}.csv"
    return Programme(root=Path("."), config=cfg, tables=tables, present=present, noise_logs={},
                     log_interval_s={}, pages=[], findings=Findings(), digest="")


def exposure(rows: list[dict], groups: list[dict] | None = None, measurements: list[dict] | None = None,
             actions: pd.DataFrame | None = None) -> SimpleNamespace:
    """Return a stand-in for the exposure stage's result with its declared columns."""
    people = _frame(rows, ("first_exposed_date",))
    return SimpleNamespace(people=people, groups=pd.DataFrame(groups or [{"group": "G1", "exposed": False}]),
                           measurements=_frame(measurements) if measurements else None,
                           actions=actions if actions is not None else pd.DataFrame())


ONE = [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01"}]


def exposed(first: str) -> SimpleNamespace:
    return exposure([{"person_id": "E1", "group": "G1", "exposed": True, "first_exposed_date": first}])


def aud(date: str, kind: str = "periodic", meter: str = "") -> list[dict]:
    return [{"person_id": "E1", "date": date, "ear": e, "kind": kind, "audiometer_id": meter} for e in "LR"]


def person(res: compliance.ComplianceResult, pid: str = "E1") -> pd.Series:
    return res.people.set_index("person_id").loc[pid]


# ---------------------------------------------------------------------------------------
# baseline: 29 CFR 1910.95(g)(5)(i) "within 6 months of an employee's first exposure at or
# above the action level"; (g)(5)(ii) one year with a mobile test van


@pytest.mark.parametrize("days,expected", [(182, "on_time"), (183, "on_time"), (184, "late")])
def test_baseline_day_182_vs_184(days: int, expected: str) -> None:
    # first exposure 2025-04-01; six calendar months later is 2025-10-01 = day 183
    first = D("2025-04-01")
    prog = make(ONE, audiograms=aud((first + pd.Timedelta(days=days)).strftime("%Y-%m-%d"), "baseline"))
    res = compliance.compute(prog, **{"exposure": exposed("2025-04-01")})
    assert person(res)["baseline_due"] == D("2025-10-01")  # 29 CFR 1910.95(g)(5)(i)
    assert person(res)["baseline_status"] == expected  # 29 CFR 1910.95(g)(5)(i)


def test_baseline_missing_is_overdue_or_due_soon() -> None:
    # 29 CFR 1910.95(g)(5)(i): due 6 months after first exposure; as of 2025-12-31
    res = compliance.compute(make(ONE, training=[{"person_id": "E1", "date": "2025-06-01"}]),
                             **{"exposure": exposed("2025-06-29")})
    assert person(res)["baseline_status"] == "overdue"  # due 2025-12-29 < 2025-12-31
    res = compliance.compute(make(ONE, training=[{"person_id": "E1", "date": "2025-07-01"}]),
                             **{"exposure": exposed("2025-07-15")})
    assert person(res)["baseline_status"] == "due_soon"  # due 2026-01-15, within 60 days
    kinds = set(res.actions["kind"])
    assert "baseline audiogram" in kinds
    assert res.summary["current_audiogram_share"] is None  # within the baseline limit: not counted
    assert res.actions.loc[res.actions["kind"].eq("baseline audiogram"), "due_date"].iloc[0] == D("2026-01-15")


def test_baseline_mobile_van_one_year() -> None:
    # 29 CFR 1910.95(g)(5)(ii): one year with a mobile test van; day 300 is then on time
    prog = make(ONE, audiograms=aud("2025-01-27", "baseline"), mobile_van=True)
    res = compliance.compute(prog, **{"exposure": exposed("2024-04-02")})
    assert person(res)["baseline_due"] == D("2025-04-02")
    assert person(res)["baseline_status"] == "on_time"
    prog = make(ONE, audiograms=aud("2025-01-27", "baseline"), mobile_van=False)
    res = compliance.compute(prog, **{"exposure": exposed("2024-04-02")})
    assert person(res)["baseline_status"] == "late"  # six months without the van


def test_calendar_months_end_of_month() -> None:
    # "within 6 months" read as calendar months (our reading of 1910.95(g)(5)(i)): 31 Aug + 6 = 28 Feb
    got = compliance.add_months(pd.Series([D("2025-08-31"), D("2023-08-31"), pd.NaT]), 6)
    assert got.iloc[0] == D("2026-02-28") and got.iloc[1] == D("2024-02-29") and pd.isna(got.iloc[2])


# ---------------------------------------------------------------------------------------
# periodic audiogram: 29 CFR 1910.95(g)(6) "at least annually after obtaining the baseline"


@pytest.mark.parametrize("days,expected", [(364, "due_soon"), (365, "due_soon"), (366, "overdue")])
def test_annual_audiogram_364_vs_366(days: int, expected: str) -> None:
    last = (D("2025-12-31") - pd.Timedelta(days=days)).strftime("%Y-%m-%d")
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline") + aud(last))
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    assert person(res)["audiogram_status"] == expected  # 29 CFR 1910.95(g)(6)
    assert bool(person(res)["current_audiogram"]) is (days <= 365)


def test_annual_audiogram_across_29_february() -> None:
    # 29 CFR 1910.95(g)(6) "at least annually" = 12 calendar months: 366 days on time across 29 Feb
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline") + aud("2023-03-01"), end="2024-03-01",
                start="2023-03-02")
    assert person(compliance.compute(prog, **{"exposure": exposed("2020-01-01")}))["audiogram_status"] == "due_soon"
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline") + aud("2023-03-01"), end="2024-03-02",
                start="2023-03-03")
    assert person(compliance.compute(prog, **{"exposure": exposed("2020-01-01")}))["audiogram_status"] == "overdue"


def test_annual_audiogram_not_due_for_unexposed_person() -> None:
    # 29 CFR 1910.95(g)(6) applies to employees at or above the action level only
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline"))
    res = compliance.compute(prog, **{"exposure": exposure([{"person_id": "E1", "group": "G1", "exposed": False}])})
    assert person(res)["audiogram_status"] == "not_required"
    assert person(res)["training_status"] == "not_required"  # 29 CFR 1910.95(k)(1): exposed employees
    assert not bool(person(res)["protector_required"])  # 29 CFR 1910.95(i)(1)
    assert res.enrolment["mismatch"].tolist() == ["records_not_exposed"]  # information only
    assert "annual audiogram" not in set(res.actions["kind"])


def test_exit_audiogram_for_leaver() -> None:
    # common practice: an exit audiogram when employment ends
    people = [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01", "leave_date": "2025-09-30"}]
    prog = make(people, audiograms=aud("2020-02-01", "baseline") + aud("2025-03-01"))
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    assert person(res)["exit_status"] == "overdue"
    assert person(res)["audiogram_status"] == "not_required"  # left before the next annual one
    prog = make(people, audiograms=aud("2020-02-01", "baseline") + aud("2025-03-01") + aud("2025-09-20", "exit"))
    assert person(compliance.compute(prog, **{"exposure": exposed("2020-01-01")}))["exit_status"] == "done"


def test_leaver_before_period_out_of_scope() -> None:
    people = ONE + [{"person_id": "E2", "group": "G1", "hire_date": "2010-01-01", "leave_date": "2024-12-31"}]
    res = compliance.compute(make(people), **{"exposure": exposure([
        {"person_id": "E1", "group": "G1", "exposed": True, "first_exposed_date": "2020-01-01"},
        {"person_id": "E2", "group": "G1", "exposed": True, "first_exposed_date": "2010-01-01"}])})
    assert res.people["person_id"].tolist() == ["E1"]


# ---------------------------------------------------------------------------------------
# training: 29 CFR 1910.95(k)(2) "repeated annually for each employee included in the programme"


@pytest.mark.parametrize("days,expected", [(364, "due_soon"), (366, "overdue")])
def test_training_364_vs_366(days: int, expected: str) -> None:
    last = (D("2025-12-31") - pd.Timedelta(days=days)).strftime("%Y-%m-%d")
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline") + aud("2025-06-01"),
                training=[{"person_id": "E1", "date": last}])
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    assert person(res)["training_status"] == expected  # 29 CFR 1910.95(k)(2)
    tg = res.training_groups.set_index("group").loc["G1"]
    assert tg["n_required"] == 1
    assert tg["completion"] == (1.0 if days <= 365 else 0.0)  # 29 CFR 1910.95(k)(2)


def test_training_completion_per_group() -> None:
    people = [{"person_id": f"E{i}", "group": "G1" if i < 4 else "G2", "hire_date": "2020-01-01"}
              for i in range(1, 6)]
    ex = exposure([{"person_id": f"E{i}", "group": "G1" if i < 4 else "G2", "exposed": True,
                    "first_exposed_date": "2020-01-01"} for i in range(1, 6)])
    training = [{"person_id": "E1", "date": "2025-05-01"}, {"person_id": "E2", "date": "2024-05-01"},
                {"person_id": "E4", "date": "2025-02-01"}]
    res = compliance.compute(make(people, training=training), **{"exposure": ex})
    tg = res.training_groups.set_index("group")
    # 1910.95(k)(2): trained within 12 months: G1 1 of 3, G2 1 of 2
    assert tg.loc["G1", "n_trained"] == 1 and tg.loc["G1", "n_required"] == 3
    assert tg.loc["G2", "completion"] == 0.5
    assert res.summary["trained_share"] == 0.4


# ---------------------------------------------------------------------------------------
# enrolment: 29 CFR 1910.95(c)(1) programme at or above the action level


def test_enrolment_mismatches_both_ways() -> None:
    people = [{"person_id": "E1", "group": "G1"}, {"person_id": "E2", "group": "G2"},
              {"person_id": "E3", "group": "G2"}, {"person_id": "E4", "group": "G3"}]
    ex = exposure([{"person_id": "E1", "group": "G1", "exposed": True, "first_exposed_date": "2024-01-01"},
                   {"person_id": "E2", "group": "G2", "exposed": False},
                   {"person_id": "E3", "group": "G2", "exposed": False},
                   {"person_id": "E4", "group": "G3", "exposed": True, "first_exposed_date": "2024-01-01"}],
                  groups=[{"group": "G1", "exposed": False}, {"group": "G2", "exposed": False},
                          {"group": "G3", "exposed": True}])
    prog = make(people, training=[{"person_id": "E2", "date": "2025-03-01"}])
    res = compliance.compute(prog, **{"exposure": ex})
    mm = dict(zip(res.enrolment["person_id"], res.enrolment["mismatch"]))
    assert mm == {"E1": "exposed_no_records", "E4": "exposed_no_records", "E2": "records_not_exposed"}
    st = res.people.set_index("person_id")
    assert bool(st.loc["E4", "enrolled"]) and not bool(st.loc["E1", "enrolled"])  # exposed group enrols
    assert res.summary["must_be_enrolled"] == 2
    assert res.summary["enrolled"] == 2  # E2 (records) and E4 (exposed group)
    assert res.summary["not_enrolled"] == 2
    assert set(res.actions.loc[res.actions["kind"].eq("enrolment"), "subject"]) == {"E1", "E4"}


def test_person_without_exposure_row_uses_group() -> None:
    people = [{"person_id": "E1", "group": "G3"}]
    ex = exposure([], groups=[{"group": "G3", "exposed": True}])
    res = compliance.compute(make(people), **{"exposure": ex})
    assert bool(person(res)["must_enrol"])


# ---------------------------------------------------------------------------------------
# protectors: 29 CFR 1910.95(i)(1) made available to everyone at or above the action level


def test_protector_coverage_and_fit_tests() -> None:
    people = [{"person_id": f"E{i}", "group": "G1", "hire_date": "2020-01-01"} for i in range(1, 5)]
    ex = exposure([{"person_id": f"E{i}", "group": "G1", "exposed": True, "first_exposed_date": "2021-01-01"}
                   for i in range(1, 5)])
    fits = [{"person_id": "E1", "protector_id": "P1", "date": "2024-01-01", "par": 18.0},
            {"person_id": "E2", "protector_id": "P1", "date": "2025-01-01", "par": None},
            {"person_id": "E3", "protector_id": "P2", "date": "2026-02-01", "par": 20.0}]  # after the period
    res = compliance.compute(make(people, fits=fits), **{"exposure": ex})
    pg = res.protector_groups.set_index("group").loc["G1"]
    assert pg["n_with_protector"] == 2 and pg["n_fit_tested"] == 1
    assert res.summary["protector_share"] == 0.5 and res.summary["fit_test_share"] == 0.25
    assert sorted(res.actions.loc[res.actions["kind"].eq("protector"), "subject"]) == ["E3", "E4"]


def test_refits_from_hearing_followups() -> None:
    # 29 CFR 1910.95(g)(8)(ii)(A): refit and retrain after a standard threshold shift
    fu = pd.DataFrame([
        {"person_id": "E1", "ear": "L", "kind": "refit", "trigger_date": D("2025-03-01"),
         "due_date": D("2025-03-22"), "done_date": pd.NaT, "status": "overdue", "clause": ""},
        {"person_id": "E1", "ear": "R", "kind": "refit", "trigger_date": D("2025-03-01"),
         "due_date": D("2025-03-22"), "done_date": pd.NaT, "status": "missing", "clause": ""},
        {"person_id": "E1", "ear": "L", "kind": "refit", "trigger_date": D("2024-03-01"),
         "due_date": D("2024-03-22"), "done_date": D("2024-03-10"), "status": "on time", "clause": ""},
        {"person_id": "E1", "ear": "L", "kind": "notice", "trigger_date": D("2025-03-01"),
         "due_date": D("2025-03-22"), "done_date": pd.NaT, "status": "overdue", "clause": "x"}])
    res = compliance.compute(make(ONE), **{"exposure": exposed("2020-01-01"),
                                         "hearing": SimpleNamespace(audiograms=pd.DataFrame(), followups=fu,
                                                                    actions=pd.DataFrame(), cases=pd.DataFrame())})
    assert len(res.refits) == 3
    assert res.refits["clause"].str.startswith("29 CFR 1910.95(g)(8)").all()
    refit = res.actions[res.actions["kind"].eq("refit")]
    # one open item for the 2025 shift (both ears); the 2024 refit was done
    assert len(refit) == 1 and refit["status"].iloc[0] == "overdue"
    assert "2025-03-01 (left ear and right ear)" in refit["detail"].iloc[0]
    assert res.summary["refits_open"] == 1


# ---------------------------------------------------------------------------------------
# audiometer and booth: 29 CFR 1910.95(h)(5) (i) functional check before each day's use,
# (ii) acoustic calibration at least annually, (iii) exhaustive calibration at least every
# two years (procedures in App. E; from memory); booth: App. D Table D-1


def _booth(levels: dict[int, float], date: str = "2025-01-02", result: str = "pass") -> dict:
    return {"audiometer_id": "A1", "date": date, "check": "booth", "result": result,
            **{f"ob_{f}": v for f, v in levels.items()}}


LIMITS = {500: 40.0, 1000: 40.0, 2000: 47.0, 4000: 57.0, 8000: 62.0}  # 29 CFR 1910.95 App. D Table D-1


def test_table_d1_values() -> None:
    assert compliance.BOOTH_LIMITS == LIMITS  # 29 CFR 1910.95 App. D Table D-1


@pytest.mark.parametrize("band", [500, 1000, 2000, 4000, 8000])
def test_booth_limits_at_boundary(band: int) -> None:
    at = compliance.booth_judgement(pd.DataFrame([_booth(LIMITS)]))
    assert bool(at["booth_pass"].iloc[0])  # at the limit passes (App. D Table D-1 are maxima)
    over = dict(LIMITS)
    over[band] = LIMITS[band] + 0.1
    j = compliance.booth_judgement(pd.DataFrame([_booth(over)]))
    assert not bool(j["booth_pass"].iloc[0])  # 0.1 dB over fails (App. D Table D-1)
    assert j["booth_detail"].iloc[0] == f"{band} Hz {LIMITS[band] + 0.1:g} dB > {LIMITS[band]:g} dB"


def _checks(test_day: str, acoustic: str, exhaustive: str, functional: bool = True) -> list[dict]:
    rows = [{"audiometer_id": "A1", "date": acoustic, "check": "acoustic", "result": "pass"},
            {"audiometer_id": "A1", "date": exhaustive, "check": "exhaustive", "result": "pass"},
            _booth({500: 30.0, 1000: 30.0, 2000: 35.0, 4000: 40.0, 8000: 45.0}, "2020-01-01")]
    if functional:
        rows.append({"audiometer_id": "A1", "date": test_day, "check": "functional", "result": "pass"})
    return rows


def _status(test_day: str, **kw: object) -> pd.Series:
    prog = make(ONE, audiograms=aud(test_day, meter="A1"), audiometers=_checks(test_day, **kw))
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    assert len(res.audiometer_status) == 1
    return res.audiometer_status.iloc[0], res


def test_audiometer_all_checks_valid() -> None:
    st, res = _status("2025-06-10", acoustic="2024-06-10", exhaustive="2023-06-10")
    # acoustic exactly 12 months and exhaustive exactly 24 months before: still valid
    assert bool(st["ok"]) and res.audiograms_flagged.empty


def test_acoustic_calibration_older_than_a_year() -> None:
    st, res = _status("2025-06-10", acoustic="2024-06-09", exhaustive="2024-01-10")
    assert not bool(st["acoustic_ok"]) and bool(st["exhaustive_ok"])  # 1910.95(h)(5)(ii)
    assert not bool(st["ok"])
    assert len(res.audiograms_flagged) == 2  # both ears of the test
    assert "acoustic" in res.audiograms_flagged["reason"].iloc[0]
    assert "audiogram conditions" in set(res.actions["kind"])


def test_exhaustive_calibration_older_than_two_years() -> None:
    st, _ = _status("2025-06-10", acoustic="2025-01-10", exhaustive="2023-06-09")
    assert bool(st["acoustic_ok"]) and not bool(st["exhaustive_ok"])  # 1910.95(h)(5)(iii)


def test_functional_check_needed_on_the_test_day() -> None:
    st, _ = _status("2025-06-10", acoustic="2025-01-10", exhaustive="2025-01-10", functional=False)
    assert not bool(st["functional_ok"]) and not bool(st["ok"])  # 1910.95(h)(5)(i)


def test_failed_check_does_not_count_and_booth_over_limit_flags() -> None:
    day = "2025-06-10"
    checks = [{"audiometer_id": "A1", "date": day, "check": "functional", "result": "fail"},
              {"audiometer_id": "A1", "date": "2025-01-10", "check": "acoustic", "result": "pass"},
              {"audiometer_id": "A1", "date": "2025-01-10", "check": "exhaustive", "result": "pass"},
              _booth({500: 41.0, 1000: 30.0, 2000: 30.0, 4000: 30.0, 8000: 30.0}, "2025-01-10")]
    prog = make(ONE, audiograms=aud(day, meter="A1"), audiometers=checks)
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    st = res.audiometer_status.iloc[0]
    assert not bool(st["functional_ok"])
    assert not bool(st["booth_ok"])  # 41 dB at 500 Hz > 40 dB, App. D Table D-1
    assert "500 Hz" in st["reason"]
    assert "booth" in set(res.actions["kind"])


def test_calibration_due_actions() -> None:
    # 1910.95(h)(5)(ii): acoustic calibration due 12 months after the last one
    st, res = _status("2025-06-10", acoustic="2024-12-15", exhaustive="2024-01-10")
    due = res.actions.set_index("kind")
    assert due.loc["acoustic calibration", "due_date"] == D("2025-12-15")
    assert due.loc["acoustic calibration", "status"] == "overdue"
    assert due.loc["exhaustive calibration", "due_date"] == D("2026-01-10")
    assert due.loc["exhaustive calibration", "status"] == "due_soon"


# ---------------------------------------------------------------------------------------
# the action list


def test_action_list_merges_stages_and_sorts() -> None:
    people = [{"person_id": "E2", "group": "G1"}, {"person_id": "E1", "group": "G1"}]
    ex_actions = pd.DataFrame([{"subject": "G1", "subject_type": "group", "kind": "stale_group",
                                "detail": "no measurement for 3 years", "due_date": D("2025-02-01"),
                                "clause": "29 CFR 1910.95(d)(3)"}])
    hear_actions = pd.DataFrame([{"person_id": "E2", "kind": "late_notice", "detail": "notice late",
                                  "due_date": D("2025-02-01"), "clause": "29 CFR 1910.95(g)(8)(i)"}])
    prot_actions = pd.DataFrame([{"person_id": "E1", "kind": "insufficient_protection",
                                  "detail": "protected level above target", "due_date": pd.NaT,
                                  "clause": "29 CFR 1910.95(j)"}])
    ex = exposure([{"person_id": "E1", "group": "G1", "exposed": True, "first_exposed_date": "2025-01-10"},
                   {"person_id": "E2", "group": "G1", "exposed": True, "first_exposed_date": "2025-01-05"}],
                  actions=ex_actions)
    res = compliance.compute(make(people, fits=[{"person_id": p, "protector_id": "P1", "date": "2025-01-01"}
                                                for p in ("E1", "E2")]),
                             **{"exposure": ex, "protection": SimpleNamespace(actions=prot_actions),
                              "hearing": SimpleNamespace(actions=hear_actions, audiograms=pd.DataFrame(),
                                                         followups=pd.DataFrame())})
    a = res.actions
    assert list(a.columns[:7]) == ["subject", "subject_type", "kind", "detail", "due_date", "clause", "source"]
    due = a["due_date"]
    assert due.dropna().is_monotonic_increasing  # sorted by due date
    assert due.isna().sum() == 1 and pd.isna(due.iloc[-1])  # undated last
    # ties on the due date are ordered by subject
    same = a[a["due_date"].eq(D("2025-02-01"))]
    assert same["subject"].tolist() == sorted(same["subject"])
    assert {"exposure", "protection", "hearing", "compliance"} <= set(a["source"])
    assert a.loc[a["kind"].eq("late_notice"), "subject_type"].iloc[0] == "person"
    # enrolment items are due at first exposure: E2 (01-05) before E1 (01-10)
    enr = a[a["kind"].eq("enrolment")]
    assert enr["subject"].tolist() == ["E2", "E1"]


def test_sort_actions_drops_repeats() -> None:
    a = pd.DataFrame([
        {"subject": "B", "subject_type": "person", "kind": "x", "detail": "", "due_date": D("2025-01-02"),
         "clause": "", "source": "s", "status": "open"},
        {"subject": "A", "subject_type": "person", "kind": "x", "detail": "", "due_date": D("2025-01-02"),
         "clause": "", "source": "s", "status": "open"},
        {"subject": "A", "subject_type": "person", "kind": "x", "detail": "", "due_date": D("2025-01-02"),
         "clause": "", "source": "t", "status": "open"},
        {"subject": "C", "subject_type": "person", "kind": "x", "detail": "", "due_date": D("2024-01-02"),
         "clause": "", "source": "s", "status": "open"}])
    out = compliance.sort_actions(a)
    assert out["subject"].tolist() == ["C", "A", "B"]  # common practice: one line per task


# ---------------------------------------------------------------------------------------
# trends and summary


def test_trends_per_year_and_changes() -> None:
    people = [{"person_id": "E1", "group": "G1", "hire_date": "2018-01-01"},
              {"person_id": "E2", "group": "G1", "hire_date": "2018-01-01"}]
    ex = exposure([{"person_id": p, "group": "G1", "exposed": True, "first_exposed_date": "2018-01-01"}
                   for p in ("E1", "E2")],
                  measurements=[{"person_id": "E1", "group": "G1", "date": "2023-03-01",
                                 "band_osha-1910.95": "85–90"},
                                {"person_id": "E1", "group": "G1", "date": "2025-03-01",
                                 "band_osha-1910.95": "at or above 90"}])
    audios = [{"person_id": p, "date": d, "ear": "L", "kind": "periodic"}
              for p, d in (("E1", "2023-05-01"), ("E1", "2024-05-01"), ("E2", "2023-05-01"),
                           ("E1", "2025-05-01"), ("E2", "2025-06-01"))]
    hearing = SimpleNamespace(audiograms=pd.DataFrame([
        {"person_id": "E2", "ear": "L", "date": D("2025-06-01"), "sts": True, "recordable": False},
        {"person_id": "E1", "ear": "L", "date": D("2024-05-01"), "sts": False, "recordable": False}]),
        followups=pd.DataFrame(), actions=pd.DataFrame())
    prog = make(people, audiograms=audios)
    res = compliance.compute(prog, **{"exposure": ex, "hearing": hearing})
    tr = trends.compute(prog, compliance=res, exposure=ex, hearing=hearing)
    t = tr.table.set_index("year")
    assert t.index.tolist() == [2023, 2024, 2025]
    # 29 CFR 1910.95(g)(6): current = within 12 months of 31 Dec
    assert t.loc[2023, "current_audiogram_share"] == 1.0
    assert t.loc[2024, "current_audiogram_share"] == 0.5
    assert t.loc[2025, "current_audiogram_share"] == 1.0
    assert t.loc[2025, "people_with_sts"] == 1 and t.loc[2024, "people_with_sts"] == 0
    assert "With a current audiogram: rose from 50 % in 2024 to 100 % in 2025." in tr.changes
    assert res.summary["sts_this_period"] == 1
    assert res.summary["current_audiogram_share"] == t.loc[2025, "current_audiogram_share"]


def test_summary_is_json_with_sorted_keys() -> None:
    res = compliance.compute(make(ONE, training=[{"person_id": "E1", "date": "2025-01-01"}]),
                             **{"exposure": exposed("2020-01-01")})
    text = json.dumps(res.summary, sort_keys=False)
    assert list(res.summary) == sorted(res.summary)
    back = json.loads(text)
    for key in ("enrolled", "must_be_enrolled", "not_enrolled", "current_audiogram_share", "trained_share",
                "sts_this_period", "recordables_this_period", "open_actions", "overdue_audiograms"):
        assert key in back
    assert back["open_actions"]["baseline audiogram"] == 1


def test_missing_stages_do_not_break() -> None:
    res = compliance.compute(make(ONE))
    assert res.people["must_enrol"].sum() == 0
    assert res.notes  # says why nobody is judged exposed


def test_eu_rule_set_without_intervals() -> None:
    # Directive 2003/10/EC fixes no audiogram or training interval (Art. 8, Art. 10)
    rule = load_rule_set("eu-2003-10")
    assert rule.audiogram_interval_months is None
    prog = make(ONE, audiograms=aud("2020-06-01", "baseline"), rules="eu-2003-10")
    res = compliance.compute(prog, **{"exposure": exposed("2020-01-01")})
    assert person(res)["audiogram_status"] == "not_required"
    assert any("interval" in n for n in res.notes)
    # no time limit for the baseline either: a person without audiograms is not "overdue"
    res = compliance.compute(make(ONE, rules="eu-2003-10"), **{"exposure": exposed("2020-01-01")})
    assert person(res)["baseline_status"] == "not_required"
    assert res.actions.empty or "baseline audiogram" not in set(res.actions["kind"])


def test_no_people_at_all() -> None:
    res = compliance.compute(make([]), **{"exposure": exposure([])})
    assert res.people.empty and res.actions.empty
    assert res.summary["current_audiogram_share"] is None


# ---------------------------------------------------------------------------------------
# end to end: a programme folder read by the reader, through the real exposure stage


def test_programme_folder_baseline_boundary(tmp_path: Path) -> None:
    from generator.build import compute as run_stages
    from generator.inputs.reader import load_programme
    from tests.progkit import make_programme

    hl = {f"hl_{f}": 10 for f in (500, 1000, 2000, 3000, 4000, 6000, 8000)}
    root = make_programme(tmp_path / "p", files={
        "groups.csv": [{"group": "G1", "name": "Press shop"}],
        "noise.csv": [{"measurement_id": f"M{i}", "date": "2025-04-01", "kind": "personal", "person_id": p,
                       "duration_h": 8, "laeq": 95} for i, p in enumerate(("E001", "E002"))],
        # first exposure 2025-04-01: E001 tested on day 184, E002 on day 182
        "audiograms.csv": [{"person_id": "E001", "date": "2025-10-02", "ear": e, "kind": "baseline", **hl}
                           for e in "LR"]
        + [{"person_id": "E002", "date": "2025-09-30", "ear": e, "kind": "baseline", **hl} for e in "LR"],
    })
    prog = load_programme(root, today=dt.date(2026, 1, 1))
    assert not prog.findings.has_errors()
    results = run_stages(prog)
    st = results.compliance.people.set_index("person_id")
    assert st.loc["E001", "baseline_status"] == "late"  # 29 CFR 1910.95(g)(5)(i)
    assert st.loc["E002", "baseline_status"] == "on_time"  # 29 CFR 1910.95(g)(5)(i)
    assert st.loc["E001", "training_status"] == "overdue"  # 29 CFR 1910.95(k): never trained
    acts = results.compliance.actions
    assert set(acts.loc[acts["subject"].eq("E001"), "kind"]) >= {"training", "protector"}


# ---------------------------------------------------------------------------------------
# the pages of a small built demo programme (invented workplace)


@pytest.fixture(scope="module")
def small_site(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    from generator.demo import write_demo
    from tests.conftest import build_fixed

    root = tmp_path_factory.mktemp("small") / "programme"
    write_demo(root, people=40, years=3, seed=11)
    out = root.parent / "site"
    build_fixed(root, out)
    return root, out


def test_pages_show_codes_never_raw_ids_or_names(small_site: tuple[Path, Path]) -> None:
    import re

    root, out = small_site
    people = pd.read_csv(root / "data" / "people.csv", dtype=str).fillna("")
    for slug in ("programme", "actions", "trends", "review"):
        html = (out / f"{slug}.html").read_text(encoding="utf-8")
        text = re.sub(r"<script.*?</script>", "", html, flags=re.S)
        for pid in people["person_id"]:
            assert not re.search(r"(?<![\w-])" + re.escape(pid) + r"(?![\w-])", text), (slug, pid)
        for name in people["name"]:
            if name:
                assert name not in html, (slug, name)


def test_review_gathers_sections_in_print_order(small_site: tuple[Path, Path]) -> None:
    import re

    _, out = small_site
    html = (out / "review.html").read_text(encoding="utf-8")
    order = re.findall(r'<section class="review-part" id="review-([a-z]+)"', html)
    expected = [s for s in ("index", "exposure", "protection", "hearing", "programme", "trends", "actions",
                            "methods") if s in order]
    assert order == expected and {"index", "programme", "actions", "methods"} <= set(order)
    ids = re.findall(r'<div id="(review-\d+)" class="plotly-graph-div"', html)
    assert ids == [f"review-{i}" for i in range(1, len(ids) + 1)]
    trends = (out / "trends.html").read_text(encoding="utf-8")
    assert "What changed since last year" in trends


# ---------------------------------------------------------------------------------------
# leavers, first record year, audiometer counts (small programme folders)

HL10 = {f"hl_{f}": 10 for f in (500, 1000, 2000, 3000, 4000, 6000, 8000)}
HL_SHIFT = {**HL10, "hl_2000": 25, "hl_3000": 25, "hl_4000": 30}  # mean shift 16.7 dB at 2/3/4 kHz


def _stages(tmp_path: Path, files: dict, config: dict | None = None) -> tuple[Programme, dict]:
    from generator.build import compute as run_stages
    from generator.inputs.reader import load_programme
    from tests.progkit import make_programme

    root = make_programme(tmp_path / "p", files=files, config=config)
    prog = load_programme(root, today=dt.date(2026, 1, 1))
    assert not prog.findings.has_errors(), [f.format() for f in prog.findings.errors]
    results = run_stages(prog)
    return prog, results


def test_no_refit_action_for_a_leaver(tmp_path: Path) -> None:
    # 29 CFR 1910.95(g)(8)(ii)(A): the refit is owed to an employee; E001 left on 2022-06-30
    # after a shift on the exit audiogram, so no refit is due (and none overdue years later),
    # while E002, still employed, owes one
    people = [{"person_id": "E001", "group": "G1", "sex": "M", "birth_date": "1980-05-01",
               "hire_date": "2010-01-01", "leave_date": "2022-06-30"},
              {"person_id": "E002", "group": "G1", "sex": "M", "birth_date": "1980-05-01",
               "hire_date": "2010-01-01"}]
    auds = [{"person_id": p, "date": "2021-06-01", "ear": "R", "kind": "baseline", **HL10} for p in ("E001", "E002")]
    auds += [{"person_id": "E001", "date": "2022-06-20", "ear": "R", "kind": "exit", **HL_SHIFT},
             {"person_id": "E002", "date": "2025-03-03", "ear": "R", "kind": "periodic", **HL_SHIFT}]
    _, results = _stages(tmp_path, {"people.csv": people, "audiograms.csv": auds},
                         config={"audiometry": {"age_correction": False}})
    comp = results.compliance
    refits = comp.refits.set_index("person_id")
    assert refits.loc["E001", "status"] == "not applicable (left)"
    assert refits.loc["E002", "status"] == "missing"
    acts = comp.actions
    assert not (acts["subject"].eq("E001") & acts["kind"].isin(["refit", "retest missing", "retest due"])).any()
    assert (acts["subject"].eq("E002") & acts["kind"].eq("refit")).any()
    assert comp.summary["refits_open"] == 1


def test_refit_after_leave_date_dropped_without_hearing_mark() -> None:
    # 29 CFR 1910.95(g)(8)(ii)(A): the compliance stage checks the leave date itself too, for
    # follow-ups handed to it without the hearing stage's mark
    people = [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01", "leave_date": "2025-03-10"}]
    fu = pd.DataFrame([{"person_id": "E1", "ear": "L", "kind": "refit", "trigger_date": D("2025-03-01"),
                        "due_date": D("2025-03-22"), "done_date": pd.NaT, "status": "missing", "clause": ""}])
    res = compliance.compute(make(people), **{"exposure": exposed("2020-01-01"),
                                            "hearing": SimpleNamespace(audiograms=pd.DataFrame(), followups=fu,
                                                                       actions=pd.DataFrame(),
                                                                       cases=pd.DataFrame())})
    assert res.refits["status"].tolist() == ["not applicable (left)"]
    assert not res.actions["kind"].eq("refit").any()


def test_first_record_year_ignores_audiometer_checks(tmp_path: Path) -> None:
    # common practice: an audiometer is calibrated before its first test, so its calibration
    # records predate the programme's and do not start the yearly trends
    people = [{"person_id": "E001", "group": "G1", "sex": "M", "birth_date": "1980-05-01",
               "hire_date": "2010-01-01"}]
    files = {"people.csv": people,
             "training.csv": [{"person_id": "E001", "date": "2023-02-01"}],
             "audiometers.csv": [{"audiometer_id": "AU1", "date": "2019-05-01", "check": "exhaustive",
                                  "result": "pass"}],
             "audiograms.csv": [{"person_id": "E001", "date": d, "ear": "R", "kind": k, "audiometer_id": "AU1",
                                 **HL10} for d, k in (("2023-03-01", "baseline"), ("2025-03-01", "periodic"))]}
    prog, results = _stages(tmp_path, files)
    assert trends._first_record_year(prog) == 2023
    assert results.trends.table["year"].tolist() == [2023, 2024, 2025]


def test_programme_page_tells_missing_audiometer_from_invalid_check(tmp_path: Path) -> None:
    # 29 CFR 1910.95(h)(5)(i): a functional check each day the audiometer is used; an audiogram
    # naming no audiometer cannot be looked up, which is not the same as a missing check
    from generator.build import make_context
    from generator.pages import programme as programme_page

    people = [{"person_id": "E001", "group": "G1", "sex": "M", "birth_date": "1980-05-01",
               "hire_date": "2010-01-01"}]
    auds = [{"person_id": "E001", "date": "2019-03-01", "ear": e, "kind": "baseline", **HL10} for e in "LR"]
    auds += [{"person_id": "E001", "date": d, "ear": e, "kind": "periodic", "audiometer_id": "AU1", **HL10}
             for d in ("2023-03-01", "2024-03-01", "2025-03-03") for e in "LR"]
    meters = [{"audiometer_id": "AU1", "date": "2025-03-03", "check": "functional", "result": "pass"}]
    prog, results = _stages(tmp_path, {"people.csv": people, "audiograms.csv": auds, "audiometers.csv": meters})
    page = programme_page.build(make_context(prog, results))[0]
    c = page.context
    # before 2025, one per person and date: the 2019 test names no audiometer, the 2023 and
    # 2024 tests name AU1 with no functional check those days
    assert (c["n_flagged_before"], c["n_before_no_meter"], c["n_before_invalid"]) == (3, 1, 2)
    assert c["n_flagged_no_meter"] == 0


# ---------------------------------------------------------------------------------------
# long lists on the public pages: capped, most urgent first; counts, tiles and charts over every row


def _many(n: int) -> tuple[Programme, compliance.ComplianceResult]:
    """Return *n* exposed people, never tested, trained or given a protector, first exposed on n days."""
    people = [{"person_id": f"E{i:04d}", "group": "G1", "hire_date": "2020-01-01"} for i in range(n)]
    ex = exposure([{"person_id": f"E{i:04d}", "group": "G1", "exposed": True,
                    "first_exposed_date": str(dt.date(2024, 1, 1) + dt.timedelta(days=i))} for i in range(n)])
    prog = make(people)
    return prog, compliance.compute(prog, **{"exposure": ex})


def _page_ctx(prog: Programme, res: compliance.ComplianceResult, restricted: bool = False):
    from generator.pages.base import SiteContext
    rule = load_rule_set("osha-1910.95")
    figures = trends.compute(prog, compliance=res, exposure=None, hearing=None).figures
    return SiteContext(programme=prog, results=SimpleNamespace(compliance=res, figures=figures), rules={rule.id: rule},
                       code=lambda p: "P-" + p[1:] + "Q", suppressed_groups=frozenset(), restricted=restricted)


def test_actions_page_lists_the_most_urgent_and_counts_all() -> None:
    from generator.pages import actions as page
    from generator.pages.programme import LIST_CAP

    prog, res = _many(260)
    a = res.actions
    assert len(a) > LIST_CAP + 100  # baseline, training, enrolment and protector items per person
    (pg,) = page.build(_page_ctx(prog, res))
    c = pg.context
    # the tiles and the chart count every action, not only the listed ones
    assert c["n_actions"] == len(a) and c["n_overdue"] == int(a["status"].eq("overdue").sum())
    assert sum(k["n"] for k in c["kind_counts"]) == len(a)
    assert sum(int(r[3]) for r in pg.charts[0].table.rows) == len(a)
    table = c["actions_table"]
    assert len(table.rows) == LIST_CAP
    assert f"Showing {LIST_CAP} of {len(a):,}" in table.caption and "actions.csv" in table.caption
    # overdue first, by due date: the listed ones are the earliest overdue items
    status = [r[1] for r in table.rows]
    assert status == sorted(status, key=lambda s: s != "overdue")
    shown_due = [r[0] for r in table.rows]
    assert shown_due == sorted(shown_due)
    overdue = a[a["status"].eq("overdue")].sort_values("due_date")
    assert shown_due[-1] == f"{overdue['due_date'].iloc[LIST_CAP - 1]:%Y-%m-%d}"
    # codes only, no raw id
    assert all(r[2].startswith("P-") for r in table.rows)
    assert not any("E0" in cell for r in table.rows for cell in map(str, r))
    # the printable review gets the most urgent ones, with the total
    top = c["print_actions_table"]
    assert len(top.rows) == page.PRINT_TOP and top.rows == table.rows[:page.PRINT_TOP]
    assert f"of {len(a):,}" in top.caption
    # a restricted build lists every action
    (full,) = page.build(_page_ctx(prog, res, restricted=True))
    assert len(full.context["actions_table"].rows) == len(a) and "Showing" not in full.context["actions_table"].caption


def test_urgent_first_orders_by_status_then_due_date() -> None:
    from generator.pages.actions import urgent_first

    a = pd.DataFrame({"status": ["open", "due_soon", "overdue", "overdue", "open"],
                      "due_date": [pd.NaT, D("2026-01-20"), D("2025-06-01"), D("2024-03-01"), D("2025-01-01")],
                      "subject": list("abcde")})
    assert urgent_first(a)["subject"].tolist() == ["d", "c", "b", "e", "a"]  # blank due date last


def test_programme_page_caps_person_lists_and_keeps_counts() -> None:
    from generator.pages import programme as page

    prog, res = _many(260)
    (pg,) = page.build(_page_ctx(prog, res))
    c = pg.context
    overdue = res.due[res.due["status"].eq("overdue")]
    assert c["n_overdue"] == len(overdue) > page.LIST_CAP
    t = c["overdue_table"]
    assert len(t.rows) == page.LIST_CAP
    assert f"Showing {page.LIST_CAP} of {len(overdue):,}" in t.caption and "actions.csv" in t.caption
    dates = [r[3] for r in t.rows]  # Person, Group, Due, Due date, Clause
    assert dates == sorted(dates) and dates[0] == f"{overdue['due_date'].min():%Y-%m-%d}"
    enrol = res.enrolment[res.enrolment["mismatch"].eq("exposed_no_records")]
    assert len(c["enrolment_table"].rows) == min(len(enrol), page.LIST_CAP)
    # the per-group counts stay complete
    groups = {r[0]: r for r in c["enrolment_groups_table"].rows}
    assert groups["G1"][4] == f"{len(enrol):,}"
    (full,) = page.build(_page_ctx(prog, res, restricted=True))
    assert len(full.context["overdue_table"].rows) == len(overdue)


def test_review_collect_prints_summaries_and_names_the_lists_left_out() -> None:
    from generator.pages import review
    from generator.pages.base import Page, Table

    per_group = Table(["Group", "People"], [[f"G{i}", str(i)] for i in range(3)], caption="People per group")
    people = Table(["Person", "Group"], [["P-1", "G1"]] * 7, caption="People to look at")
    capped = Table(["Person", "Group"], [["P-2", "G1"]] * 3, caption="Overdue. Showing 3 of 900; see actions.csv")
    listed = Table(["Due", "Subject"], [["2025-01-01", "P-3"]] * 200, caption="All actions")
    top = Table(["Due", "Subject"], [["2025-01-01", "P-3"]] * 50, caption="Most urgent")
    long = Table(["Year", "n"], [[str(y), "1"] for y in range(100)], caption="Per year")
    pg = Page(slug="x", title="X", template="x.html", section="programme",
              context={"per_group": per_group, "people": people, "capped": capped, "info_list": people,
                       "actions_table": listed, "print_actions_table": top, "long": long,
                       "tiles": [{"label": "a", "value": "1"}], "notes": ["a note"]})
    out = review.collect(pg)
    printed = [t.caption.split(".")[0] for t in out["tables"]]
    assert printed == ["People per group", "Most urgent", "Per year"]
    assert out["tables"][1].rows == top.rows  # the page's own print version, whole
    assert len(out["tables"][2].rows) == review.TABLE_ROWS and "first 40 of 100 rows" in out["tables"][2].caption
    assert out["left_out"] == ["People to look at (7 rows)", "Overdue. Showing 3 of 900; see actions.csv",
                               "People to look at (7 rows)"]
    assert out["tiles"] == [{"label": "a", "value": "1", "note": "", "figure": ""}] and out["sentences"] == ["a note"]


def test_review_prints_no_per_person_list(small_site: tuple[Path, Path]) -> None:
    import re

    _, out = small_site
    html = (out / "review.html").read_text(encoding="utf-8")
    headers = re.findall(r"<thead><tr>(.*?)</tr></thead>", html, flags=re.S)
    assert not [h for h in headers if '>Person</th>' in h]
    with_subject = [h for h in headers if '>Subject</th>' in h]
    assert len(with_subject) == 1  # the most urgent actions, and no other listing
    body = html.split('id="review-actions"')[1]
    rows = re.search(r"<tbody>(.*?)</tbody>", body.split(">Subject</th>")[1], flags=re.S).group(1)
    assert 1 <= rows.count("<tr>") <= 50
    assert "Not printed here" in html


# ---------------------------------------------------------------------------------------
# every year end in one pass (the trends stage): the same status as one date at a time


def _year_ends(years: range) -> list[tuple[pd.Timestamp, pd.Timestamp]]:
    return [(pd.Timestamp(year=y, month=12, day=31), pd.Timestamp(year=y, month=1, day=1)) for y in years]


def test_status_at_every_year_end_in_one_pass() -> None:
    # 29 CFR 1910.95(g)(6): an audiogram at least annually after the baseline; common practice:
    # an exit audiogram when employment ends
    people = [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01", "leave_date": "2023-09-30"}]
    prog = make(people, audiograms=aud("2020-02-01", "baseline") + aud("2021-01-15") + aud("2023-09-20", "exit"))
    inp = compliance.compute(prog, exposure=exposed("2020-01-01")).inputs
    ends = _year_ends(range(2020, 2025))
    got = {a.year: s for (a, _), s in zip(ends, compliance.person_statuses(inp, ends))}
    e1 = {y: s.set_index("person_id").loc["E1"] for y, s in got.items() if len(s)}
    # next annual audiogram 2021-02-01, within 60 days of 2020-12-31
    assert e1[2020]["audiogram_status"] == "due_soon"
    assert e1[2020]["last_audiogram"] == pd.Timestamp("2020-02-01")
    assert e1[2021]["audiogram_status"] == "due_soon"  # next due 2022-01-15
    assert e1[2022]["audiogram_status"] == "overdue"   # 2022-01-15 has passed
    assert e1[2022]["exit_status"] == "not_required"   # leave date not yet within 60 days
    assert e1[2023]["exit_status"] == "done"           # exit audiogram 2023-09-20
    assert e1[2021]["exit_status"] == "not_required"
    assert got[2024].empty                             # gone before 2024 began
    assert e1[2020]["first_audiogram"] == e1[2023]["first_audiogram"] == pd.Timestamp("2020-02-01")


@pytest.mark.parametrize("chunk", [None, 1, 7])  # person x date rows per pass: all at once, 1 and 2 dates a pass
def test_one_pass_equals_one_date_at_a_time(chunk: int | None, monkeypatch: pytest.MonkeyPatch) -> None:
    if chunk is not None:
        monkeypatch.setattr(compliance, "_CHUNK_ROWS", chunk)
    people = [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01", "leave_date": "2023-09-30"},
              {"person_id": "E2", "group": "G1", "hire_date": "2022-06-01"},
              {"person_id": "E3", "group": "G1", "hire_date": "2019-06-01", "leave_date": "2021-03-01"}]
    audiograms = (aud("2020-02-01", "baseline") + aud("2021-01-15") + aud("2023-09-01")
                  + [dict(r, person_id="E2") for r in aud("2022-07-01", "baseline")]
                  + [dict(r, person_id="E3") for r in aud("2021-02-20")])
    training = [{"person_id": "E1", "date": "2020-03-01"}, {"person_id": "E2", "date": "2023-05-05"}]
    fits = [{"person_id": "E1", "protector_id": "PR1", "date": "2021-04-01", "par": 20},
            {"person_id": "E2", "protector_id": "PR1", "date": None, "par": None}]
    prog = make(people, audiograms=audiograms, training=training, fits=fits)
    ex = exposure([{"person_id": p, "group": "G1", "exposed": True, "first_exposed_date": "2020-01-01"}
                   for p in ("E1", "E2", "E3")])
    inp = compliance.compute(prog, exposure=ex).inputs
    ends = _year_ends(range(2019, 2026)) + [(pd.Timestamp("2023-06-30"), pd.Timestamp("2018-01-01")),
                                            (pd.Timestamp("2022-06-30"), pd.Timestamp("2022-01-01")),
                                            (pd.Timestamp("2021-01-15"), pd.Timestamp("2021-01-01"))]
    many = compliance.person_statuses(inp, ends)
    assert len(many) == len(ends)
    for (as_of, start), s in zip(ends, many):
        pd.testing.assert_frame_equal(s, compliance.person_status(inp, as_of, start), check_exact=True)
    by_year = {a: s.set_index("person_id") for (a, _), s in zip(ends, many)}
    y21 = by_year[pd.Timestamp("2021-12-31")]
    assert bool(y21.loc["E1", "has_protector"]) and bool(y21.loc["E1", "has_fit_test"])
    assert not bool(by_year[pd.Timestamp("2020-12-31")].loc["E1", "has_protector"])  # issued 2021-04-01
    assert bool(by_year[pd.Timestamp("2022-12-31")].loc["E2", "has_protector"])       # blank date counts
    assert not bool(by_year[pd.Timestamp("2022-12-31")].loc["E2", "has_fit_test"])
    assert y21.loc["E3", "exit_status"] == "done"  # audiogram within 30 days before leaving
    # a record dated on the as-of date counts; nobody gets another person's records
    assert by_year[pd.Timestamp("2021-01-15")].loc["E1", "last_audiogram"] == pd.Timestamp("2021-01-15")
    assert pd.isna(by_year[pd.Timestamp("2022-06-30")].loc["E2", "last_audiogram"])
    assert pd.isna(by_year[pd.Timestamp("2022-06-30")].loc["E2", "first_audiogram"])
    # one person on two rows: each row is judged with the person's records
    twice = compliance.ComplianceInputs(pd.concat([inp.people, inp.people.iloc[[0]]], ignore_index=True),
                                        inp.audiograms, inp.training, inp.fits, inp.rule, inp.baseline_months,
                                        inp.interval_months, inp.training_months)
    for (as_of, _), s in zip(ends, compliance.person_statuses(twice, ends)):
        one = by_year[as_of]
        if "E1" in one.index:
            rows = s[s["person_id"].eq("E1")]
            assert len(rows) == 2 and (rows["audiogram_status"] == one.loc["E1", "audiogram_status"]).all()
