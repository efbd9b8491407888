"""Exposure stage: ISO 9612 worked examples, dose bases, bands, people, weekly levels, logs, map."""
from __future__ import annotations

import datetime as dt
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest

from generator import exposure as ex
from generator.inputs.reader import load_programme
from tests.progkit import make_programme

TODAY = dt.date(2026, 1, 15)

# ISO 9612:2009 Annex E (job-based): six 2-h samples in a group of 18 workers, Te = 7.5 h
ANNEX_E = [88.1, 86.1, 89.7, 86.5, 91.1, 86.7]
# ISO 9612:2009 Annex D (task-based, welder): (task, samples, observed durations h)
ANNEX_D = [("planning", [70.0], [1.5]), ("welding", [80.1, 82.2, 79.6], [4, 5, 6]),
           ("cutting", [86.5, 92.4, 89.3, 93.2, 87.8, 86.2], [1, 2, 1, 2, 1.5, 1.5])]


def _leq(levels: Any, weights: Any = None) -> float:
    # time-averaged level, IEC 61672-1:2013 3.9: 10 lg[Σ w 10^(L/10) / Σ w]
    L = np.asarray(levels, dtype=float)
    w = np.ones_like(L) if weights is None else np.asarray(weights, dtype=float)
    return float(10 * np.log10((w * 10 ** (L / 10)).sum() / w.sum()))


def _t_osha(level: float) -> float:
    # 29 CFR 1910.95 App. A, Table G-16a footnote: T = 8 / 2^((L - 90)/5) hours
    return 8 / 2 ** ((level - 90) / 5)


def _load(tmp: Path, files: dict[str, Any], config: dict | None = None):
    root = make_programme(tmp, files=files, config=config)
    p = load_programme(root, today=TODAY)
    assert not p.findings.has_errors(), p.findings.lines()
    return p


def _annex_d_rows(group: str = "WELD") -> list[dict]:
    rows = []
    for task, levels, hours in ANNEX_D:
        for L, h in zip(levels, hours):
            rows.append({"group": group, "task": task, "task_hours": h, "laeq": L})
    return rows


# ---------------------------------------------------------------------------------------
# ISO 9612 Table C.4, Table 1 and the worked examples


# ISO 9612:2009 Table C.4, c1·u1 (dB): rows N, columns u1 = 0.5, 1.0, ... 6.0 dB (one transcription;
# cells N = 30/u1 = 0.5 and N = 6/u1 = 2.0 also seen elsewhere)
C4_U1 = [0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0]
C4 = {
    3: [0.6, 1.6, 3.1, 5.2, 8.0, 11.5, 15.7, 20.6, 26.1, 32.2, 39.0, 46.5],
    4: [0.4, 0.9, 1.6, 2.5, 3.6, 5.0, 6.7, 8.6, 10.9, 13.4, 16.1, 19.2],
    5: [0.3, 0.7, 1.2, 1.7, 2.4, 3.3, 4.4, 5.6, 6.9, 8.5, 10.2, 12.1],
    6: [0.3, 0.6, 0.9, 1.4, 1.9, 2.6, 3.3, 4.2, 5.2, 6.3, 7.6, 8.9],
    7: [0.2, 0.5, 0.8, 1.2, 1.6, 2.2, 2.8, 3.5, 4.3, 5.1, 6.1, 7.2],
    8: [0.2, 0.5, 0.7, 1.1, 1.4, 1.9, 2.4, 3.0, 3.6, 4.4, 5.2, 6.1],
    9: [0.2, 0.4, 0.7, 1.0, 1.3, 1.7, 2.1, 2.6, 3.2, 3.9, 4.6, 5.4],
    10: [0.2, 0.4, 0.6, 0.9, 1.2, 1.5, 1.9, 2.4, 2.9, 3.5, 4.1, 4.8],
    12: [0.2, 0.3, 0.5, 0.8, 1.0, 1.3, 1.7, 2.0, 2.5, 2.9, 3.5, 4.0],
    14: [0.1, 0.3, 0.5, 0.7, 0.9, 1.2, 1.5, 1.8, 2.2, 2.6, 3.0, 3.5],
    16: [0.1, 0.3, 0.5, 0.6, 0.8, 1.1, 1.3, 1.6, 2.0, 2.3, 2.7, 3.2],
    18: [0.1, 0.3, 0.4, 0.6, 0.8, 1.0, 1.2, 1.5, 1.8, 2.1, 2.5, 2.9],
    20: [0.1, 0.3, 0.4, 0.5, 0.7, 0.9, 1.1, 1.4, 1.7, 2.0, 2.3, 2.6],
    25: [0.1, 0.2, 0.3, 0.5, 0.6, 0.8, 1.0, 1.2, 1.4, 1.7, 2.0, 2.3],
    30: [0.1, 0.2, 0.3, 0.4, 0.6, 0.7, 0.9, 1.1, 1.3, 1.5, 1.7, 2.0],
}


@pytest.mark.parametrize("n", sorted(C4))
def test_table_c4_cells_exact(n: int) -> None:
    # ISO 9612:2009 Table C.4: the interpolation returns every tabulated cell exactly
    assert ex.c1u1_table(np.full(len(C4_U1), n), C4_U1) == pytest.approx(C4[n], abs=1e-12)


