"""Checks of the headline figures (generator/figures.py) and of the counts behind them:
recordable cases per person (29 CFR 1904.10), the incidence rate (OSHA), the ISO 1999
combination of age and noise, the period's audiometer test days and group headcounts."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from generator import exposure as ex
from generator import figures as F
from generator import hearing, norms
from generator.build import compute as run_stages
from generator.inputs.reader import load_programme
from generator.pages.hearing import expected_sentence, noise_chart
from tests.progkit import make_programme
from tests.test_hearing import ag, person, run


# ---------------------------------------------------------------------------------------
# recordable cases: one per person, 29 CFR 1904.10


def test_both_ears_on_one_audiogram_make_one_case(tmp_path: Path) -> None:
    # 29 CFR 1904.10(a): record the case when the STS is "in one or both ears" -- one case of
    # the employee, whatever the number of ears; incidence rate = N x 200,000 / hours worked
    # (OSHA FAQ 326: 200,000 h = 100 employees x 40 h x 50 weeks)
    people = [person("B1", "M", "1990-01-01"), person("B2", "M", "1990-01-01")]
    auds = [ag("B1", "2024-01-10", e, (10, 10, 10), kind="baseline") for e in "LR"] + \
           [ag("B1", "2025-02-10", e, (25, 30, 30)) for e in "LR"] + \
           [ag("B2", "2024-01-10", "R", (10, 10, 10), kind="baseline"), ag("B2", "2025-02-10", "R", (25, 30, 30))]
    res = run(tmp_path, auds, people, config={"audiometry": {"age_correction": False}, "hours_worked": 400000})
    assert len(res.cases) == 2
    both = res.cases.set_index("person_id").loc["B1"]
    assert both["ear"] == "L R"
    assert res.summary["recordable_cases"] == 2
    # 2 x 200,000 / 400,000 = 1.0
    assert res.summary["recordable_rate_per_200k"] == pytest.approx(1.0)
    assert res.incidence.set_index("year").loc[2025, "n_cases"] == 2


def test_a_new_case_in_the_same_person_only_after_a_revised_baseline(tmp_path: Path) -> None:
    # 29 CFR 1904.10(b)(2)(i): once a case is recorded, later shifts are compared with the
    # revised baseline; the other ear's later shift against the original baseline is not a new case
    people = [person("R1", "M", "1990-01-01")]
    auds = [ag("R1", "2020-03-01", "L", (10, 10, 10), kind="baseline"),
            ag("R1", "2020-03-01", "R", (10, 10, 10), kind="baseline"),
            ag("R1", "2021-03-01", "L", (25, 25, 30)), ag("R1", "2021-03-01", "R", (10, 10, 10)),
            ag("R1", "2022-03-01", "L", (25, 30, 30)), ag("R1", "2022-03-01", "R", (25, 25, 25)),
            ag("R1", "2023-03-01", "L", (40, 40, 45)), ag("R1", "2023-03-01", "R", (25, 25, 25))]
    cfg = {"audiometry": {"age_correction": False}, "period": {"start": "2020-01-01", "end": "2025-12-31"}}
    res = run(tmp_path / "a", auds, people, config=cfg)
    assert res.cases["date"].tolist() == [pd.Timestamp("2021-03-01")]
    # the reviewer revises the left baseline to the 2022 audiogram: the 2023 shift is a new case
    reviews = [{"person_id": "R1", "ear": "L", "date": "2022-04-01", "decision": "revise_baseline",
                "audiogram_date": "2022-03-01", "reviewer_role": "audiologist"}]
    res2 = run(tmp_path / "b", auds, people, config=cfg, reviews=reviews)
    assert res2.cases["date"].tolist() == [pd.Timestamp("2021-03-01"), pd.Timestamp("2023-03-01")]
    assert res2.summary["recordable_cases"] == 2


def test_incidence_rate_base() -> None:
    # OSHA FAQ 326: "The 200,000 hours in the formula represents the equivalent of 100
    # employees working 40 hours per week, 50 weeks per year"
    assert F.RATE_BASE_HOURS == 100 * 40 * 50
    assert F.incidence_rate(3, 600_000) == pytest.approx(1.0)
    assert F.incidence_rate(1, 471_800) == pytest.approx(0.4239, abs=1e-4)


# ---------------------------------------------------------------------------------------
# expected change: ISO 1999:2013 Formula (1)


def test_iso1999_formula_1_worked_values() -> None:
    # ISO 1999:2013 Formula (1) H' = H + N - H*N/120 on the Annex C example (male, 50 years,
    # LEX,8h 90 dB for 30 years, Q = 10 %): H (Table A.3) = 14, 21, 36 dB and N (Table D.2)
    # = 0, 9, 19 dB at 1, 2 and 4 kHz give H' = 14.0, 28.4, 49.3 dB
    out = norms.iso1999_combine([14.0, 21.0, 36.0], [0.0, 9.0, 19.0])
    assert out == pytest.approx([14.0, 28.425, 49.3])
    # the term H*N/120 makes the combined value smaller than the sum once both parts are positive
    assert norms.iso1999_combine(36.0, 19.0) < 36.0 + 19.0


def _shown(observed: list[float], expected: list[float]) -> pd.DataFrame:
    return pd.DataFrame({"group": [f"G{i}" for i in range(len(observed))], "freq": 4000,
                         "observed_change": observed, "expected_change": expected})


def test_sentence_is_chosen_from_the_numbers() -> None:
    tol = float(hearing.SETTINGS["expected_tolerance_db"])
    assert tol == 3.0
    above = expected_sentence(_shown([9.0, 4.0], [5.0, 4.5]), ["G0", "G1"], tol)
    assert "larger than" in above and "1 of 2" in above and "G0: 9.0 dB observed against 5.0 dB expected" in above
    assert "no larger" not in above
    within = expected_sentence(_shown([6.0, 4.0], [5.0, 4.5]), ["G0", "G1"], tol)
    assert within.startswith("In every one of the 2 shown the observed mean change since baseline is within 3 dB")
    below = expected_sentence(_shown([1.0, 4.0], [5.0, 4.5]), ["G0", "G1"], tol)
    assert "smaller than" in below and "In 1 of the 2" in below and "within 3 dB in 1" in below
    # exactly the tolerance away is still within
    assert list(hearing.expected_verdict([8.0, 2.0, 8.1], [5.0, 5.0, 5.0])) == ["within", "within", "above"]


def test_chart_draws_the_combined_expected_change() -> None:
    ne = pd.DataFrame({"group": ["G1"], "freq": [4000], "lex_8h": [92.0], "n_ears": [20], "n_nr_excluded": [0],
                       "mean_years": [10.0], "nipts_at_mean_years": [12.0], "expected_noise_change": [4.0],
                       "expected_age_change": [3.0], "expected_change": [6.9], "observed_change": [12.0]})
    chart = noise_chart(ne, ["G1"], "hearing-7")
    names = [t["name"] for t in chart.figure.data]
    assert "expected from age and noise (ISO 1999 Formula 1)" in names
    assert "larger than" in chart.summary and "12.0 dB observed against 6.9 dB expected" in chart.summary
    assert chart.table.rows[0][9] == "above by more than 3 dB"


def test_expected_change_combines_age_and_noise(built_example) -> None:
    ne = built_example.context.results.hearing.noise_expected
    assert len(ne)
    # where both parts are positive the combination (Formula 1 at the test less at the baseline)
    # differs from their plain sum
    both = ne[(ne["expected_noise_change"] > 0.5) & (ne["expected_age_change"] > 0.5)]
    assert len(both)
    diff = both["expected_change"] - (both["expected_noise_change"] + both["expected_age_change"])
    assert (diff.abs() > 1e-6).all()


# ---------------------------------------------------------------------------------------
# denominators and headcounts


def test_audiometer_share_counts_the_period_test_days(built_example) -> None:
    results = built_example.context.results
    status = results.checks.status
    d = pd.to_datetime(status["date"])
    cfg = built_example.context.programme.config
    inp = (d >= pd.Timestamp(cfg.period.start)) & (d <= pd.Timestamp(cfg.period.end))
    fv = results.figures["audiometer_days_ok_share"]
    assert (fv.numerator, fv.denominator) == (int(status.loc[inp, "ok"].sum()), int(inp.sum()))
    assert fv.denominator < len(status)  # earlier years' test days are not in the period's figure
    assert results.compliance.summary["audiometer_days_ok_share"] == fv.value


def test_group_headcount_is_people_in_scope(tmp_path: Path) -> None:
    # ISO 9612:2009 Table 1: a group of more than 40 workers should be split; the headcount
    # is the people in the group during the review period, not everyone ever in it
    people = [{"person_id": f"E{i:03d}", "group": "G1", "hire_date": "2010-01-01",
               "leave_date": "2023-06-30" if i < 10 else ""} for i in range(45)]
    noise = [{"measurement_id": f"M{i}", "date": "2025-05-01", "kind": "personal", "person_id": f"E{20 + i:03d}",
              "group": "G1", "duration_h": 8, "laeq": 86.0 + (i % 3)} for i in range(6)]
    root = make_programme(tmp_path, {"people.csv": people, "noise.csv": noise, "groups.csv": [{"group": "G1"}]})
    prog = load_programme(root)
    assert not prog.findings.has_errors(), prog.findings.lines()
    r = ex.compute(prog)
    assert int(r.groups.set_index("group").loc["G1", "n_people"]) == 35
    assert "job-large-group" not in {f.key for f in r.findings}


def test_figures_count_people_in_scope_and_trends_end_with_the_period(tmp_path: Path) -> None:
    people = [{"person_id": "A", "group": "G1", "hire_date": "2020-01-01"},
              {"person_id": "B", "group": "G1", "hire_date": "2020-01-01", "leave_date": "2024-03-01"},
              {"person_id": "C", "group": "G1", "hire_date": "2020-01-01"}]
    noise = [{"measurement_id": f"M{i}", "date": f"{2023 + i % 3}-05-01", "kind": "personal",
              "person_id": p, "group": "G1", "duration_h": 8, "laeq": lv}
             for i, (p, lv) in enumerate((("A", 95.0), ("B", 95.0), ("C", 80.0), ("A", 95.0), ("C", 80.0)))]
    root = make_programme(tmp_path, {"people.csv": people, "noise.csv": noise, "groups.csv": [{"group": "G1"}]})
    prog = load_programme(root)
    results = run_stages(prog)
    figs = results.figures
    # B left before the period: not in scope, not counted in the top band
    assert figs["in_scope"].value == 2
    assert figs["exposed_top_band"].value == 1
    t = results.trends.table.set_index("year")
    assert t.loc[2025, "in_scope"] == figs["in_scope"].value
    assert t.loc[2023, "in_scope"] == 3
    for f in F.yearly():
        v = figs[f.name].value
        got = t.loc[2025, f.name]
        assert (v is None and pd.isna(got)) or got == pytest.approx(v), f.name


def test_every_definition_is_complete() -> None:
    seen = set()
    for f in F.FIGURES:
        assert f.name not in seen
        seen.add(f.name)
        assert f.label and f.population and f.period and f.source and f.explained
        assert f.unit in (F.COUNT, F.SHARE, F.RATE)
        assert (f.unit == F.COUNT) == (f.denominator == ""), f.name
        assert "index" in f.shown_on
    # a figure over all years says so in its label
    assert all("all years" in f.label for f in F.FIGURES if f.period == "all years")


def test_snapshot_share_and_top_band() -> None:
    from generator.rules import load_rule_set
    from generator.config import Config
    rule = load_rule_set("osha-1910.95", Config())
    status = pd.DataFrame({"person_id": ["a", "b", "c"], "first_exposed_date": pd.to_datetime(
        ["2020-01-01", "2026-01-01", pd.NaT])})
    days = pd.DataFrame({"audiometer_id": ["X"] * 4, "date": pd.to_datetime(
        ["2024-05-01", "2025-02-01", "2025-03-01", "2025-04-01"]), "ok": [False, True, True, False]})
    snap = F.Snapshot(start=pd.Timestamp("2025-01-01"), as_of=pd.Timestamp("2025-12-31"), rule=rule,
                      status=status, audiograms=pd.DataFrame(), cases=pd.DataFrame(), test_days=days,
                      exposure_people=pd.DataFrame({"person_id": ["a", "b", "c"],
                                                    "judged_level": [90.0, 95.0, np.nan]}))
    share = F.BY_NAME["audiometer_days_ok_share"].evaluate(snap)
    # the test days of the period only: 2 valid of 3
    assert (share.numerator, share.denominator) == (2, 3) and share.value == pytest.approx(0.6667)
    # 29 CFR 1910.95(b)(1): 90 dB(A) TWA; b is exposed only from 2026, after the as-of date
    assert F.BY_NAME["exposed_top_band"].evaluate(snap).value == 1


@pytest.mark.parametrize("dtype", [object, "string", "str"])
def test_status_counts_read_any_text_dtype(dtype: object) -> None:
    # the status counts compare texts as Python objects; pandas' own eq/isin are the oracle, missing cells included
    import random

    from generator.figures import _must_active, _overdue

    rng = random.Random(7)
    words = ["overdue", "open", "scheduled", "due_soon", "done", None]
    s = pd.DataFrame({c: pd.Series([rng.choice(words) for _ in range(300)], dtype=dtype)
                      for c in ("audiogram_status", "baseline_status")})
    s["must_enrol"] = [rng.random() < 0.7 for _ in range(300)]
    s["active"] = [rng.random() < 0.8 for _ in range(300)]
    assert _overdue(s, "audiogram_status") == int(s["audiogram_status"].eq("overdue").fillna(False).sum()) > 0
    expected = s["must_enrol"] & s["active"] & ~s["baseline_status"].isin(["scheduled", "due_soon"]).fillna(False)
    assert _must_active(s).astype(bool).tolist() == expected.astype(bool).tolist()
