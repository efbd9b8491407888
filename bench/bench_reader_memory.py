"""Peak memory of ``hcpsite check`` per byte of a pathological data file.

Writes a small demo programme (``generator.demo.write_demo``), then copies of it in which
one data file is grown to ``--mib`` MiB of cells that cost the reader the most memory for
their size (commas: every comma is a cell), and runs ``hcpsite check`` on each in its own
subprocess (peak RSS from ``os.wait4``). For each case it prints the file's size, the peak
RSS, the peak over the unmodified programme's, and that excess divided by the size of the
grown file: the reader's bytes of memory per input byte.

  people-blank-cells   people.csv: the known cells, then ~1,000 empty cells under blank headers
  people-ragged        people.csv: the known rows, then rows of ~5,000 empty cells (ragged, not read)
  audiograms-unknown   audiograms.csv with ~1,000 extra named (unknown) columns, cells empty
  audiograms-unknown-1 the same with every unknown cell "1"
  logs-commas          noise logs: the samples, then lines of many empty cells (ragged)

    python bench/bench_reader_memory.py                  # 100 MiB per case
    python bench/bench_reader_memory.py --mib 20 --only people-ragged
    python bench/bench_reader_memory.py --max-ratio 6   # exit 1 when a case needs more

Target (bench/README.md): at most 6 bytes of memory per input byte on every case.
"""
from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

MAX_BYTES_PER_BYTE = 6.0
CASES = ("people-blank-cells", "people-ragged", "audiograms-unknown", "audiograms-unknown-1", "logs-commas")


def _grow(lines: list[bytes], target: int, make) -> bytes:  # type: ignore[no-untyped-def]
    """Return *lines* followed by make(i) for i = 0, 1, ... until *target* bytes are reached."""
    out = bytearray(b"".join(lines))
    i = 0
    while len(out) < target:
        out += make(i)
        i += 1
    return bytes(out)


def write_case(base: Path, folder: Path, case: str, size: int) -> Path:
    """Copy the programme *base* into *folder* and grow one of its files for *case*; return that file."""
    shutil.copytree(base, folder)
    data = folder / "data"
    if case.startswith("people"):
        path = data / "people.csv"
        lines = path.read_bytes().splitlines(keepends=True)
        body = lines[1:]
        if case == "people-blank-cells":
            extra = b"," * 1000
            head = [lines[0].rstrip(b"\n") + extra + b"\n"] + [x.rstrip(b"\n") + extra + b"\n" for x in body]
            tmpl = body[0].rstrip(b"\n").split(b",", 1)[1]

            def make(i: int) -> bytes:
                return b"X%07d," % i + tmpl + extra + b"\n"
            path.write_bytes(_grow(head, size, make))
        else:
            row = b"Z," + b"," * 5000 + b"\n"
            path.write_bytes(_grow(lines, size, lambda i: row))
        return path
    if case.startswith("audiograms"):
        path = data / "audiograms.csv"
        lines = path.read_bytes().splitlines(keepends=True)
        k = 1000
        cell = b"1" if case.endswith("-1") else b""
        head = lines[0].rstrip(b"\n") + b"".join(b",x%04d" % j for j in range(k)) + b"\n"
        tail = (b"," + cell) * k + b"\n"
        body = [x.rstrip(b"\n") + tail for x in lines[1:]]
        tmpl = [x.split(b",", 2)[2] for x in body]

        def make(i: int) -> bytes:  # new people's tests: the ids are unknown (one error each row)
            return b"Y%07d,2020-01-%02d," % (i // 2, 1 + i % 28) + tmpl[i % len(tmpl)]
        path.write_bytes(_grow([head] + body, size, make))
        return path
    logs = sorted((data / "noise_logs").glob("*.csv"))
    path = logs[0]
    lines = path.read_bytes().splitlines(keepends=True)
    row = b"," * 1000 + b"\n"
    path.write_bytes(_grow(lines, size, lambda i: row))
    return path


def run_check(folder: Path, env: dict[str, str]) -> tuple[int, float, float, int]:
    """Run ``hcpsite check`` on *folder*; return (peak RSS bytes, CPU s, wall s, exit code)."""
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", "import sys; from generator.cli import main; sys.exit(main())",
                             "check", str(folder)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
    _, status, usage = os.wait4(proc.pid, 0)
    return (int(usage.ru_maxrss) * 1024, usage.ru_utime + usage.ru_stime, time.perf_counter() - t0,
            os.waitstatus_to_exitcode(status))


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--mib", type=float, default=100.0, help="size of the grown file (default 100)")
    ap.add_argument("--only", action="append", choices=CASES, help="run only this case (repeatable)")
    ap.add_argument("--workdir", type=Path, help="keep the programmes here")
    ap.add_argument("--max-ratio", type=float, default=MAX_BYTES_PER_BYTE,
                    help=f"exit 1 when a case needs more bytes per input byte (default {MAX_BYTES_PER_BYTE})")
    ap.add_argument("--json", type=Path, help="write the numbers as JSON")
    args = ap.parse_args(argv)
    env = dict(os.environ)
    env.setdefault("SOURCE_DATE_EPOCH", "1767225600")
    env.setdefault("HCPSITE_ID_KEY", "bench-key")
    repo = Path(__file__).resolve().parent.parent
    env["PYTHONPATH"] = str(repo) + os.pathsep + env.get("PYTHONPATH", "")
    work = args.workdir or Path(tempfile.mkdtemp(prefix="hcpsite-readmem-"))
    work.mkdir(parents=True, exist_ok=True)
    base = work / "base"
    if not base.exists():
        sys.path.insert(0, str(repo))
        from generator.demo import write_demo
        write_demo(base, people=200)
    size = int(args.mib * 1024 * 1024)
    rss0, cpu0, _, _ = run_check(base, env)
    print(f"{'case':22} {'file MiB':>9} {'peak MiB':>9} {'excess MiB':>10} {'B/B':>6} {'CPU s':>6} exit")
    print(f"{'(unmodified)':22} {'':>9} {rss0 / 2**20:9.0f} {'':>10} {'':>6} {cpu0:6.1f}")
    out = {"baseline_rss_bytes": rss0, "cases": {}}
    worst = 0.0
    for case in args.only or CASES:
        folder = work / case
        if folder.exists():
            shutil.rmtree(folder)
        path = write_case(base, folder, case, size)
        nbytes = path.stat().st_size
        rss, cpu, wall, code = run_check(folder, env)
        ratio = (rss - rss0) / nbytes
        worst = max(worst, ratio)
        print(f"{case:22} {nbytes / 2**20:9.1f} {rss / 2**20:9.0f} {(rss - rss0) / 2**20:10.0f} {ratio:6.2f} "
              f"{cpu:6.1f} {code}")
        out["cases"][case] = {"file_bytes": nbytes, "peak_rss_bytes": rss, "bytes_per_byte": ratio,
                              "cpu_seconds": cpu, "wall_seconds": wall, "exit_code": code}
        if not args.workdir:
            shutil.rmtree(folder)
    if args.json:
        args.json.write_text(json.dumps(out, indent=2) + "\n", encoding="utf-8")
    if not args.workdir:
        shutil.rmtree(work)
    ok = worst <= args.max_ratio
    print(f"worst: {worst:.2f} bytes of memory per input byte (target <= {args.max_ratio:g}): "
          f"{'ok' if ok else 'MISSED'}")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