def test_table_c4_spot_cells() -> None:
    # spot cells: N = 30, u1 = 0.5 -> 0.1 dB; N = 6, u1 = 2.0 -> 1.4 dB (Annex E); N = 5, u1 = 3.0 -> 3.3
    assert float(ex.c1u1_table(30, 0.5)) == pytest.approx(0.1)
    assert float(ex.c1u1_table(6, 2.0)) == pytest.approx(1.4)
    assert float(ex.c1u1_table(5, 3.0)) == pytest.approx(3.3)
    assert float(ex.c1u1_table(3, 6.0)) == pytest.approx(46.5)


def test_table_c4_interpolation_rule() -> None:
    # our documented rule: bilinear between cells, 0 at u1 = 0, N > 30 uses the N = 30 row, N < 3 undefined
    assert float(ex.c1u1_table(11, 2.0)) == pytest.approx((0.9 + 0.8) / 2)
    assert float(ex.c1u1_table(6, 2.25)) == pytest.approx((1.4 + 1.9) / 2)
    assert float(ex.c1u1_table(6, 0.25)) == pytest.approx(0.15)
    assert float(ex.c1u1_table(40, 1.0)) == pytest.approx(0.2)
    assert np.isnan(ex.c1u1_table(2, 1.0))
    # beyond u1 = 6 dB the last column is extended linearly (and warned about)
    assert float(ex.c1u1_table(5, 6.5)) == pytest.approx(12.1 + (12.1 - 10.2))


def test_table_1_minimum_durations() -> None:
    # ISO 9612:2009 Table 1 (minimum cumulative sampling duration, job-based): 5 -> 5 h, 6 -> 5.5 h,
    # 15 -> 10 h, 18 -> 10.75 h, 40 -> 16.25 h
    got = ex.min_cumulative_hours([1, 5, 6, 15, 18, 40])
    assert got == pytest.approx([5, 5, 5.5, 10, 10.75, 16.25])


def test_annex_e_job_based() -> None:
    # ISO 9612:2009 Annex E: Lp,A,eqTe = 88.4 dB, u1 = 2.0 dB, c1·u1 = 1.4 dB, U = 3.8 dB;
    # LEX,8h printed 88.1 dB (the annex rounds 88.4 before adding 10 lg(7.5/8))
    r = ex.job_based(ANNEX_E, te_hours=7.5, u2=1.5)
    assert r["laeq"] == pytest.approx(88.4, abs=0.05)
    assert r["u1"] == pytest.approx(2.0, abs=0.05)
    assert r["c1u1"] == pytest.approx(1.4, abs=0.05)
    assert r["U"] == pytest.approx(3.8, abs=0.05)
    assert round(round(r["laeq"], 1) + 10 * math.log10(7.5 / 8), 1) == 88.1
    assert r["lex_8h"] == pytest.approx(r["laeq"] + 10 * math.log10(7.5 / 8), abs=1e-9)


def test_annex_d_task_based() -> None:
    # ISO 9612:2009 Annex D: LEX,8h = 84.3 dB; U = 2.7 dB without and 3.2 dB with the duration term;
    # per task Lp,A,eqT,m 80.8 / 90.1 dB, u1a 0.8 / 1.2 dB, c1a 0.28 / 0.71, c1b 0.24 / 2.1 dB/h
    df = pd.DataFrame(_annex_d_rows())
    per_a, grp_a = ex.task_table(df, include_duration=False)
    per_b, grp_b = ex.task_table(df, include_duration=True)
    assert float(grp_b["lex_8h"].iloc[0]) == pytest.approx(84.3, abs=0.05)
    assert float(grp_a["u_expanded"].iloc[0]) == pytest.approx(2.7, abs=0.05)
    assert float(grp_b["u_expanded"].iloc[0]) == pytest.approx(3.2, abs=0.05)
    assert float(grp_b["lex_8h_upper"].iloc[0]) == pytest.approx(87.5, abs=0.06)
    t = per_b.set_index("task")
    assert t.loc["welding", "lp_aeq"] == pytest.approx(80.8, abs=0.05)
    assert t.loc["cutting", "lp_aeq"] == pytest.approx(90.1, abs=0.05)
    assert t.loc["welding", "lex_8h_m"] == pytest.approx(78.74, abs=0.01)
    assert t.loc["cutting", "lex_8h_m"] == pytest.approx(82.83, abs=0.01)
    assert t.loc["planning", "lex_8h_m"] == pytest.approx(62.7, abs=0.05)
    assert t.loc["welding", "u1a"] == pytest.approx(0.8, abs=0.05)
    assert t.loc["cutting", "u1a"] == pytest.approx(1.2, abs=0.05)
    assert t.loc["welding", "c1a"] == pytest.approx(0.28, abs=0.005)
    assert t.loc["cutting", "c1a"] == pytest.approx(0.71, abs=0.005)
    assert t.loc["welding", "c1b"] == pytest.approx(0.24, abs=0.005)
    assert t.loc["cutting", "c1b"] == pytest.approx(2.1, abs=0.05)
    assert t.loc["welding", "u1b"] == pytest.approx(1.0)
    assert t.loc["cutting", "u1b"] == pytest.approx(0.5)
    assert t.loc["cutting", "spread_db"] == pytest.approx(7.0)
    # shares of the daily dose add up to one (ISO 9612:2009 Eq. 10)
    assert per_b["share_of_dose"].sum() == pytest.approx(1.0)


