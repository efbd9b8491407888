"""Compute ISO 9612, ISO 1999 and ISO 7029 figures with phonometry (the tests' independent oracle).

Run by tests/test_oracle.py under a Python 3.13+ interpreter that has phonometry installed
(phonometry needs 3.13; ``python3 .ci/environments.py --oracle`` makes one in .venvs/oracle).
Reads the cases as JSON on stdin, writes phonometry's results as JSON on stdout. This file
never imports the project; the project never imports phonometry.

Fractiles: phonometry's ``fractile`` is the share of the population with *better* hearing
(z = Φ⁻¹(fractile)); the caller passes 1 − q for the project's q (share with worse hearing).
"""
from __future__ import annotations

import json
import sys
import warnings

import phonometry
from phonometry.hearing.noise_induced_hearing_loss import combine_age_and_noise, htlan, nipts
from phonometry.hearing.occupational_exposure import (Task, full_day_exposure, job_based_exposure,
                                                      table_c4_contribution, task_based_exposure)
from phonometry.hearing.threshold import age_threshold

INSTRUMENT = {1: "class1", 2: "class2"}


def _sampled(case: dict, fn) -> dict:
    r = fn(case["levels"], case["te_h"], instrument=INSTRUMENT[case["instrument_class"]], u3=1.0, warn=False)
    return {"lex_8h": r.lex_8h, "lp_aeqte": r.lp_aeqte, "u1": r.u1, "c1u1": r.c1u1, "u2": r.u2,
            "u": r.combined_standard_uncertainty, "U": r.expanded_uncertainty}


def _task(case: dict) -> dict:
    tasks = [Task(samples=tuple(t["levels"]), duration_hours=sum(t["hours"]) / len(t["hours"]),
                  duration_range=(min(t["hours"]), max(t["hours"])), label=t["task"],
                  instrument=INSTRUMENT[t["instrument_class"]]) for t in case["tasks"]]
    r = task_based_exposure(tasks, u3=1.0, include_duration_uncertainty=case["include_duration"], warn=False)
    return {"lex_8h": r.lex_8h, "u": r.combined_standard_uncertainty, "U": r.expanded_uncertainty,
            "tasks": [{"task": c.label, "lp_aeq": c.lp_aeqt, "lex_8h_m": c.lex_8h_contribution, "u1a": c.u1a,
                       "c1a": c.c1a, "c1b": c.c1b, "u1b": c.u1b, "u2": c.u2} for c in r.tasks]}


def _age(case: dict) -> dict:
    r = age_threshold(case["age"], case["sex"], fractile=case["fractile"], frequencies=[case["freq"]])
    return {"threshold": float(r.threshold[0]), "median": float(r.median[0]),
            "su": float(r.spread_upper[0]), "sl": float(r.spread_lower[0])}


def _nipts(case: dict) -> dict:
    r = nipts(case["lex_8h"], case["years"], fractile=case["fractile"], frequencies=[case["freq"]])
    return {"value": float(r.value[0]), "median": float(r.median[0])}


def _htlan(case: dict) -> dict:
    r = htlan(case["age"], case["sex"], case["lex_8h"], case["years"], fractile=case["fractile"],
              frequencies=[case["freq"]])
    return {"threshold": float(r.threshold[0]), "htla": float(r.htla[0]), "nipts": float(r.nipts[0])}


HANDLERS = {
    "job": lambda c: _sampled(c, job_based_exposure),
    "full_day": lambda c: _sampled(c, full_day_exposure),
    "task": _task,
    "c4": lambda c: {"c1u1": table_c4_contribution(c["n"], c["u1"])},
    "age": _age,
    "nipts": _nipts,
    "htlan": _htlan,
    "combine": lambda c: {"h_prime": float(combine_age_and_noise(c["h"], c["n"]))},
}


def main() -> int:
    cases = json.load(sys.stdin)
    out = {"phonometry": phonometry.__version__}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # advisories about sampling and validated ranges
        for kind, items in cases.items():
            out[kind] = [HANDLERS[kind](c) for c in items]
    json.dump(out, sys.stdout)
    return 0


if __name__ == "__main__":
    sys.exit(main())
