"""Progress lines: one timed line per build phase on stderr with -v or on a terminal, else nothing."""
from __future__ import annotations

import io
import re
from pathlib import Path

import pytest

from generator import progress
from generator.cli import main
from tests.conftest import FIXED_EPOCH, TEST_KEY, env
from tests.progkit import make_programme

LINE = re.compile(r"^hcpsite: (?P<name>[a-z][a-z_ -]*) (?P<secs>\d+\.\d\d) s$")
from generator.pipeline import STAGE_NAMES

#: the phases of a build: load, each compute stage (generator/pipeline.py), pages, render,
#: write, and the total
BUILD_PHASES = ["load", *STAGE_NAMES, "pages", "render", "write", "build"]


def _progress_lines(text: str) -> list[re.Match[str]]:
    return [m for m in (LINE.match(line) for line in text.splitlines()) if m]


@pytest.fixture(autouse=True)
def _progress_off():
    """Leave progress off after each test (main() configures it per run)."""
    yield
    progress.configure(False, stream=io.StringIO())


def test_verbose_build_prints_one_timed_line_per_phase(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = make_programme(tmp_path / "prog")
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["-v", "build", str(root), "--out", str(tmp_path / "site")]) == 0
    out, err = capsys.readouterr()
    lines = _progress_lines(err)
    assert [m["name"] for m in lines] == BUILD_PHASES, err
    assert all(float(m["secs"]) >= 0 for m in lines)
    # the total is printed last and covers the phases inside it
    secs = {m["name"]: float(m["secs"]) for m in lines}
    assert secs["build"] + 0.01 >= secs["pages"] + secs["render"] + secs["write"]
    assert "hcpsite:" not in out  # progress goes to stderr only


def test_long_option_works_too(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = make_programme(tmp_path / "prog")
    with env(HCPSITE_ID_KEY=TEST_KEY):
        assert main(["--verbose", "check", str(root)]) == 0
    assert [m["name"] for m in _progress_lines(capsys.readouterr().err)] == ["load", *STAGE_NAMES]


def test_silent_without_verbose_when_stderr_is_not_a_terminal(tmp_path: Path,
                                                               capsys: pytest.CaptureFixture[str]) -> None:
    root = make_programme(tmp_path / "prog")
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(tmp_path / "site")]) == 0
    out, err = capsys.readouterr()
    assert "hcpsite:" not in err and "hcpsite:" not in out
    assert "built " in err  # the usual one-line summary is still there


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_on_by_default_when_stderr_is_a_terminal(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = make_programme(tmp_path / "prog")
    fake = _Terminal()
    monkeypatch.setattr("sys.stderr", fake)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(tmp_path / "site")]) == 0
    assert [m["name"] for m in _progress_lines(fake.getvalue())] == BUILD_PHASES


def test_step_prints_name_and_seconds_and_nests() -> None:
    ticks = iter([10.0, 11.0, 11.5, 13.25])
    buf = io.StringIO()
    p = progress.Progress(enabled=True, stream=buf, clock=lambda: next(ticks))
    with p.step("outer"):
        with p.step("hearing"):
            pass
    assert buf.getvalue() == "hcpsite: hearing 0.50 s\nhcpsite: outer 3.25 s\n"


def test_disabled_step_prints_nothing_and_failed_step_prints_nothing() -> None:
    buf = io.StringIO()
    with progress.Progress(enabled=False, stream=buf).step("load"):
        pass
    with pytest.raises(ValueError):
        with progress.Progress(enabled=True, stream=buf).step("load"):
            raise ValueError("boom")
    assert buf.getvalue() == ""


def test_library_callers_get_no_progress_by_default(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from generator.build import build_site
    progress.configure(False, stream=io.StringIO())
    root = make_programme(tmp_path / "prog")
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        build_site(root, tmp_path / "site")
    assert "hcpsite:" not in capsys.readouterr().err
