"""The command line: new, check, build, export, serve, demo; exit codes; export format."""
from __future__ import annotations

import csv
import io
import json
import subprocess
import sys
import threading
import time
import urllib.request
from pathlib import Path

import pandas as pd
import pytest

from generator.cli import main
from generator.export import frame_to_csv, neutralise
from tests.conftest import REPO, TEST_KEY, env
from tests.progkit import make_programme

FINDING_LINE = r"^[^:\n]+:\d*:[^:\n]*: (error|warning): .+$"


def test_new_then_check_passes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    folder = tmp_path / "starter"
    assert main(["new", str(folder)]) == 0
    assert (folder / "programme.yaml").is_file() and (folder / "data" / "people.csv").is_file()
    from generator.config import iter_options
    text = (folder / "programme.yaml").read_text(encoding="utf-8")
    for name, _, _, doc in iter_options():
        assert f"{name.rsplit('.', 1)[-1]}:" in text, name
        assert doc.split(" (one of")[0] in text, name
    from generator.inputs.spec import FILES
    for spec in FILES:
        rows = list(csv.reader(io.StringIO((folder / spec.path).read_text(encoding="utf-8"))))
        assert rows[0] == [c.name for c in spec.columns], spec.name
        assert len(rows) >= 3, spec.name
    capsys.readouterr()
    # the starter as written passes the strict check once the person-code key is set
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["check", str(folder), "--strict"]) == 0
    out, err = capsys.readouterr()
    assert "0 errors, 0 warnings" in err and "internal error" not in err
    assert out.strip() == "", out
    # a second 'new' into the same folder is refused
    assert main(["new", str(folder)]) == 1


def test_check_reports_findings_and_exit_codes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    bad = make_programme(tmp_path / "bad", files={"people.csv": "person_id,group\nE1,G1\nE1,G1\n"})
    assert main(["check", str(bad)]) == 1
    out, err = capsys.readouterr()
    lines = [l for l in out.splitlines() if l.strip()]
    assert lines and all(__import__("re").match(FINDING_LINE, l) for l in lines), out
    assert any(l.startswith("data/people.csv:3:person_id: error:") for l in lines), out
    assert "Traceback" not in out + err and "internal error" not in out + err

    warn = make_programme(tmp_path / "warn", files={"people.csv": "person_id,group,shoe_size\nE1,G1,9\n"})
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["check", str(warn)]) == 0
        out, err = capsys.readouterr()
        assert "shoe_size" in out and "warning" in out
        assert main(["check", str(warn), "--strict"]) == 1
        out, err = capsys.readouterr()
        assert "shoe_size" in out and "internal error" not in err


@pytest.mark.parametrize("argv", [
    ["bogus"], [], ["build"], ["export", "x"], ["serve", "x", "--port", "99999"],
    ["demo", "x", "--people", "0"], ["build", "x", "--no-such-flag"],
])
def test_usage_errors_exit_2(argv: list[str], capsys: pytest.CaptureFixture[str]) -> None:
    assert main(argv) == 2
    out, err = capsys.readouterr()
    assert "Traceback" not in err and "internal error" not in err


def test_missing_programme_folder_is_a_usage_error(tmp_path: Path) -> None:
    assert main(["check", str(tmp_path / "nowhere")]) == 2


def test_build_and_refusals(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = make_programme(tmp_path / "p")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root)]) == 0
        assert (root / "_site" / "index.html").is_file()
        assert main(["build", str(root), "--out", str(root)]) == 1
        assert main(["build", str(root), "--out", str(tmp_path)]) == 1
    out, err = capsys.readouterr()
    assert "output folder cannot" in err and "internal error" not in err
    # --strict: a warning stops the build before anything is written
    (root / "data" / "people.csv").write_text("person_id,group,shoe_size\nE1,G1,9\n", encoding="utf-8")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--strict", "--out", str(tmp_path / "strict")]) == 1
        assert not (tmp_path / "strict").exists()
        assert main(["build", str(root), "--out", str(tmp_path / "lenient")]) == 0
    out, err = capsys.readouterr()
    assert "warnings fail under --strict" in err and "shoe_size" in out


def test_python_dash_m_runs_the_cli() -> None:
    proc = subprocess.run([sys.executable, "-m", "generator", "--version"], capture_output=True, text=True,
                          cwd=REPO, timeout=60)
    assert proc.returncode == 0
    assert proc.stdout.startswith("hcpsite ")