def test_annex_e_through_compute(tmp_path: Path) -> None:
    people = [{"person_id": f"W{i:02d}", "group": "LINE"} for i in range(18)]
    noise = [{"measurement_id": f"S{i}", "date": f"2025-03-0{i + 1}", "kind": "personal", "person_id": f"W{i:02d}",
              "duration_h": 2, "laeq": L} for i, L in enumerate(ANNEX_E)]
    p = _load(tmp_path, {"people.csv": people, "groups.csv": [{"group": "LINE", "name": "Line", "shift_hours": 7.5}],
                         "noise.csv": noise}, config={"rules": "eu-2003-10", "compare_rules": ["osha-1910.95"]})
    r = ex.compute(p)
    g = r.groups.set_index("group").loc["LINE"]
    # ISO 9612:2009 Annex E
    assert g["strategy"] == "job" and g["n_samples"] == 6 and g["n_people"] == 18
    assert g["lex_8h"] == pytest.approx(88.16, abs=0.01)
    assert g["u1"] == pytest.approx(2.0, abs=0.05)
    assert g["c1u1"] == pytest.approx(1.4, abs=0.05)
    assert g["u_expanded"] == pytest.approx(3.8, abs=0.05)
    assert g["lex_8h_upper"] == pytest.approx(g["lex_8h"] + g["u_expanded"])
    # Directive 2003/10/EC Art. 3(1)(a): 87 dB(A) limit value (judged here without protectors)
    assert g["band_eu-2003-10"] == "at or above 87" and g["band"] == "at or above 87"
    assert bool(g["exposed"]) is True
    assert g["cum_hours"] == pytest.approx(12.0)
    # Table 1: 12 h >= 10.75 h for 18 workers and N = 6 >= 5: no sampling warning
    assert not [f for f in r.findings if f.key and f.key.startswith("job-")]
    # each 2-h sample stands for the 7.5-h shift in LEX,8h while its dose counts 2 h
    m = r.measurements.set_index("measurement_id").loc["S0"]
    assert m["lex_8h"] == pytest.approx(88.1 + 10 * math.log10(7.5 / 8))
    assert m["osha_dose_pct"] == pytest.approx(100 * 2 / _t_osha(88.1))


def test_annex_d_through_compute(tmp_path: Path) -> None:
    p = _load(tmp_path, {"people.csv": [{"person_id": "E001", "group": "WELD"}],
                         "groups.csv": [{"group": "WELD", "name": "Welding"}], "tasks.csv": _annex_d_rows()})
    r = ex.compute(p)
    g = r.groups.set_index("group").loc["WELD"]
    # ISO 9612:2009 Annex D, case (b) with the duration term
    assert g["strategy"] == "task"
    assert g["lex_8h"] == pytest.approx(84.3, abs=0.05)
    assert g["u_expanded"] == pytest.approx(3.2, abs=0.05)
    assert g["n_samples"] == 10
    keys = {f.key for f in r.findings}
    # ISO 9612:2009 9.3: cutting samples span 7 dB (>= 3 dB); planning has a single sample
    assert "task-spread" in keys and "task-few-samples" in keys
    spread = [f for f in r.findings if f.key == "task-spread"]
    assert spread[0].path == "data/tasks.csv" and spread[0].row is not None
    assert set(r.tasks["task"]) == {"planning", "welding", "cutting"}
    # OSHA 29 CFR 1910.95(c)(1): 84.3 dB is below the 85 dB action level on the measured value itself
    assert g["band_osha-1910.95"] == "below 85"
    # Directive 2003/10/EC: 84.3 on LEX,8h is between 80 and 85, but LEX,8h + U = 87.5 reaches the limit band
    assert g["band_eu-2003-10"] == "80–85" and g["band_upper_eu-2003-10"] == "at or above 87"


# ---------------------------------------------------------------------------------------
# per-measurement bases


def _log_csv(levels: list[float], start: str = "2025-03-10T06:00:00", step_s: int = 60) -> str:
    t0 = pd.Timestamp(start)
    lines = ["start,laeq"] + [f"{(t0 + pd.Timedelta(seconds=step_s * i)).isoformat()},{L}"
                              for i, L in enumerate(levels)]
    return "\n".join(lines) + "\n"


