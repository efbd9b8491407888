"""Two builds of the same inputs are byte-identical, wherever they are written."""
from __future__ import annotations

import hashlib
import os
import subprocess
import sys
from pathlib import Path


from tests.conftest import FIXED_EPOCH, REPO, TEST_KEY, build_fixed, env
from tests.progkit import make_programme


def tree(folder: Path) -> dict[str, str]:
    """Return relative path -> sha256 of every file below *folder*."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _programme(root: Path) -> Path:
    noise = [{"measurement_id": f"M{i}", "date": f"2025-03-{i + 1:02d}", "kind": "personal",
              "person_id": "E001" if i % 2 else "E002", "group": "G1", "duration_h": 8, "laeq": 84.0 + i}
             for i in range(6)]
    return make_programme(root, files={"noise.csv": noise},
                          pages={"b.md": "---\ntitle: B\norder: 2\n---\nb\n",
                                 "a.md": "---\ntitle: A\norder: 2\n---\na\n"})


def build_in_subprocess(root: Path, out: Path, hash_seed: str) -> None:
    """Build in a fresh interpreter with another string-hash seed (set order differs)."""
    environ = dict(os.environ, SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY,
                   PYTHONHASHSEED=hash_seed, PYTHONPATH=str(REPO))
    environ.pop("HCPSITE_TEST_PAUSE_WRITE", None)
    proc = subprocess.run([sys.executable, "-m", "generator", "build", str(root), "--out", str(out)],
                          env=environ, capture_output=True, text=True, timeout=300)
    assert proc.returncode == 0, proc.stderr[-2000:]


def test_small_programme_builds_identically(tmp_path: Path) -> None:
    root = _programme(tmp_path / "prog")
    build_fixed(root, tmp_path / "one")
    build_in_subprocess(root, tmp_path / "elsewhere" / "two", "12345")
    first, second = tree(tmp_path / "one"), tree(tmp_path / "elsewhere" / "two")
    assert first == second
    assert len(first) >= 6
    for p in sorted((tmp_path / "one").rglob("*.html")):
        text = p.read_text(encoding="utf-8")
        assert str(tmp_path) not in text, p  # no absolute path of the machine leaks into a page
        assert "built 2026-01-01" in text, p  # SOURCE_DATE_EPOCH, UTC


def test_unstamped_build_says_so(tmp_path: Path) -> None:
    from generator.build import build_site
    root = make_programme(tmp_path / "prog")
    with env(SOURCE_DATE_EPOCH=None, HCPSITE_ID_KEY=TEST_KEY):
        build_site(root, tmp_path / "site")
    assert "built not stamped" in (tmp_path / "site" / "index.html").read_text(encoding="utf-8")


def test_example_builds_identically(built_example, tmp_path: Path) -> None:
    again = tmp_path / "again"
    build_in_subprocess(built_example.root, again, "4242")
    first, second = tree(built_example.out), tree(again)
    assert sorted(first) == sorted(second)
    differing = [k for k in first if first[k] != second[k]]
    assert not differing, differing[:10]