def test_neutralise_formula_cells() -> None:
    # OWASP "CSV Injection": cells starting with = + - @ tab or CR are prefixed with '
    assert neutralise("=HYPERLINK(\"x\")") == "'=HYPERLINK(\"x\")"
    assert neutralise("+1+2") == "'+1+2" and neutralise("@SUM(A1)") == "'@SUM(A1)"
    assert neutralise("\tx") == "'\tx" and neutralise("\rx") == "'\rx" and neutralise("-x") == "'-x"
    assert neutralise("-3.50") == "-3.50" and neutralise("+4") == "+4"  # plain numbers stay numbers
    assert neutralise("plain") == "plain" and neutralise("") == ""


def test_frame_to_csv_fixed_formats() -> None:
    df = pd.DataFrame({"a": [1.0, float("nan"), 2.345], "d": pd.to_datetime(["2025-01-02", None, "2025-03-04"]),
                       "t": ["=cmd", "ok", None], "b": [True, False, True]})
    text = frame_to_csv(df).decode()
    assert text.splitlines() == ["a,d,t,b", "1.00,2025-01-02,'=cmd,true", ",,ok,false", "2.35,2025-03-04,,true"]


def test_export_writes_contract_files(tmp_path: Path) -> None:
    noise = [{"measurement_id": "M1", "date": "2025-03-04", "kind": "personal", "person_id": "E001",
              "group": "G1", "duration_h": 8, "laeq": 88.0},
             {"measurement_id": "M2", "date": "2025-03-05", "kind": "personal", "person_id": "E002",
              "group": "G1", "duration_h": 8, "laeq": 91.0}]
    root = make_programme(tmp_path / "p", files={"noise.csv": noise})
    to = tmp_path / "export"
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["export", str(root), "--to", str(to)]) == 0
        first = {p.name: p.read_bytes() for p in sorted(to.iterdir())}
        assert main(["export", str(root), "--to", str(to)]) == 0
        assert {p.name: p.read_bytes() for p in sorted(to.iterdir())} == first
    assert set(first) >= {"exposure_results.csv", "group_exposure.csv", "hearing_results.csv",
                          "actions.csv", "summary.json"}
    header = lambda name: next(csv.reader(io.StringIO(first[name].decode())))  # noqa: E731
    assert header("exposure_results.csv") == [
        "measurement_id", "person_id", "group", "date", "duration_h", "laeq", "lex_8h", "osha_dose_pct",
        "osha_twa", "osha_pel_dose_pct", "niosh_dose_pct", "niosh_twa", "lcpeak", "basis"]
    assert header("group_exposure.csv")[:7] == ["group", "n_people", "n_samples", "lex_8h", "u_expanded",
                                               "lex_8h_upper", "band"]
    assert header("hearing_results.csv") == [
        "person_id", "ear", "date", "kind", "baseline_date", "avg_234", "shift_234", "shift_234_age_corrected",
        "osha_sts", "osha_sts_age_corrected", "niosh_shift", "recordable"]
    assert header("actions.csv") == ["subject", "kind", "detail", "due_date", "status", "clause", "section"]
    assert "results.xlsx" in first
    rows = list(csv.DictReader(io.StringIO(first["exposure_results.csv"].decode())))
    assert [r["person_id"].startswith("P-") for r in rows] == [True, True]
    # 8 h at 88 dB(A): LEX,8h = LAeq + 10 lg(8/8) = 88.0 (ISO 9612:2009, formula (7))
    assert [r["lex_8h"] for r in rows] == ["88.00", "91.00"]
    summary = first["summary.json"].decode()
    data = json.loads(summary)
    assert summary == json.dumps(data, sort_keys=True, indent=2, ensure_ascii=False) + "\n"
    assert data["people"] == 2 and data["period"] == {"start": "2025-01-01", "end": "2025-12-31"}


def test_serve_builds_serves_and_rebuilds(tmp_path: Path) -> None:
    from generator.serve import HOST, serve
    root = make_programme(tmp_path / "p", pages={"about.md": "---\ntitle: About\n---\nfirst text\n"})
    ready: list[int] = []
    stop = threading.Event()
    with env(HCPSITE_ID_KEY=TEST_KEY):
        t = threading.Thread(target=serve, kwargs=dict(root=root, port=0, on_ready=ready.append, stop=stop,
                                                       max_polls=120), daemon=True)
        t.start()
        try:
            deadline = time.monotonic() + 60
            while not ready and time.monotonic() < deadline:
                time.sleep(0.1)
            assert ready, "server did not start"
            url = f"http://{HOST}:{ready[0]}/about.html"
            assert "first text" in urllib.request.urlopen(url, timeout=10).read().decode()
            time.sleep(1.1)  # a different mtime
            (root / "pages" / "about.md").write_text("---\ntitle: About\n---\nsecond text\n", encoding="utf-8")
            body = ""
            while time.monotonic() < deadline and "second text" not in body:
                time.sleep(0.3)
                body = urllib.request.urlopen(url, timeout=10).read().decode()
            assert "second text" in body
        finally:
            stop.set()
            t.join(timeout=30)
    assert not t.is_alive()


