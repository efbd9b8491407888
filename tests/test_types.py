"""The type checker passes on generator/: stage inputs and results are typed, and a wrong
wiring between stages (a missing or mistyped stage result) fails here, before any build."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def test_mypy_finds_no_errors_in_generator(tmp_path: Path) -> None:
    run = subprocess.run([sys.executable, "-m", "mypy", "--config-file", str(REPO / "pyproject.toml"),
                          "--cache-dir", str(tmp_path / "mypy-cache"), "generator"],
                         cwd=REPO, capture_output=True, text=True, timeout=600)
    assert run.returncode == 0, run.stdout + run.stderr
