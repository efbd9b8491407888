"""Escaping and sanitising of user text, safe output folders, and the atomic site swap."""
from __future__ import annotations

import hashlib
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from generator.build import MARKER, SiteWriter, build_site, check_output
from generator.findings import HcpsiteError
from generator.site import render_markdown, sanitise_html
from tests.conftest import REPO, build_fixed, env
from tests.progkit import make_programme

XSS = "<script>alert(1)</script>"
#: an attribute-injection variant: must never come out as a live attribute
XSS_ATTR = '"><img src=x onerror=alert(2)>'
#: an event-handler attribute inside a real tag (escaped text has &lt; instead of <)
LIVE_HANDLER = re.compile(r"<[a-zA-Z][^<>]*\son[a-z]+\s*=", re.S)


def _tree_hashes(folder: Path) -> dict[str, str]:
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def _hostile_programme(root: Path) -> Path:
    people = [
        {"person_id": "E20001", "group": "G1", "sex": "M", "birth_date": "1980-05-01",
         "hire_date": "2010-01-01", "job_title": XSS, "department": XSS_ATTR},
        {"person_id": "E20002", "group": "G1", "sex": "F", "birth_date": "1990-02-03",
         "hire_date": "2015-03-01", "job_title": "fitter"},
    ]
    groups = [{"group": "G1", "name": XSS + " press shop", "description": XSS_ATTR}]
    noise = [
        {"measurement_id": "M1", "date": "2025-03-04", "kind": "personal", "person_id": "E20001",
         "group": "G1", "location": XSS, "duration_h": 8, "laeq": 88.0, "notes": XSS},
        {"measurement_id": "M2", "date": "2025-03-05", "kind": "area", "group": "G1",
         "location": XSS_ATTR, "duration_h": 1, "laeq": 84.0, "x_m": 1, "y_m": 2, "notes": XSS},
    ]
    page = ("---\ntitle: Notes " + XSS + "\norder: 2\n---\n# Notes\n\n" + XSS + "\n\n"
            "[click me](javascript:alert(3)) [fine](https://example.org/info) "
            "<a href=\"JaVaScRiPt:alert(4)\">x</a> <img src=\"https://example.org/t.png\"> "
            "<img src=\"pic.png\" onerror=\"alert(5)\"> <iframe src=\"https://example.org\"></iframe>\n"
            "<div style=\"background:url(https://example.org/x)\" onclick=\"alert(6)\">styled</div>\n")
    return make_programme(root, files={"people.csv": people, "groups.csv": groups, "noise.csv": noise},
                          config={"title": "Review " + XSS, "organisation": XSS_ATTR,
                                  "site_url_note": XSS},
                          pages={"notes.md": page})


def test_hostile_text_is_escaped_on_every_page(tmp_path: Path) -> None:
    root = _hostile_programme(tmp_path / "prog")
    out = tmp_path / "site"
    build_fixed(root, out)
    pages = sorted(out.rglob("*.html"))
    assert pages, "the build wrote no page"
    for page in pages:
        text = page.read_text(encoding="utf-8")
        assert "<script>alert" not in text, page
        # no live tag carries an event handler, a javascript: URL or a frame
        assert not LIVE_HANDLER.search(text), (page, LIVE_HANDLER.search(text))
        assert "javascript:" not in text.lower(), page
        assert "<iframe" not in text and "<svg" not in text, page
        assert not re.search(r"<img[^>]+src=\"?https?:", text), page
        # the user's text is still there, escaped
        assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text or "\\u003cscript\\u003e" in text, page
    notes = (out / "notes.html").read_text(encoding="utf-8")
    assert 'href="https://example.org/info"' in notes  # plain external links in narrative text stay
    assert 'src="pic.png"' in notes and "styled" in notes


def test_markdown_sanitiser_removes_active_content() -> None:
    html = render_markdown("# T\n\n<script>alert(1)</script><style>p{}</style>\n\n"
                           "[a](javascript:alert(1)) [b](mailto:x@example.org) [c](other.html)"
                           " [d](//example.org/x) <svg onload=alert(1)></svg>")
    assert "<script" not in html and "<style" not in html and "<svg" not in html
    assert "javascript:" not in html and "//example.org" not in html
    assert 'href="mailto:x@example.org"' in html and 'href="other.html"' in html
    assert sanitise_html('<p onclick="x()">k</p>') == "<p>k</p>"


def test_refuses_unsafe_output_folders(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "prog")
    with pytest.raises(HcpsiteError, match="programme folder"):
        check_output(root, root)
    with pytest.raises(HcpsiteError, match="contain the programme"):
        check_output(root, tmp_path)
    with pytest.raises(HcpsiteError, match="inside the programme's data"):
        check_output(root, root / "data" / "site")
    other = make_programme(tmp_path / "other")
    with pytest.raises(HcpsiteError, match="programme.yaml or data"):
        check_output(root, other)
    data_only = tmp_path / "looks"
    (data_only / "data").mkdir(parents=True)
    with pytest.raises(HcpsiteError, match="programme.yaml or data"):
        check_output(root, data_only)
    foreign = tmp_path / "foreign"
    foreign.mkdir()
    (foreign / "keep.txt").write_text("mine", encoding="utf-8")
    with pytest.raises(HcpsiteError, match="not made by hcpsite"):
        build_site(root, foreign)
    assert (foreign / "keep.txt").read_text(encoding="utf-8") == "mine"
    # the default output folder and an empty folder are fine
    check_output(root, root / "_site")
    (tmp_path / "empty").mkdir()
    check_output(root, tmp_path / "empty")