# ---------------------------------------------------------------------------------------
# first contact: what the README's commands leave behind stays out of git

#: files the README's install, build and test commands make in a clone.
ARTEFACTS = ("hcpsite.egg-info/PKG-INFO", "site_example/_site/index.html", "generator/__pycache__/cli.cpython-311.pyc",
             "tests/artifacts/review.pdf", ".venv/bin/python", "build/lib/generator/cli.py", "dist/x.whl",
             ".pytest_cache/README.md", ".hypothesis/examples/x")


def _git(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(["git", *args], cwd=REPO, capture_output=True, text=True, timeout=60, check=False)


@pytest.fixture()
def git_checkout() -> None:
    if not (REPO / ".git").exists() or _git("rev-parse", "--is-inside-work-tree").returncode != 0:
        pytest.skip("not a git checkout (e.g. an unpacked source archive)")


def test_no_build_artefact_is_tracked(git_checkout: None) -> None:
    tracked = _git("ls-files").stdout.splitlines()
    assert tracked, "git ls-files listed nothing"
    bad = [f for f in tracked if ".egg-info/" in f or "__pycache__/" in f or f.endswith(".pyc")
           or "/_site/" in f or f.startswith("_site/") or f.startswith("tests/artifacts/")]
    assert not bad, f"build artefacts are tracked: {bad[:10]}"


def test_gitignore_covers_build_artefacts(git_checkout: None) -> None:
    res = _git("check-ignore", "--no-index", "-v", *ARTEFACTS)
    ignored = {line.rsplit("\t", 1)[-1] for line in res.stdout.splitlines()}
    missing = sorted(set(ARTEFACTS) - ignored)
    assert not missing, f".gitignore does not cover: {missing}"


# ---------------------------------------------------------------------------------------
# --help documents every command, argument and option


def _commands() -> dict[str, "argparse.ArgumentParser"]:
    import argparse

    from generator.cli import make_parser
    parser = make_parser()
    found = {"hcpsite": parser}
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            found.update(action.choices)
    return found


def test_every_command_has_a_description() -> None:
    commands = _commands()
    assert set(commands) == {"hcpsite", "new", "check", "build", "export", "serve", "demo"}
    for name, parser in commands.items():
        assert parser.description and len(parser.description) > 20, f"{name} has no description"
        assert "exit codes" in (parser.epilog or ""), f"{name} --help does not list the exit codes"


def test_every_argument_and_option_has_help_with_its_default() -> None:
    import argparse

    missing, no_default = [], []
    for name, parser in _commands().items():
        formatter = parser._get_formatter()
        for action in parser._actions:
            label = f"{name} {'/'.join(action.option_strings) or action.metavar or action.dest}"
            if not action.help or action.help == argparse.SUPPRESS:
                missing.append(label)
                continue
            text = formatter._expand_help(action)
            if action.default not in (None, False, argparse.SUPPRESS) and not isinstance(action, argparse._HelpAction):
                if f"default: {action.default}" not in text:
                    no_default.append(f"{label}: {text!r}")
            elif action.dest in ("out", "to"):  # a default computed from DIR, or none: the text says which
                if "default" not in text:
                    no_default.append(f"{label}: {text!r}")
    assert not missing, f"arguments and options without a help text: {missing}"
    assert not no_default, f"help texts that do not give the default: {no_default}"


@pytest.mark.parametrize("command", ["new", "check", "build", "export", "serve", "demo"])
def test_help_prints_and_exits_0(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main([command, "--help"]) == 0
    out = capsys.readouterr().out
    assert out.startswith(f"usage: hcpsite {command}") and "DIR" in out and "exit codes" in out


def test_a_full_folder_is_not_a_command_line_mistake(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # exit code 2 is kept for command-line mistakes; the state of the disk is exit code 1
    full = tmp_path / "records"
    full.mkdir()
    (full / "notes.txt").write_text("someone's records\n", encoding="utf-8")
    assert main(["demo", str(full), "--people", "40", "--years", "1"]) == 1
    assert main(["new", str(full)]) == 1
    assert (full / "notes.txt").read_text(encoding="utf-8") == "someone's records\n"
    assert sorted(p.name for p in full.iterdir()) == ["notes.txt"]
    err = capsys.readouterr().err
    assert "Traceback" not in err and "internal error" not in err


def test_garbage_collector_tuned_only_for_the_command_process() -> None:
    # the hcpsite process tunes the collector for itself; main() called from Python leaves it alone
    import gc
    import subprocess
    import sys

    from generator.cli import GC_THRESHOLDS, main

    before = gc.get_threshold()
    assert main(["--version"]) == 0
    assert gc.get_threshold() == before
    code = ("import gc, sys; from generator.cli import main; sys.argv = ['hcpsite', '--version']; "
            "rc = main(); print(gc.get_threshold(), gc.get_freeze_count() > 0, rc)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.strip().splitlines()[-1] == f"{GC_THRESHOLDS} True 0"


@pytest.mark.parametrize("command", ["check", "build", "export"])
def test_command_process_ends_at_once_with_all_its_output(command: str, tmp_path: Path,
                                                          capsys: pytest.CaptureFixture[str]) -> None:
    # the hcpsite process of check, build and export leaves without tearing the interpreter down
    # (cli._leave): the exit code, everything written to stdout and stderr (through pipes, which
    # buffer) and the files are those main() gives when called from Python
    import os

    prog = make_programme(tmp_path / "prog")
    extra = {"check": [], "build": ["--out"], "export": ["--to"]}[command]
    args = [command, str(prog)] + (extra + [str(tmp_path / "in-process")] if extra else [])
    with env(HCPSITE_ID_KEY=TEST_KEY, SOURCE_DATE_EPOCH="1767225600"):
        rc = main(args)
    inner = capsys.readouterr()
    sub_args = [command, str(prog)] + (extra + [str(tmp_path / "own-process")] if extra else [])
    proc = subprocess.run([sys.executable, "-m", "generator", *sub_args], capture_output=True, text=True,
                          env={**os.environ, "HCPSITE_ID_KEY": TEST_KEY, "SOURCE_DATE_EPOCH": "1767225600"})
    assert proc.returncode == rc
    assert proc.stdout == inner.out.replace(str(tmp_path / "in-process"), str(tmp_path / "own-process"))
    assert proc.stderr == inner.err.replace(str(tmp_path / "in-process"), str(tmp_path / "own-process"))
    if extra:
        a, b = tmp_path / "in-process", tmp_path / "own-process"
        names = sorted(p.relative_to(a).as_posix() for p in a.rglob("*") if p.is_file())
        assert names and names == sorted(p.relative_to(b).as_posix() for p in b.rglob("*") if p.is_file())
        for n in names:
            assert (a / n).read_bytes() == (b / n).read_bytes(), n
    # a finding on stdout or stderr that a pipe still held would be missing above; so would a last line
    assert (proc.stdout + proc.stderr).strip()


def test_quick_exit_only_for_commands_that_finish_their_files() -> None:
    from generator.cli import QUICK_EXIT_COMMANDS, make_parser

    commands = set(make_parser()._subparsers._group_actions[0].choices)  # type: ignore[union-attr]
    assert QUICK_EXIT_COMMANDS == {"check", "build", "export"} and QUICK_EXIT_COMMANDS <= commands
    assert "serve" not in QUICK_EXIT_COMMANDS  # serve runs until interrupted and cleans up after itself


def test_command_process_skips_interpreter_teardown(tmp_path: Path) -> None:
    # the evidence of a process that ended at once: a handler registered to run at exit does not run
    # after check (a quick-exit command), and does after --version (no command ran)
    import os

    prog = make_programme(tmp_path / "prog")
    code = ("import atexit, sys; atexit.register(lambda: print('torn down')); from generator.cli import main; "
            "sys.argv = ['hcpsite'] + sys.argv[1:]; rc = main(); print('returned', rc)")
    run = {"env": {**os.environ, "HCPSITE_ID_KEY": TEST_KEY}, "capture_output": True, "text": True}
    quick = subprocess.run([sys.executable, "-c", code, "check", str(prog)], **run)
    assert quick.returncode == 0 and "torn down" not in quick.stdout and "returned" not in quick.stdout
    normal = subprocess.run([sys.executable, "-c", code, "--version"], **run)
    assert normal.returncode == 0 and normal.stdout.splitlines()[-2:] == ["returned 0", "torn down"]


def test_command_process_under_a_profiler_exits_normally(tmp_path: Path) -> None:
    # a profiler (python -m cProfile -o FILE -m generator ..., as bench/bench_build.py --profile runs it)
    # writes its data at exit: the quick exit steps aside for it
    import os

    prog = make_programme(tmp_path / "prog")
    prof = tmp_path / "check.prof"
    proc = subprocess.run([sys.executable, "-m", "cProfile", "-o", str(prof), "-m", "generator", "check", str(prog)],
                          capture_output=True, text=True, env={**os.environ, "HCPSITE_ID_KEY": TEST_KEY})
    assert proc.returncode == 0, proc.stderr
    assert prof.is_file() and prof.stat().st_size > 0
