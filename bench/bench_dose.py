"""Time dose, TWA and Leq over millions of logged samples and print samples per second.

Usage: python bench/bench_dose.py [--samples N] [--logs K]
"""
from __future__ import annotations

import argparse
import logging
import time

import numpy as np

from generator import levels as lv

log = logging.getLogger("bench_dose")

#: (name, criterion level, criterion hours, exchange rate, threshold) of the doses computed
RULES = (("osha", 90.0, 8.0, 5.0, 80.0), ("osha_pel", 90.0, 8.0, 5.0, 90.0), ("niosh", 85.0, 8.0, 3.0, 80.0))


def run(samples: int, logs: int, seed: int = 1) -> dict[str, float]:
    """Return timings (s) and throughput of dose + Leq over *samples* samples in *logs* logs."""
    rng = np.random.default_rng(seed)
    levels = np.round(rng.normal(86.0, 6.0, samples), 1)
    ids = np.sort(rng.integers(0, logs, samples))
    step_h = np.full(samples, 1.0 / 3600.0)  # 1-s intervals
    t0 = time.perf_counter()
    hours = np.bincount(ids, weights=step_h, minlength=logs)
    leq = lv.grouped_db_mean(levels, ids, logs, weights=step_h)
    doses = {}
    for name, lc, tc, q, thr in RULES:
        d = lv.grouped_dose_pct(levels, step_h, ids, logs, lc, tc, q, thr)
        doses[name] = d
        lv.twa_from_dose(d, lc, q)
    lv.lex_8h(leq, hours)
    dt = time.perf_counter() - t0
    return {"samples": samples, "logs": logs, "seconds": dt, "samples_per_second": samples / dt,
            "mean_leq": float(np.mean(leq)), "mean_osha_dose": float(np.mean(doses["osha"]))}


def main() -> None:
    """Parse the arguments, run the benchmark and print the result."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=5_000_000)
    ap.add_argument("--logs", type=int, default=200)
    args = ap.parse_args()
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    run(10_000, 4)  # warm up
    r = run(args.samples, args.logs)
    log.info("%d samples in %d logs: Leq + 3 doses + TWA in %.3f s = %.2f million samples/s",
             r["samples"], r["logs"], r["seconds"], r["samples_per_second"] / 1e6)


if __name__ == "__main__":
    main()
