"""Hardening of what hcpsite writes and serves: the demo guard, restricted output rights,
the markdown sanitiser, chart text, exports, serve, environment errors and read-only sites."""
from __future__ import annotations

import errno
import hashlib
import json
import os
import re
import shutil
import socket
import stat
import threading
import time
import urllib.request
from pathlib import Path

import pytest

from generator import demo
from generator.cli import main
from generator.findings import HcpsiteError
from tests.conftest import REPO, TEST_KEY, FIXED_EPOCH, env

SMALL = {"people": 40, "years": 2, "seed": 7}


def _tree(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


# ---------------------------------------------------------------------------------------
# demo: write only into a new or empty folder or over exactly what an earlier demo wrote


@pytest.fixture(scope="module")
def demo_once(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("demo") / "prog"
    demo.write_demo(root, **SMALL)
    return root


def _copy(src: Path, dst: Path) -> Path:
    shutil.copytree(src, dst, symlinks=True)
    return dst


def test_demo_manifest_lists_every_written_file_with_its_digest(demo_once: Path) -> None:
    files = _tree(demo_once)
    manifest = files.pop(demo.MANIFEST).decode("utf-8")
    listed = dict(reversed(line.split("  ", 1)) for line in manifest.splitlines())
    assert sorted(listed) == sorted(files)
    for rel, data in files.items():
        assert listed[rel] == _sha(data), rel  # sha256 per FIPS 180-4, hashlib as the oracle


def test_demo_rewrites_its_own_folder(demo_once: Path, tmp_path: Path) -> None:
    root = _copy(demo_once, tmp_path / "prog")
    before = _tree(root)
    assert demo.write_demo(root, **SMALL)["people"] > 0
    assert _tree(root) == before
    # other arguments: files of the first demo that the second does not write are gone
    demo.write_demo(root, people=40, years=1, seed=3)
    again = _tree(root)
    listed = {l.split("  ", 1)[1] for l in again[demo.MANIFEST].decode().splitlines()}
    assert sorted(listed) == sorted(k for k in again if k != demo.MANIFEST)


@pytest.mark.parametrize("change", ["extra_file", "changed_file", "user_folder", "real_programme",
                                    "forged_manifest", "symlink"])
def test_demo_refuses_a_folder_it_did_not_write(change: str, demo_once: Path, tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    root = _copy(demo_once, tmp_path / "prog")
    if change == "extra_file":
        (root / "data" / "noise_logs" / "M-real.csv").write_text("start,laeq\n", encoding="utf-8")
    elif change == "changed_file":
        with open(root / "data" / "people.csv", "a", encoding="utf-8") as fh:
            fh.write("E-REAL,G01,F,1980-01-01,2010-01-01,,Press,Operator,Real Person\n")
    elif change == "user_folder":
        (root / "data" / "noise_logs" / "2024-survey").mkdir()
    elif change == "real_programme":
        # a programme started from the demo keeps the demo's first comment line but holds real records
        (root / demo.MANIFEST).unlink()
    elif change == "forged_manifest":
        (root / demo.MANIFEST).write_text("not a list of digests\n", encoding="utf-8")
    elif change == "symlink":
        outside = tmp_path / "outside.csv"
        outside.write_text("keep\n", encoding="utf-8")
        (root / "data" / "noise_logs" / "link.csv").symlink_to(outside)
    before = _tree(root)
    dirs_before = sorted(p.relative_to(root).as_posix() for p in root.rglob("*"))
    assert main(["demo", str(root), "--people", "40", "--years", "2", "--seed", "7"]) == 1
    err = capsys.readouterr().err
    assert str(root) in err and "internal error" not in err and "Traceback" not in err
    assert _tree(root) == before
    assert sorted(p.relative_to(root).as_posix() for p in root.rglob("*")) == dirs_before


def test_demo_into_new_and_empty_folders_and_says_what_it_wrote(tmp_path: Path,
                                                                capsys: pytest.CaptureFixture[str]) -> None:
    (tmp_path / "empty").mkdir()
    for name in ("empty", "new/deeper"):
        assert main(["demo", str(tmp_path / name), "--people", "40", "--years", "2"]) == 0
        err = capsys.readouterr().err
        people = len((tmp_path / name / "data" / "people.csv").read_text().splitlines()) - 1
        audiograms = len((tmp_path / name / "data" / "audiograms.csv").read_text().splitlines()) - 1
        assert f"40 people at a time, {people} over 2 years" in err, err
        assert f"{audiograms} audiograms" in err and str(tmp_path / name) in err, err
    (tmp_path / "file").write_text("x", encoding="utf-8")
    with pytest.raises(HcpsiteError):
        demo.write_demo(tmp_path / "file", **SMALL)
    assert (tmp_path / "file").read_text() == "x"


def test_site_example_carries_the_demo_manifest() -> None:
    root = REPO / "site_example"
    text = (root / demo.MANIFEST).read_text(encoding="utf-8")
    for line in text.splitlines():
        digest, rel = line.split("  ", 1)
        assert _sha((root / rel).read_bytes()) == digest, rel