def test_writer_refuses_paths_outside_and_second_writes(tmp_path: Path) -> None:
    w = SiteWriter(tmp_path / "o")
    w.write_file("a/b.html", b"x")
    for bad in ("/etc/passwd", "../x.html", "a/../../x", "a//b", "./x", "C:/x", "a\\b"):
        with pytest.raises(ValueError):
            w.write_file(bad, b"x")
    with pytest.raises(ValueError, match="twice"):
        w.write_file("a/b.html", b"y")
    assert (tmp_path / "o" / "a" / "b.html").read_bytes() == b"x"
    assert not (tmp_path / "x.html").exists()


def test_failed_validation_leaves_previous_site_byte_identical(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "prog")
    out = tmp_path / "site"
    build_fixed(root, out)
    before = _tree_hashes(out)
    assert MARKER in before
    (root / "data" / "people.csv").write_text("person_id,group\nE1,\n", encoding="utf-8")
    with pytest.raises(HcpsiteError):
        build_fixed(root, out)
    assert _tree_hashes(out) == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]


def test_error_while_writing_leaves_previous_site(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    root = make_programme(tmp_path / "prog")
    out = tmp_path / "site"
    build_fixed(root, out)
    before = _tree_hashes(out)
    (root / "pages").mkdir(exist_ok=True)
    (root / "pages" / "new.md").write_text("---\ntitle: New\n---\nnew page\n", encoding="utf-8")
    real = SiteWriter.write_file
    calls = {"n": 0}

    def failing(self: SiteWriter, rel: str, data: bytes) -> Path:
        calls["n"] += 1
        if calls["n"] == 4:
            raise OSError("disk full (simulated)")
        return real(self, rel, data)

    monkeypatch.setattr(SiteWriter, "write_file", failing)
    with pytest.raises(OSError, match="simulated"):
        build_fixed(root, out)
    assert _tree_hashes(out) == before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]
    monkeypatch.setattr(SiteWriter, "write_file", real)
    build_fixed(root, out)
    assert (out / "new.html").is_file()


def test_killed_build_leaves_previous_site_and_is_cleaned_up(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "prog")
    out = tmp_path / "site"
    build_fixed(root, out)
    before = _tree_hashes(out)
    (root / "pages").mkdir(exist_ok=True)
    (root / "pages" / "late.md").write_text("---\ntitle: Late\n---\nlate page\n", encoding="utf-8")
    code = ("import sys; from generator.build import build_site; "
            "build_site(sys.argv[1], sys.argv[2])")
    environ = dict(os.environ, HCPSITE_TEST_PAUSE_WRITE="30", PYTHONPATH=str(REPO))
    proc = subprocess.Popen([sys.executable, "-c", code, str(root), str(out)], env=environ,
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 60
        tmp = tmp_path / f".hcpsite-tmp-site-{proc.pid}"
        # wait until the build is in its write phase (temporary folder has pages in it)
        while time.monotonic() < deadline and not (tmp.is_dir() and any(tmp.glob("*.html"))):
            assert proc.poll() is None, "the build ended before its write phase"
            time.sleep(0.1)
        assert tmp.is_dir(), "the build never reached its write phase"
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert _tree_hashes(out) == before
    assert tmp.is_dir()  # left behind by the killed process ...
    with env(HCPSITE_TEST_PAUSE_WRITE=None):
        build_fixed(root, out)
    assert not tmp.exists()  # ... and removed by the next build
    assert (out / "late.html").is_file()


def test_unsafe_page_slugs_are_refused() -> None:
    from generator.pages.base import Page
    from generator.site import check_pages
    for slug in ("../evil", "/abs", "a/../b", ".hidden", "assets/x", "a\\b", ""):
        with pytest.raises(ValueError):
            check_pages([Page(slug=slug, title="t", template="narrative.html", section="narrative")])
    with pytest.raises(ValueError, match="two pages"):
        check_pages([Page(slug="x", title="t", template="t", section="s"),
                     Page(slug="x", title="t", template="t", section="s")])


def test_site_left_aside_by_a_killed_swap_is_restored(tmp_path: Path) -> None:
    root = make_programme(tmp_path / "prog")
    out = tmp_path / "site"
    build_fixed(root, out)
    before = _tree_hashes(out)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True, check=True)
    aside = tmp_path / f".hcpsite-tmp-site-{int(dead.stdout)}-old"
    out.rename(aside)  # as if killed between moving the old site aside and moving the new one in
    (root / "data" / "people.csv").write_text("person_id,group\nE1,\n", encoding="utf-8")
    with pytest.raises(HcpsiteError):
        build_fixed(root, out)
    assert _tree_hashes(out) == before and not aside.exists()
