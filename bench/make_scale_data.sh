#!/usr/bin/env bash
# Write the synthetic scale programmes used for benchmarks (invented workplace).
#   bench/make_scale_data.sh [OUT_DIR]   -> OUT_DIR/scale-20k and OUT_DIR/scale-40k
# 20,000 positions over 15 years give about 310,000 audiograms per ear, 41,000 noise
# measurements and 2,000 logged full-shift time histories; 40,000 positions twice that.
set -euo pipefail
out="${1:-${TMPDIR:-/tmp}/hcpsite-scale}"
python="${PYTHON:-python}"
mkdir -p "$out"
for people in 20000 40000; do
  dir="$out/scale-$((people / 1000))k"
  "$python" - "$dir" "$people" <<'PY'
import sys
import time

from generator.demo import write_demo

t0 = time.perf_counter()
counts = write_demo(sys.argv[1], people=int(sys.argv[2]), years=15)
print(f"{sys.argv[1]}: {counts} in {time.perf_counter() - t0:.1f} s")
PY
done