def test_log_dose_equals_steady_dose_for_constant_log(tmp_path: Path) -> None:
    noise = [{"measurement_id": "L1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 4, "laeq": 92.0},
             {"measurement_id": "S1", "date": "2025-03-10", "kind": "personal", "person_id": "E002",
              "duration_h": 4, "laeq": 92.0}]
    p = _load(tmp_path, {"noise.csv": noise, "noise_logs/L1.csv": _log_csv([92.0] * 240)})
    m = ex.compute(p).measurements.set_index("measurement_id")
    assert m.loc["L1", "basis"] == "log" and m.loc["S1", "basis"] == "steady_level"
    for col in ("osha_dose_pct", "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa", "lex_8h",
                "dose_eu-2003-10"):
        assert m.loc["L1", col] == pytest.approx(m.loc["S1", col], rel=1e-9), col
    # 29 CFR 1910.95 App. A: 4 h at 92 dB, T = 6.06 h -> 66 %; TWA = 16.61 lg(0.66) + 90 = 87.0
    assert m.loc["L1", "osha_dose_pct"] == pytest.approx(100 * 4 / (8 / 2 ** 0.4), rel=1e-9)
    assert m.loc["L1", "osha_twa"] == pytest.approx(87.0, abs=1e-9)


def test_log_dose_is_exact_for_varying_levels(tmp_path: Path) -> None:
    # 29 CFR 1910.95 App. A: D = 100 Σ C/T; 1 h at 95 (T = 4) + 1 h at 85 (T = 16) + 1 h at 75 (below 80: 0)
    levels = [95.0] * 60 + [85.0] * 60 + [75.0] * 60
    noise = [{"measurement_id": "L1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 3, "laeq": 91.6}]
    p = _load(tmp_path, {"noise.csv": noise, "noise_logs/L1.csv": _log_csv(levels)})
    r = ex.compute(p)
    m = r.measurements.set_index("measurement_id").loc["L1"]
    assert m["osha_dose_pct"] == pytest.approx(25 + 6.25, rel=1e-9)
    # PEL dose counts levels >= 90 only (OSHA Technical Manual, common practice)
    assert m["osha_pel_dose_pct"] == pytest.approx(25.0, rel=1e-9)
    # NIOSH 98-126: T = 8/2^((L-85)/3): 95 -> 0.7937 h, 85 -> 8 h, 75 below the 80 dB threshold
    assert m["niosh_dose_pct"] == pytest.approx(100 / (8 / 2 ** (10 / 3)) + 100 / 8, rel=1e-9)
    assert m["laeq"] == pytest.approx(_leq([95, 85, 75]), rel=1e-12)
    h = r.logs["L1"]
    assert len(h) <= ex.LOG_POINTS and h["n"].sum() == 180


def test_downsampled_history_keeps_the_energy(tmp_path: Path) -> None:
    rng = np.random.default_rng(3)
    levels = np.round(rng.uniform(70, 100, 1300), 1)
    noise = [{"measurement_id": "L1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 1300 / 3600, "laeq": _leq(levels)}]
    p = _load(tmp_path, {"noise.csv": noise, "noise_logs/L1.csv": _log_csv(list(levels), step_s=1)})
    r = ex.compute(p)
    h = r.logs["L1"]
    assert len(h) <= ex.LOG_POINTS
    # per-bin energy means, weighted by the samples in each bin, give back the log's LAeq
    assert _leq(h["laeq"], h["n"]) == pytest.approx(_leq(levels), abs=1e-9)
    assert h["lmax"].max() == pytest.approx(levels.max())


def test_dosimeter_basis_uses_reported_values(tmp_path: Path) -> None:
    noise = [{"measurement_id": "D1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 88.0, "osha_dose_pct": 70.0},
             {"measurement_id": "D2", "date": "2025-03-11", "kind": "personal", "person_id": "E002",
              "duration_h": 8, "laeq": 88.0, "osha_twa": 85.0}]
    p = _load(tmp_path, {"noise.csv": noise})
    m = ex.compute(p).measurements.set_index("measurement_id")
    assert (m["basis"] == "dosimeter").all()
    assert m.loc["D1", "osha_dose_pct"] == pytest.approx(70.0)
    # 29 CFR 1910.95 App. A: TWA = 16.61 lg(70/100) + 90 = 87.43 (Table A-1 as computed: 87.4)
    assert m.loc["D1", "osha_twa"] == pytest.approx(87.4, abs=0.05)
    # 29 CFR 1910.95(c)(1): 85 dB TWA is "equivalently, a dose of fifty percent"
    assert m.loc["D2", "osha_dose_pct"] == pytest.approx(50.0)
    # the 3-dB figures come from LAeq: NIOSH 88 dBA for 8 h = 200 % (NIOSH 98-126, +3 dB halves the time)
    assert m.loc["D1", "niosh_dose_pct"] == pytest.approx(200.0)


def test_steady_level_and_extended_shift(tmp_path: Path) -> None:
    noise = [{"measurement_id": "X1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 10, "laeq": 87.0},
             {"measurement_id": "X2", "date": "2025-03-11", "kind": "personal", "person_id": "E002",
              "duration_h": 2, "laeq": 90.0}]
    p = _load(tmp_path, {"noise.csv": noise, "groups.csv": [{"group": "G1", "shift_hours": 8}]})
    r = ex.compute(p)
    m = r.measurements.set_index("measurement_id")
    # LEX,8h = LAeq + 10 lg(Te/8): 87 dB over a 10-h shift -> 87.97 dB (ISO 9612:2009 Eq. 12)
    assert m.loc["X1", "lex_8h"] == pytest.approx(87.97, abs=0.005)
    # the dose counts the real 10 h: 29 CFR 1910.95 App. A, T(87) = 12.13 h -> 82.5 %
    assert m.loc["X1", "osha_dose_pct"] == pytest.approx(100 * 10 / _t_osha(87))
    # a 2-h sample stands for the 8-h shift in LEX,8h and in the shift TWA; its dose counts 2 h
    assert m.loc["X2", "lex_8h"] == pytest.approx(90.0)
    assert m.loc["X2", "osha_dose_pct"] == pytest.approx(25.0)
    assert m.loc["X2", "shift_twa_osha-1910.95"] == pytest.approx(90.0)
    assert m.loc["X2", "band_osha-1910.95"] == "at or above 90"
    assert list(r.measurements.columns[:14]) == ex.MEASUREMENT_COLUMNS


def test_octave_bands_warn_on_mismatch(tmp_path: Path) -> None:
    bands = {f"oct_{f}": L for f, L in zip((63, 125, 250, 500, 1000, 2000, 4000, 8000),
                                           (75, 84, 86, 88, 97, 99, 97, 96))}
    noise = [{"measurement_id": "O1", "date": "2025-03-10", "kind": "area", "group": "G1", "duration_h": 1,
              "laeq": 104.0, **bands},
             {"measurement_id": "O2", "date": "2025-03-10", "kind": "area", "group": "G1", "duration_h": 1,
              "laeq": 101.0, **bands}]
    p = _load(tmp_path, {"noise.csv": noise})
    r = ex.compute(p)
    m = r.measurements.set_index("measurement_id")
    # ISO 4869-2:2018 Annex B spectrum: LA = 104.0, LC = 103.0 dB
    assert m.loc["O1", "laeq_octaves"] == pytest.approx(104.0, abs=0.05)
    assert m.loc["O1", "lceq_octaves"] == pytest.approx(103.0, abs=0.05)
    bad = [f for f in r.findings if f.key == "octave-laeq-mismatch"]
    assert len(bad) == 1 and bad[0].row == 3 and bad[0].column == "laeq"


# ---------------------------------------------------------------------------------------
# groups, people, weekly, actions, map


def test_people_weekly_and_first_exposure(tmp_path: Path) -> None:
    people = [{"person_id": "E001", "group": "G1", "hire_date": "2020-01-01"},
              {"person_id": "E002", "group": "G1", "hire_date": "2025-06-01"},
              {"person_id": "E003", "group": "G2", "hire_date": "2020-01-01"}]
    noise = [{"measurement_id": "A", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 84.0},
             {"measurement_id": "B", "date": "2025-03-12", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 90.0},
             {"measurement_id": "C", "date": "2025-02-01", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 86.0}]
    p = _load(tmp_path, {"people.csv": people, "noise.csv": noise,
                         "groups.csv": [{"group": "G1"}, {"group": "G2"}]})
    r = ex.compute(p)
    pp = r.people.set_index("person_id")
    assert pp.loc["E001", "source"] == "personal"
    assert pp.loc["E001", "lex_8h"] == pytest.approx(_leq([84, 90, 86]))
    # OSHA TWA of the mean dose: 29 CFR 1910.95 App. A
    d = np.mean([100 / _t_osha(L) * 8 for L in (84, 90, 86)])
    assert pp.loc["E001", "twa"] == pytest.approx(16.61 * math.log10(d / 100) + 90, abs=0.01)
    assert bool(pp.loc["E001", "exposed"]) is True
    assert pp.loc["E001", "first_exposed_date"] == pd.Timestamp("2025-02-01")
    # E002 has no measurement: the group's figures, first exposure not before the hire date
    assert pp.loc["E002", "source"] == "group"
    assert pp.loc["E002", "first_exposed_date"] == pd.Timestamp("2025-06-01")
    assert pp.loc["E003", "source"] == "none" and bool(pp.loc["E003", "exposed"]) is False
    assert pd.isna(pp.loc["E003", "first_exposed_date"])
    # weekly LEX,w over two days of one week (ISO 1999:1990 3.6 note 2): 10 lg[(10^8.4 + 10^9)/5]
    w = r.weekly
    assert len(w) == 1 and w.iloc[0]["n_days"] == 2
    assert w.iloc[0]["lex_w"] == pytest.approx(10 * math.log10((10 ** 8.4 + 10 ** 9.0) / 5))
    assert w.iloc[0]["week_start"] == pd.Timestamp("2025-03-10")
    # G2 was never measured: a survey action; 29 CFR 1910.95(d)(1)
    a = r.actions
    row = a[(a["subject"] == "G2") & (a["kind"] == "exposure survey")]
    assert len(row) == 1 and "1910.95(d)" in row.iloc[0]["clause"]
    g = r.groups.set_index("group")
    assert bool(g.loc["G2", "stale"]) and g.loc["G2", "strategy"] == "none"


def test_stale_group_and_limit_actions(tmp_path: Path) -> None:
    noise = [{"measurement_id": f"M{i}", "date": "2021-05-01", "kind": "personal",
              "person_id": "E001" if i % 2 else "E002", "duration_h": 8, "laeq": 95.0 + i % 3,
              "lcpeak": 141.0 if i == 0 else 120.0} for i in range(5)]
    p = _load(tmp_path, {"noise.csv": noise, "groups.csv": [{"group": "G1"}]},
              config={"exposure": {"stale_after_years": 3}})
    r = ex.compute(p)
    g = r.groups.set_index("group").loc["G1"]
    assert bool(g["stale"]) is True and g["last_measured"] == pd.Timestamp("2021-05-01")
    assert g["max_lcpeak"] == 141.0
    kinds = set(r.actions["kind"])
    assert {"exposure survey", "noise controls", "peak level"} <= kinds
    due = r.actions[r.actions["kind"] == "exposure survey"]["due_date"].iloc[0]
    assert due.year == 2024
    # 29 CFR 1910.95 Table G-16 footnote: 140 dB peak
    assert r.measurements.set_index("measurement_id").loc["M0", "peak_flag_osha-1910.95"] == "limit"


def test_group_with_few_samples_is_warned(tmp_path: Path) -> None:
    noise = [{"measurement_id": f"M{i}", "date": "2025-05-01", "kind": "personal", "person_id": "E001",
              "duration_h": 1, "laeq": 85.0 + i} for i in range(3)]
    noise[0].update({f"oct_{f}": 80.0 for f in (63, 125, 250, 500, 1000, 2000, 4000, 8000)})
    p = _load(tmp_path, {"noise.csv": noise, "groups.csv": [{"group": "G1"}]})
    r = ex.compute(p)
    keys = {f.key for f in r.findings}
    # ISO 9612:2009 10.3 (N >= 5) and Table 1 (5 h minimum for up to 5 workers)
    assert "job-few-samples" in keys and "job-short-duration" in keys
    assert "octave-laeq-mismatch" in keys
    # every finding names its line, so the build can sort them with the reader's findings
    assert all(isinstance(f.row, int) for f in r.findings)
    assert sorted(r.findings)[0].path == "data/noise.csv"
    g = r.groups.set_index("group").loc["G1"]
    # N = 3: Table C.4 row 3, u1 = 1.0 -> 1.6 dB
    assert g["c1u1"] == pytest.approx(1.6)


def test_noise_map_idw(tmp_path: Path) -> None:
    pts = [(0, 0, 80.0), (10, 0, 90.0), (0, 10, 85.0), (10, 10, 95.0)]
    noise = [{"measurement_id": f"A{i}", "date": "2025-04-01", "kind": "area", "group": "G1", "duration_h": 0.5,
              "laeq": L, "x_m": x, "y_m": y, "location": f"spot {i}"} for i, (x, y, L) in enumerate(pts)]
    p = _load(tmp_path, {"noise.csv": noise}, config={"exposure": {"map_grid": 11}})
    nm = ex.compute(p).noise_map
    assert nm.z.shape == (11, 11) and len(nm.points) == 4
    assert np.nanmin(nm.z) >= 80.0 - 1e-9 and np.nanmax(nm.z) <= 95.0 + 1e-9
    gx, gy, z = ex.idw_grid([0, 10], [0, 0], [80, 90], 3)
    # inverse-distance weighting (common practice): exact at the points, the mean half-way
    assert z[1, 0] < z[1, 1] < z[1, 2]
    # half-way between two points the weights are equal: the arithmetic mean of the dB values
    assert z[1, 1] == pytest.approx(85.0)


def test_idw_weights() -> None:
    # inverse-distance weighting (common practice): weights 1/d^2 of the distances to the points
    gx, gy, z = ex.idw_grid([0.0, 10.0, 5.0], [0.0, 0.0, 10.0], [80.0, 90.0, 70.0], 2)
    # the grid spans the points padded by 5 % on each side
    x = np.array([0.0, 10.0, 5.0])
    gx2 = np.linspace(x.min() - 0.5, x.max() + 0.5, 2)
    assert gx == pytest.approx(gx2)
    d = np.hypot(gx[0] - x, gy[0] - np.array([0.0, 0.0, 10.0]))
    w = 1 / d ** 2
    assert z[0, 0] == pytest.approx((w * [80, 90, 70]).sum() / w.sum())


# ---------------------------------------------------------------------------------------
# pages


def test_pages_build_with_codes_and_suppression(tmp_path: Path) -> None:
    from generator import build, site
    from generator.pages import exposure as pages

    people = [{"person_id": f"EMP{i:03d}", "group": "BIG", "name": f"Quill Person {i}"} for i in range(6)]
    people.append({"person_id": "EMP900", "group": "TINY", "name": "Quill Loner"})
    noise = [{"measurement_id": f"M{i}", "date": f"2025-04-0{i + 1}", "kind": "personal", "person_id": f"EMP{i:03d}",
              "duration_h": 8, "laeq": 84.0 + i, "lcpeak": 120.0} for i in range(6)]
    noise.append({"measurement_id": "T1", "date": "2025-04-02", "kind": "personal", "person_id": "EMP900",
                  "duration_h": 8, "laeq": 97.3})
    noise += [{"measurement_id": f"A{i}", "date": "2025-04-01", "kind": "area", "group": "BIG", "duration_h": 1,
               "laeq": 80.0 + 3 * i, "x_m": 5.0 * i, "y_m": 2.0 * (i % 2), "location": f"bench of EMP00{i}"}
              for i in range(3)]
    p = _load(tmp_path, {"people.csv": people, "noise.csv": noise, "groups.csv": [{"group": "BIG"}, {"group": "TINY"}],
                         "noise_logs/M0.csv": _log_csv([84.0] * 480)},
              config={"privacy": {"min_group_size": 3}})
    ctx = build.make_context(p, build.compute(p))
    assert "TINY" in ctx.suppressed_groups
    built = pages.build(ctx)
    slugs = [pg.slug for pg in built]
    assert slugs == ["exposure", "exposure/big", "exposure/tiny", "noise-map"]
    ids = [c.id for pg in built for c in pg.charts]
    assert len(ids) == len(set(ids)) and "exposure-1" in ids and "exposure-big-1" in ids and "noise-map-1" in ids
    env = site.make_environment(None)
    common = {"site": site.site_info(ctx), "cautions": site.cautions_for(ctx.rules)}
    html = {pg.slug: site.render_page(env, pg, common, built) for pg in built}
    for text in html.values():
        assert "EMP0" not in text and "EMP900" not in text and "Quill" not in text
    assert "suppressed" in html["exposure/tiny"] and "97.3" not in html["exposure/tiny"]
    assert "97.3" not in html["exposure"]
    assert ctx.code("EMP001") in html["exposure/big"]
    assert "for orientation only" in html["noise-map"]
    # free text naming a person is shown with the person's code
    assert f"bench of {ctx.code('EMP002')}" in html["noise-map"]
    # every chart has its data table and a summary sentence
    assert all(c.summary and c.table.columns for pg in built for c in pg.charts)


def test_osha_limit_band_uses_the_pel_dose(tmp_path: Path) -> None:
    # 29 CFR 1910.95 App. A: 4 h at 93 dB (T = 5.28 h) + 4 h at 88 dB (T = 10.56 h) -> 113.7 %, TWA 90.9;
    # counting only levels >= 90 dB (OSHA Technical Manual, common practice): 75.8 %, TWA 88.0 -> below the PEL
    noise = [{"measurement_id": "L1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 91.2}]
    p = _load(tmp_path, {"noise.csv": noise, "groups.csv": [{"group": "G1"}],
                         "noise_logs/L1.csv": _log_csv([93.0] * 240 + [88.0] * 240)})
    r = ex.compute(p)
    m = r.measurements.set_index("measurement_id").loc["L1"]
    t93, t88 = (_t_osha(L) for L in (93, 88))
    assert m["osha_dose_pct"] == pytest.approx(100 * (4 / t93 + 4 / t88), rel=1e-9)
    assert m["osha_pel_dose_pct"] == pytest.approx(100 * 4 / t93, rel=1e-9)
    assert m["osha_twa"] == pytest.approx(90.9, abs=0.05)
    assert m["limit_twa_osha-1910.95"] == pytest.approx(88.0, abs=0.05)
    assert m["band_osha-1910.95"] == "85–90"
    g = r.groups.set_index("group").loc["G1"]
    assert g["band_osha-1910.95"] == "85–90" and g["osha_twa"] == pytest.approx(90.9, abs=0.05)
    assert not (r.actions["kind"] == "noise controls").any()


def test_several_logs_in_any_row_order(tmp_path: Path) -> None:
    # common practice: each log's figures are its own, whatever the order of rows and files
    noise = [{"measurement_id": "Z9", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 1200 / 3600, "laeq": 90.0},
             {"measurement_id": "A1", "date": "2025-03-11", "kind": "personal", "person_id": "E002",
              "duration_h": 700 / 3600, "laeq": 80.0}]
    z = [90.0] * 600 + [96.0] * 600
    a = [80.0] * 350 + [70.0] * 350
    p = _load(tmp_path, {"noise.csv": noise, "noise_logs/Z9.csv": _log_csv(z, step_s=1),
                         "noise_logs/A1.csv": _log_csv(a, "2025-03-11T07:00:00", step_s=1)})
    r = ex.compute(p)
    m = r.measurements.set_index("measurement_id")
    assert m.loc["Z9", "laeq"] == pytest.approx(_leq(z))
    assert m.loc["A1", "laeq"] == pytest.approx(_leq(a))
    for mid, levels, t0 in (("Z9", z, "2025-03-10 06:00:00"), ("A1", a, "2025-03-11 07:00:00")):
        h = r.logs[mid]
        assert h["n"].sum() == len(levels) and len(h) <= ex.LOG_POINTS
        assert h["lmax"].max() == max(levels) and h["start"].iloc[0] == pd.Timestamp(t0)
        assert h["start"].is_monotonic_increasing
        assert _leq(h["laeq"], h["n"]) == pytest.approx(_leq(levels))
    # NIOSH 98-126 (85 dBA, 3 dB): 600 s at 90 and 600 s at 96 (threshold 80 dBA)
    t = 600 / 3600
    assert m.loc["Z9", "niosh_dose_pct"] == pytest.approx(100 * t * (2 ** (5 / 3) + 2 ** (11 / 3)) / 8)


def test_quiet_group_still_gives_people_a_source(tmp_path: Path) -> None:
    # 29 CFR 1910.95(d)(2)(i): below 80 dB nothing counts in the OSHA dose, yet the group has a LEX,8h
    noise = [{"measurement_id": "Q1", "date": "2025-03-10", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": 70.0}]
    p = _load(tmp_path, {"noise.csv": noise, "groups.csv": [{"group": "G1"}]})
    r = ex.compute(p)
    pp = r.people.set_index("person_id")
    assert pp.loc["E002", "source"] == "group" and pp.loc["E002", "lex_8h"] == pytest.approx(70.0)
    # an LAeq assumed steady gives an estimate with no threshold: 70 dB(A) for 8 h is a TWA of 70
    # (29 CFR 1910.95 App. A, T = 8/2^((70-90)/5) = 128 h, D = 100·8/128 = 6.25 %)
    assert pp.loc["E002", "twa"] == pytest.approx(70.0) and not bool(pp.loc["E002", "exposed"])
    g = r.groups.set_index("group").loc["G1"]
    assert g["band_osha-1910.95"] == "below 85" and g["band_eu-2003-10"] == "below 80"
    assert r.measurements.iloc[0]["osha_dose_pct"] == pytest.approx(6.25)
    assert bool(r.measurements.iloc[0]["dose_estimate"])


def _group_page_programme(tmp_path: Path):
    # 3 measurements in 2024 and 127 in 2025 in group G1; six 8-h logs at different steady levels
    noise = [{"measurement_id": f"Y{i}", "date": f"2024-05-0{i + 1}", "kind": "personal", "person_id": "E001",
              "duration_h": 8, "laeq": L} for i, L in enumerate([84.0, 88.0, 91.0])]
    start = pd.Timestamp("2025-01-02")
    noise += [{"measurement_id": f"M{i:03d}", "date": (start + pd.Timedelta(days=2 * i)).strftime("%Y-%m-%d"),
               "kind": "personal", "person_id": "E002", "duration_h": 8, "laeq": 85.0} for i in range(127)]
    files: dict[str, Any] = {"noise.csv": noise, "groups.csv": [{"group": "G1", "shift_hours": 8}]}
    log_levels = {"M010": 100.0, "M020": 98.0, "M030": 96.0, "M040": 94.0, "M050": 92.0, "M060": 90.0}
    for mid, L in log_levels.items():
        day = noise[3 + int(mid[1:])]["date"]
        files[f"noise_logs/{mid}.csv"] = _log_csv([L] * 479 + [L + 5.0], start=f"{day}T06:00:00")
    return _load(tmp_path, files)


def test_group_page_stays_small_and_aggregates(tmp_path: Path) -> None:
    from generator import build, site
    from generator.pages import exposure as pages

    p = _group_page_programme(tmp_path)
    ctx = build.make_context(p, build.compute(p))
    built = {pg.slug: pg for pg in pages.build(ctx)}
    pg = built["exposure/g1"]
    c = pg.context
    # the measurement table shows the most recent MEASUREMENT_ROWS rows, newest first
    rows = c["measurement_table"].rows
    assert len(rows) == pages.MEASUREMENT_ROWS == 100
    assert rows[0][0] == "2025-09-11" and rows[0][1] == "M126" and rows[-1][1] == "M027"
    assert c["n_measurements"] == 130
    # at most HISTORY_CHARTS time histories: the logs with the highest OSHA dose, 100 dB first
    titles = [ch.title for ch in pg.charts]
    assert [t.split(":")[0] for t in titles] == [f"Time history of measurement M0{i}0" for i in (1, 2, 3, 4)]
    for ch in pg.charts:
        assert len(ch.figure.data[0]["x"]) <= pages.HISTORY_POINTS and len(ch.table.rows) <= pages.HISTORY_POINTS
    # the other logs are listed: highest dose first, with the highest logged interval (the +5 dB minute)
    lt = c["logged_table"]
    assert [r[0] for r in lt.rows] == ["M050", "M060"]
    assert lt.rows[0][-1] == "97.0" and lt.rows[1][-1] == "95.0"
    # 29 CFR 1910.95 App. A: 8 h at 92 dB, T = 6.06 h -> 132 % (the last minute at 97 dB adds 0.48 %)
    osha = lt.columns.index("OSHA dose, %")
    assert float(lt.rows[0][osha]) == pytest.approx(100 * (479 / 60 / _t_osha(92) + 1 / 60 / _t_osha(97)), abs=0.5)
    # per year: energy mean of the personal LEX,8h (ISO 9612:2009 energy average, 10 lg(1/N Σ 10^(0.1 L)));
    # 84, 88, 91 dB -> 88.5 dB (by hand); OSHA action level 85 dB TWA (29 CFR 1910.95(c)(1)): 2 of 3
    yt = {r[0]: r for r in c["yearly_table"].rows}
    assert yt["2024"][1:] == ["3", "3", "88.5", "84.0", "91.0", "67"]
    assert float(yt["2024"][3]) == pytest.approx(_leq([84, 88, 91]), abs=0.05)
    assert yt["2025"][1] == "127"
    env = site.make_environment(None)
    html = site.render_page(env, pg, {"site": site.site_info(ctx), "cautions": site.cautions_for(ctx.rules)},
                            list(built.values()))
    assert "Showing the 100 most recent of 130 measurements" in html and "exposure_results.csv" in html
    assert "The 4 with the highest OSHA dose are drawn below" in html


def test_coarsened_history_keeps_energy_and_maximum() -> None:
    from generator.pages.exposure import coarsen_history

    rng = np.random.default_rng(7)
    n = rng.integers(1, 5, 497)
    h = pd.DataFrame({"start": pd.date_range("2025-03-10 06:00", periods=497, freq="min"),
                      "laeq": np.round(rng.uniform(70, 105, 497), 1), "n": n})
    h["lmax"] = h["laeq"] + rng.uniform(0, 6, 497)
    c = coarsen_history(h, 300)
    assert len(c) <= 300 and c["n"].sum() == n.sum()
    # time-averaged level, IEC 61672-1:2013 3.9: weighting each point by its intervals keeps the LAeq
    assert _leq(c["laeq"], c["n"]) == pytest.approx(_leq(h["laeq"], h["n"]), abs=1e-9)
    assert c["lmax"].max() == pytest.approx(h["lmax"].max()) and c["start"].iloc[0] == h["start"].iloc[0]
    assert coarsen_history(h.head(200), 300).equals(h.head(200))


def test_log_peak_is_the_frames_lmax_max():
    """LogHistories.peak(mid) equals the maximum pandas finds in the log's frame (NaN skipped,
    NaN when no bin has one), for every log of a random binned history."""
    from generator.exposure import LogHistories
    rng = np.random.default_rng(11)
    nbins = np.array([3, 1, 4, 2, 0 + 2])
    first = np.r_[0, np.cumsum(nbins)[:-1]]
    n = int(nbins.sum())
    lmax = rng.uniform(80, 120, n)
    lmax[[0, 3]] = np.nan  # a log with one NaN bin and a log whose only bin is NaN
    hist = LogHistories(["A", "B", "C", "D", "E"], first, nbins, np.arange(n, dtype=np.int64) * 60_000_000_000,
                        rng.uniform(1e8, 1e9, n), lmax, np.ones(n))
    for mid in hist:
        want = hist[mid]["lmax"].max()
        got = hist.peak(mid)
        assert (np.isnan(got) and np.isnan(want)) or got == want
    assert np.isnan(hist.peak("B"))
