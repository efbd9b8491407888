"""Rules that span stages, checked through the real pipeline (generator/pipeline.py)."""
from __future__ import annotations

import datetime as dt
from pathlib import Path

from generator import pipeline
from generator.build import compute
from generator.inputs.reader import load_programme
from tests.progkit import make_programme

HL = (500, 1000, 2000, 3000, 4000, 6000, 8000)


def _audiogram(pid: str, date: str, kind: str, high: float) -> list[dict]:
    levels = {f"hl_{f}": (high if f in (2000, 3000, 4000) else 10) for f in HL}
    return [{"person_id": pid, "date": date, "ear": ear, "kind": kind, **levels} for ear in "LR"]


def _shift_programme(root: Path) -> Path:
    people = [{"person_id": p, "group": "G1", "sex": "M", "birth_date": "1985-01-01", "hire_date": "2015-01-01"}
              for p in ("S1", "S2")]
    # S1: 2/3/4 kHz average 10 -> 40 dB HL, a shift far beyond any age allowance (29 CFR 1910.95(g)(10));
    # S2: unchanged
    audios = (_audiogram("S1", "2018-03-01", "baseline", 10) + _audiogram("S1", "2025-03-01", "periodic", 40)
              + _audiogram("S2", "2018-03-01", "baseline", 10) + _audiogram("S2", "2025-03-01", "periodic", 10))
    noise = [{"measurement_id": f"M{i}", "date": "2025-02-01", "kind": "personal", "person_id": p, "group": "G1",
              "duration_h": 8, "laeq": 99.0} for i, p in enumerate(("S1", "S2"))]
    protectors = [{"protector_id": "PLUG", "type": "premolded_plug", "nrr": 20}]
    fits = [{"person_id": p, "protector_id": "PLUG", "date": "2025-01-10"} for p in ("S1", "S2")]
    return make_programme(root, files={"people.csv": people, "audiograms.csv": audios, "noise.csv": noise,
                                       "groups.csv": [{"group": "G1"}], "protectors.csv": protectors,
                                       "protector_fits.csv": fits})


def test_stage_order_is_written_once() -> None:
    assert pipeline.STAGE_NAMES == ("exposure", "audiometer checks", "hearing", "protection", "compliance",
                                    "trends")


def test_shift_in_force_lowers_the_protector_target(tmp_path: Path) -> None:
    # 29 CFR 1910.95(j)(2): attenuate to an 8-h TWA of 90 dB; (j)(3): to 85 dB or below for an
    # employee with a standard threshold shift. App. B: 99 dB(A) TWA under a plug of NRR 20
    # gives 99 - (20 - 7) = 86 dB(A): enough without a shift, not enough after one.
    prog = load_programme(_shift_programme(tmp_path / "p"), today=dt.date(2026, 1, 1))
    assert not prog.findings.has_errors()
    results = compute(prog)
    assert "S1" in results.hearing.sts_people and "S2" not in results.hearing.sts_people
    p = results.protection.people.set_index("person_id")
    assert p.loc["S1", "protected_level"] == 86.0
    assert (p.loc["S1", "target"], p.loc["S1", "adequacy"]) == (85.0, "insufficient")
    assert (p.loc["S2", "target"], p.loc["S2", "adequacy"]) == (90.0, "adequate")
    acts = results.compliance.actions
    s1 = acts[acts["subject"].eq("S1") & acts["kind"].eq("protection insufficient")]
    assert len(s1) == 1 and "29 CFR 1910.95(j)(3)" in s1["clause"].iloc[0]
