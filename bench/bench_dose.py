"""Time dose, TWA and Leq over millions of logged samples and print samples per second.

Two timings: the level arithmetic alone (generator.levels over one concatenated array)
and the whole exposure stage (generator.exposure.compute) on an in-memory programme of an
invented workplace whose measurements all carry logged time histories.

Usage: python bench/bench_dose.py [--samples N] [--logs K]
"""
from __future__ import annotations

import argparse
import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from generator import exposure, levels as lv
from generator.config import Config
from generator.findings import Findings
from generator.inputs import spec
from generator.inputs.reader import empty_table
from generator.model import Programme

log = logging.getLogger("bench_dose")

#: (name, criterion level, criterion hours, exchange rate, threshold) of the doses computed
RULES = (("osha", 90.0, 8.0, 5.0, 80.0), ("osha_pel", 90.0, 8.0, 5.0, 90.0), ("niosh", 85.0, 8.0, 3.0, 80.0))


def arithmetic(samples: int, logs: int, seed: int = 1) -> dict[str, float]:
    """Return timing (s) and throughput of dose + Leq over *samples* samples in *logs* logs."""
    rng = np.random.default_rng(seed)
    levels = np.round(rng.normal(86.0, 6.0, samples), 1)
    ids = np.sort(rng.integers(0, logs, samples))
    step_h = np.full(samples, 1.0 / 3600.0)  # 1-s intervals
    t0 = time.perf_counter()
    hours = np.bincount(ids, weights=step_h, minlength=logs)
    leq = lv.grouped_db_mean(levels, ids, logs, weights=step_h)
    for _name, lc, tc, q, thr in RULES:
        d = lv.grouped_dose_pct(levels, step_h, ids, logs, lc, tc, q, thr)
        lv.twa_from_dose(d, lc, q)
    lv.lex_8h(leq, hours)
    dt_s = time.perf_counter() - t0
    return {"seconds": dt_s, "samples_per_second": samples / dt_s}


def programme(samples: int, logs: int, seed: int = 2) -> Programme:
    """Return an in-memory programme with *logs* logged personal measurements of about samples/logs seconds."""
    rng = np.random.default_rng(seed)
    per = samples // logs
    tables = {f.name: empty_table(f) for f in spec.FILES}
    people = pd.DataFrame({"person_id": [f"B{i:05d}" for i in range(logs)],
                           "group": [f"G{i % 8}" for i in range(logs)]})
    for c in tables["people"].columns:
        if c not in people:
            people[c] = tables["people"][c].reindex(range(logs)).to_numpy()
    people["_row"] = np.arange(logs) + 2
    tables["people"] = people
    mids = [f"R{i:05d}" for i in range(logs)]
    noise = pd.DataFrame({"measurement_id": mids, "date": pd.Timestamp("2025-03-03") + pd.to_timedelta(
        np.arange(logs) % 200, unit="D"), "kind": "personal", "person_id": people["person_id"],
        "group": people["group"], "location": "", "duration_h": per / 3600.0, "laeq": np.nan})
    for c in tables["noise"].columns:
        if c not in noise:
            noise[c] = tables["noise"][c].reindex(range(logs)).to_numpy()
    noise["_row"] = np.arange(logs) + 2
    tables["noise"] = noise
    logs_d, interval = {}, {}
    for i, m in enumerate(mids):
        start = pd.Timestamp("2025-03-03 06:00") + pd.Timedelta(days=i % 200)
        logs_d[m] = pd.DataFrame({"start": pd.date_range(start, periods=per, freq="s"),
                                  "laeq": np.round(rng.normal(86.0, 6.0, per), 1),
                                  "_row": np.arange(per) + 2})
        interval[m] = 1.0
    # the reported LAeq of each run is its log's energy mean (no mismatch warnings)
    noise["laeq"] = [float(lv.leq(logs_d[m]["laeq"].to_numpy())) for m in mids]
    cfg = Config(compare_rules=["niosh-rel", "eu-2003-10"])
    return Programme(root=Path("."), config=cfg, tables=tables, present={"people": "data/people.csv",
                     "noise": "data/noise.csv"}, noise_logs=logs_d, log_interval_s=interval, pages=[],
                     findings=Findings(), digest="bench")


def pipeline(samples: int, logs: int) -> dict[str, float]:
    """Return timing (s) and throughput of exposure.compute over the logged programme."""
    prog = programme(samples, logs)
    n = sum(len(f) for f in prog.noise_logs.values())
    t0 = time.perf_counter()
    exposure.compute(prog, {})
    dt_s = time.perf_counter() - t0
    return {"samples": n, "seconds": dt_s, "samples_per_second": n / dt_s}


def main() -> None:
    """Parse the arguments, run both benchmarks and log the results."""
    ap = argparse.ArgumentParser(description=(__doc__ or "").splitlines()[0])
    ap.add_argument("--samples", type=int, default=5_000_000)
    ap.add_argument("--logs", type=int, default=200)
    args = ap.parse_args()
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    arithmetic(10_000, 4)  # warm up
    a = arithmetic(args.samples, args.logs)
    log.info("levels: %d samples in %d logs, Leq + 3 doses + TWA in %.3f s = %.2f million samples/s",
             args.samples, args.logs, a["seconds"], a["samples_per_second"] / 1e6)
    p = pipeline(args.samples, args.logs)
    log.info("exposure.compute: %d logged samples in %d measurements, 3 rule sets, in %.3f s = %.2f million "
             "samples/s", p["samples"], args.logs, p["seconds"], p["samples_per_second"] / 1e6)


if __name__ == "__main__":
    main()
