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


# ---------------------------------------------------------------------------------------
# restricted output is readable by the user only; an empty --out folder is kept


def _prog(tmp_path: Path) -> Path:
    from tests.progkit import make_programme
    return make_programme(tmp_path / "prog", pages={"about.md": "---\ntitle: About\n---\nabout text\n"})


def _modes(root: Path) -> dict[str, int]:
    return {p.relative_to(root).as_posix(): stat.S_IMODE(p.lstat().st_mode) for p in root.rglob("*")}


@pytest.fixture
def umask_022():
    old = os.umask(0o022)
    try:
        yield
    finally:
        os.umask(old)


def test_restricted_build_and_export_are_readable_by_the_user_only(tmp_path: Path, umask_022: None) -> None:
    root = _prog(tmp_path)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(tmp_path / "site"), "--restricted"]) == 0
        assert main(["export", str(root), "--to", str(tmp_path / "export"), "--restricted"]) == 0
        assert main(["build", str(root), "--out", str(tmp_path / "public")]) == 0
    for name in ("site", "export"):
        folder = tmp_path / name
        modes = _modes(folder)
        assert len(modes) > 3
        assert stat.S_IMODE(folder.stat().st_mode) & 0o077 == 0, name
        assert {rel: m for rel, m in modes.items() if m & 0o077} == {}, name
    # a public build keeps the ordinary rights (umask 022: others may read)
    assert stat.S_IMODE((tmp_path / "public" / "index.html").stat().st_mode) == 0o644


def test_existing_empty_out_folder_keeps_its_permissions(tmp_path: Path, umask_022: None) -> None:
    root = _prog(tmp_path)
    out = tmp_path / "chosen"
    out.mkdir(mode=0o750)
    os.chmod(out, 0o750)
    ino = out.stat().st_ino
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(out), "--restricted"]) == 0
    assert out.stat().st_ino == ino
    assert stat.S_IMODE(out.stat().st_mode) == 0o750
    assert (out / "index.html").is_file()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]


# ---------------------------------------------------------------------------------------
# export: written as the site is, never through a link, never over a foreign folder


def test_export_never_writes_through_a_symlink_or_into_a_foreign_folder(tmp_path: Path,
                                                                        capsys: pytest.CaptureFixture[str]) -> None:
    root = _prog(tmp_path)
    outside = tmp_path / "outside.txt"
    outside.write_text("precious\n", encoding="utf-8")
    # a folder holding a link named like an export file
    trap = tmp_path / "trap"
    trap.mkdir()
    (trap / "summary.json").symlink_to(outside)
    # a folder of the user holding a same-named file
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "actions.csv").write_text("my own actions\n", encoding="utf-8")
    # the export folder itself a link to a folder elsewhere
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    (tmp_path / "link").symlink_to(elsewhere, target_is_directory=True)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        for to in (trap, mine, tmp_path / "link"):
            assert main(["export", str(root), "--to", str(to)]) == 1, to
            err = capsys.readouterr().err
            assert "internal error" not in err and str(to.name) in err, err
    assert outside.read_text(encoding="utf-8") == "precious\n"
    assert (mine / "actions.csv").read_text(encoding="utf-8") == "my own actions\n"
    assert sorted(p.name for p in mine.iterdir()) == ["actions.csv"]
    assert list(elsewhere.iterdir()) == []


def test_export_replaces_its_own_folder_whole(tmp_path: Path) -> None:
    from generator.export import EXPORT_MARKER
    root = _prog(tmp_path)
    to = tmp_path / "exp"
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["export", str(root), "--to", str(to)]) == 0
        first = _tree(to)
        (to / "old.csv").write_text("left by an older version\n", encoding="utf-8")
        assert main(["export", str(root), "--to", str(to)]) == 0
    assert EXPORT_MARKER in first and _tree(to) == first
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]


# ---------------------------------------------------------------------------------------
# errors of the machine get a message naming the path, exit 1, never "internal error"


def _clean_failure(err: str, *words: str) -> None:
    assert "internal error" not in err and "fault in hcpsite" not in err and "Traceback" not in err, err
    for w in words:
        assert w in err, (w, err)


def test_out_under_a_regular_file(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = _prog(tmp_path)
    (tmp_path / "afile").write_text("x", encoding="utf-8")
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(tmp_path / "afile" / "site")]) == 1
        _clean_failure(capsys.readouterr().err, str(tmp_path / "afile"))
        assert main(["export", str(root), "--to", str(tmp_path / "afile" / "exp")]) == 1
        _clean_failure(capsys.readouterr().err, str(tmp_path / "afile"))
    assert (tmp_path / "afile").read_text() == "x"


def test_read_only_parent(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                          monkeypatch: pytest.MonkeyPatch) -> None:
    root = _prog(tmp_path)
    locked = tmp_path / "locked"
    locked.mkdir()
    os.chmod(locked, 0o555)
    if os.geteuid() == 0:  # root ignores the mode: refuse as the kernel would for a user
        real_mkdir = os.mkdir

        def mkdir(path, *a, **kw):  # type: ignore[no-untyped-def]
            if Path(path).parent == locked:
                raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(path))
            return real_mkdir(path, *a, **kw)
        monkeypatch.setattr(os, "mkdir", mkdir)
        real_path_mkdir = Path.mkdir

        def path_mkdir(self, *a, **kw):  # type: ignore[no-untyped-def]
            # (Python 3.10's pathlib holds its own reference to os.mkdir)
            if self.parent == locked:
                raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(self))
            return real_path_mkdir(self, *a, **kw)
        monkeypatch.setattr(Path, "mkdir", path_mkdir)
    try:
        with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
            assert main(["build", str(root), "--out", str(locked / "site")]) == 1
        _clean_failure(capsys.readouterr().err, str(locked), "Permission denied")
        assert list(locked.iterdir()) == []
    finally:
        os.chmod(locked, 0o755)


def test_full_disk_keeps_the_previous_site(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                           monkeypatch: pytest.MonkeyPatch) -> None:
    from generator.build import SiteWriter
    root = _prog(tmp_path)
    out = tmp_path / "site"
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(out)]) == 0
        before = _tree(out)
        real = SiteWriter.write_file
        calls = {"n": 0}

        def full(self: SiteWriter, rel: str, data: bytes) -> Path:
            calls["n"] += 1
            if calls["n"] > 3:
                raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
            return real(self, rel, data)
        monkeypatch.setattr(SiteWriter, "write_file", full)
        assert main(["build", str(root), "--out", str(out)]) == 1
        _clean_failure(capsys.readouterr().err, str(out), "No space left on device")
        calls["n"] = 0
        assert main(["export", str(root), "--to", str(tmp_path / "exp")]) == 1
        _clean_failure(capsys.readouterr().err, str(tmp_path / "exp"), "No space left on device")
    assert _tree(out) == before
    assert not (tmp_path / "exp").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]


def test_genuine_faults_stay_internal_errors(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                             monkeypatch: pytest.MonkeyPatch) -> None:
    import generator.build as build
    root = _prog(tmp_path)

    def broken(*a, **kw):  # type: ignore[no-untyped-def]
        raise OSError(errno.EBADF, os.strerror(errno.EBADF))
    monkeypatch.setattr(build, "write_site", broken)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY, HCPSITE_DEBUG=None):
        assert main(["build", str(root), "--out", str(tmp_path / "site")]) == 1
    assert "internal error" in capsys.readouterr().err


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _listening_socket() -> socket.socket:
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    sock.listen(1)
    return sock


def test_port_in_use_is_found_before_building(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    root = _prog(tmp_path)
    sock = _listening_socket()
    port = sock.getsockname()[1]
    try:
        started = time.monotonic()
        with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
            assert main(["serve", str(root), "--port", str(port)]) == 1
        assert time.monotonic() - started < 30
    finally:
        sock.close()
    _clean_failure(capsys.readouterr().err, f"127.0.0.1:{port}", "--port")
    assert not (root / "_site").exists()  # nothing was built


# ---------------------------------------------------------------------------------------
# a read-only previous site leaves nothing behind


def _deny_in_read_only_folders(monkeypatch: pytest.MonkeyPatch) -> None:
    """Make unlink/rmdir fail in a folder without user write permission, as they do for a user (not root)."""
    def guard(fn):  # type: ignore[no-untyped-def]
        def wrapped(path, *a, dir_fd=None, **kw):  # type: ignore[no-untyped-def]
            if dir_fd is not None:
                mode = os.fstat(dir_fd).st_mode
            else:
                mode = os.stat(os.path.dirname(os.path.abspath(path))).st_mode
            if not mode & stat.S_IWUSR:
                raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(path))
            return fn(path, *a, dir_fd=dir_fd, **kw)
        return wrapped
    monkeypatch.setattr(os, "unlink", guard(os.unlink))
    monkeypatch.setattr(os, "rmdir", guard(os.rmdir))
    monkeypatch.setattr(os, "remove", guard(os.remove))


def _chmod_tree(root: Path, remove: int) -> None:
    for p in sorted(root.rglob("*"), reverse=True) + [root]:
        if not p.is_symlink():
            os.chmod(p, stat.S_IMODE(p.lstat().st_mode) & ~remove)


def test_read_only_previous_site_is_replaced_without_leftovers(tmp_path: Path,
                                                               monkeypatch: pytest.MonkeyPatch) -> None:
    from tests.conftest import build_fixed
    root = _prog(tmp_path)
    out = tmp_path / "site"
    build_fixed(root, out)
    (root / "pages" / "about.md").write_text("---\ntitle: About\n---\nsecond text\n", encoding="utf-8")
    _chmod_tree(out, stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH)  # chmod -R a-w
    _deny_in_read_only_folders(monkeypatch)
    build_fixed(root, out)
    assert "second text" in (out / "about.html").read_text(encoding="utf-8")
    assert not [p.name for p in tmp_path.iterdir() if p.name.startswith(".hcpsite-tmp-")]


def test_stale_read_only_leftover_is_removed_but_foreign_folders_are_not(tmp_path: Path,
                                                                        monkeypatch: pytest.MonkeyPatch) -> None:
    from generator.build import MARKER
    from tests.conftest import build_fixed
    root = _prog(tmp_path)
    out = tmp_path / "site"
    build_fixed(root, out)
    # a site set aside by a build that died (pid 0 is never a live build), then made read-only
    dead = tmp_path / ".hcpsite-tmp-site-999999999-old"
    shutil.copytree(out, dead)
    (dead / "sub").mkdir()
    (dead / "sub" / "x.html").write_text("x", encoding="utf-8")
    _chmod_tree(dead, stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH)
    # a folder of the same shape without the marker is not the tool's: left alone
    foreign = tmp_path / ".hcpsite-tmp-site-999999998"
    foreign.mkdir()
    (foreign / "mine.txt").write_text("mine", encoding="utf-8")
    _deny_in_read_only_folders(monkeypatch)
    build_fixed(root, out)
    assert not dead.exists()
    assert (foreign / "mine.txt").read_text(encoding="utf-8") == "mine" and not (foreign / MARKER).exists()


# ---------------------------------------------------------------------------------------
# serve: vanishing folders, honest messages, reload after a rebuild


def test_input_state_survives_a_folder_vanishing_while_it_is_read(tmp_path: Path,
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    from generator import serve
    root = _prog(tmp_path)
    sub = root / "data" / "noise_logs" / "batch"
    sub.mkdir(parents=True)
    for i in range(3):
        (sub / f"M{i}.csv").write_text("start,laeq\n", encoding="utf-8")
    real_is_file = Path.is_file

    def vanishing(self: Path) -> bool:  # the folder is removed right after its first file is seen
        result = real_is_file(self)
        if sub in self.parents and sub.exists():
            shutil.rmtree(sub)
        return result
    monkeypatch.setattr(Path, "is_file", vanishing)
    state = serve.input_state(root)
    assert any(rel == "programme.yaml" for rel, _, _ in state)


def _get(url: str) -> str:
    with urllib.request.urlopen(url, timeout=10) as resp:
        return resp.read().decode("utf-8")


def test_serve_reloads_pages_after_a_rebuild_and_survives_vanishing_folders(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from generator import serve
    root = _prog(tmp_path)
    extra = root / "data" / "noise_logs" / "batch"
    extra.mkdir(parents=True)
    ready: list[int] = []
    stop = threading.Event()
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        t = threading.Thread(target=serve.serve, kwargs=dict(root=root, port=0, on_ready=ready.append,
                                                            stop=stop, max_polls=90), daemon=True)
        t.start()
        try:
            deadline = time.monotonic() + 60
            while not ready and time.monotonic() < deadline:
                time.sleep(0.1)
            assert ready, "server did not start"
            base = f"http://127.0.0.1:{ready[0]}"
            page = _get(base + "/about.html")
            assert "about text" in page
            # the served page carries the reload script, which asks this server only
            script = re.search(r"<script data-hcpsite-serve>(.*?)</script>", page, re.S)
            assert script and page.index(script.group(0)) < page.rindex("</body>")
            urls = re.findall(r"https?://|//[a-z0-9]", script.group(1))
            assert urls == [] and serve.BUILD_ENDPOINT in script.group(1)
            first = _get(base + serve.BUILD_ENDPOINT)
            assert re.search(r'var b="(\d+)"', script.group(1)).group(1) == first
            # the written site does not carry it
            assert "data-hcpsite-serve" not in (root / "_site" / "about.html").read_text(encoding="utf-8")
            # a folder vanishes between two polls, then a page changes: the server goes on
            shutil.rmtree(extra)
            time.sleep(1.2)
            (root / "pages" / "about.md").write_text("---\ntitle: About\n---\nsecond text\n", encoding="utf-8")
            while time.monotonic() < deadline and _get(base + serve.BUILD_ENDPOINT) == first:
                time.sleep(0.2)
            assert _get(base + serve.BUILD_ENDPOINT) != first, "no rebuild counted"
            assert "second text" in _get(base + "/about.html")
            assert t.is_alive()
        finally:
            stop.set()
            t.join(timeout=30)
    assert not t.is_alive()


def test_serve_does_not_claim_a_previous_site_when_there_is_none(tmp_path: Path,
                                                                 capsys: pytest.CaptureFixture[str]) -> None:
    root = _prog(tmp_path)
    (root / "data" / "people.csv").write_text("person_id,group\nE1,\n", encoding="utf-8")
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["serve", str(root), "--port", str(_free_port())]) == 1
    err = capsys.readouterr().err
    assert "previous site" not in err and "no site to serve" in err, err


# ---------------------------------------------------------------------------------------
# markdown: images only from the site; links to anchors, site files or web pages
# (WHATWG URL Standard, "special" schemes: a backslash reads as "/", tab and newline are
# removed and leading C0 controls or spaces are stripped, so "/\host" is "//host")

OFF_SITE = ["/\\host/a.png", "\\\\host/a.png", "//host/a.png", "/a.png", " /\\host/a.png", "/\t/host/a.png",
            "\\/host/a.png", "https://host/a.png", "http:/\\host/a.png", "data:image/png;base64,AAAA",
            "../outside.png", "pics/../../outside.png", "pics\\..\\..\\outside.png", "file:///etc/passwd",
            "javascript:alert(1)", "java\nscript:alert(1)"]


@pytest.mark.parametrize("src", OFF_SITE)
def test_images_from_outside_the_site_are_dropped(src: str) -> None:
    from generator.site import render_markdown, sanitise_html
    import html as htmllib
    for html in (sanitise_html(f'<img src="{htmllib.escape(src)}" alt="a">'),
                 render_markdown(f"<img src=\"{htmllib.escape(src)}\">"),
                 render_markdown(f"![x]({src})") if "\n" not in src and " " not in src else ""):
        for value in re.findall(r'src="([^"]*)"', html):
            assert not _off_site(htmllib.unescape(value)), (src, html)


def _off_site(value: str) -> bool:
    """True when a browser would fetch *value* from outside the site (see the note above)."""
    url = re.sub(r"[\t\n\r]", "", value).strip("".join(map(chr, range(0x21)))).replace("\\", "/")
    path = url.split("#", 1)[0].split("?", 1)[0]
    return (url.startswith("/") or bool(re.match(r"^[A-Za-z][A-Za-z0-9+.-]*:", url))
            or ".." in path.split("/"))


@pytest.mark.parametrize("href", ["/\\host/p", "//host/p", "\\\\host", "/p.html", "../p.html",
                                  "javascript:alert(1)", "vbscript:x", "data:text/html,x"])
def test_links_off_the_site_without_a_web_scheme_are_dropped(href: str) -> None:
    from generator.site import sanitise_html
    import html as htmllib
    out = sanitise_html(f'<a href="{htmllib.escape(href)}">x</a>')
    assert "href" not in out, (href, out)


def test_site_files_anchors_and_web_pages_stay() -> None:
    from generator.site import render_markdown, sanitise_html
    html = render_markdown("![p](pic.png) [a](#top) [b](exposure.html#g01) [c](https://example.org/info) "
                           "[d](mailto:x@example.org)")
    for kept in ('src="pic.png"', 'href="#top"', 'href="exposure.html#g01"', 'href="https://example.org/info"',
                 'href="mailto:x@example.org"'):
        assert kept in html, (kept, html)
    out = sanitise_html('<img src="pic.png" srcset="//host/a.png 2x" style="background:url(//host/b.png)">')
    assert out == '<img src="pic.png">'


def test_narrative_page_with_hostile_references_builds_without_them(tmp_path: Path) -> None:
    from tests.conftest import build_fixed
    from tests.progkit import make_programme
    page = ("---\ntitle: Notes\n---\n![x](/\\host/a.png)\n\n<img src=\"/\\host/b.png\">\n\n"
            "[ok](https://example.org/info) ![pic](pic.png)\n")
    root = make_programme(tmp_path / "prog", pages={"notes.md": page})
    out = tmp_path / "site"
    build_fixed(root, out)
    text = (out / "notes.html").read_text(encoding="utf-8")
    assert "host/" not in text.replace("https://example.org/info", "")
    assert 'src="pic.png"' in text and 'href="https://example.org/info"' in text


# ---------------------------------------------------------------------------------------
# charts: every text handed to plotly is escaped (plotly renders <b>, <a href> ... in labels)

MARKUP = ('<b>bold</b>', '<a href="https://evil.example/">link</a>', '<i>it</i><br>')


def _chart_specs(page_text: str) -> list[object]:
    """Return the decoded figure JSON of every Plotly.newPlot call on a page."""
    decoder = json.JSONDecoder()
    specs = []
    for m in re.finditer(r"Plotly\.newPlot\(\s*\"[^\"]+\",\s*", page_text):
        data, end = decoder.raw_decode(page_text, m.end())
        rest = page_text[end:].lstrip()
        assert rest.startswith(",")
        layout, _ = decoder.raw_decode(rest[1:].lstrip())
        specs.append({"data": data, "layout": layout})
    return specs


def _strings(value: object) -> list[str]:
    if isinstance(value, str):
        return [value]
    if isinstance(value, dict):
        return [s for k, v in value.items() if k not in ("hovertemplate", "texttemplate", "template")
                for s in _strings(v)]
    if isinstance(value, list):
        return [s for v in value for s in _strings(v)]
    return []


@pytest.mark.parametrize("restricted", [False, True])
def test_markup_in_labels_is_not_live_inside_charts(tmp_path: Path, restricted: bool) -> None:
    import pandas as pd
    from tests.conftest import build_fixed
    root = tmp_path / "prog"
    demo.write_demo(root, **SMALL)
    cfg = root / "programme.yaml"  # small groups shown, so that their task charts exist
    cfg.write_text(re.sub(r"(?m)^(\s*min_group_size:\s*)\d+", r"\g<1>2", cfg.read_text(encoding="utf-8")),
                   encoding="utf-8")
    for name, col in (("groups.csv", "name"), ("tasks.csv", "task"), ("protectors.csv", "name"),
                      ("noise.csv", "location")):
        path = root / "data" / name
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
        df[col] = [f"{MARKUP[i % len(MARKUP)]} {v}" for i, v in enumerate(df[col])]
        df.to_csv(path, index=False, lineterminator="\n")
    out = tmp_path / "site"
    build_fixed(root, out, restricted=restricted)
    seen = 0
    for page in sorted(out.rglob("*.html")):
        for spec in _chart_specs(page.read_text(encoding="utf-8")):
            for text in _strings(spec):
                assert not re.search(r"<\s*(b|a|i|br)\b", text, re.I), (page.name, text)
                seen += text.count("&lt;b&gt;bold&lt;/b&gt;") + text.count("&lt;a href=")
            for trace in spec["data"]:  # numbers stay numbers
                for axis in ("x", "y"):
                    vals = trace.get(axis)
                    if isinstance(vals, list) and vals and all(isinstance(v, (int, float)) for v in vals[:1]):
                        assert all(v is None or isinstance(v, (int, float)) for v in vals)
    assert seen > 0, "the labels should still be shown in the charts, escaped"


def test_finalise_escapes_text_and_keeps_numbers_and_templates() -> None:
    import numpy as np
    import plotly.graph_objects as go
    from generator.charts import finalise
    fig = go.Figure(go.Bar(x=np.array(["<b>A</b>", "B&C"], dtype=object), y=[1.5, 2], name="<a href='x'>n</a>",
                           text=["<i>t</i>", "u"], customdata=[["<b>c</b>"], ["d"]],
                           hovertemplate="%{x}<br>%{y}<extra></extra>"))
    fig.update_layout(title="<b>T</b>", xaxis=dict(tickvals=["<b>A</b>"], ticktext=["<b>A</b>"]),
                      annotations=[dict(text="<a href='//h'>x</a>", x=0, y=0)])
    d = finalise(fig)
    tr = d["data"][0]
    assert list(tr["x"]) == ["&lt;b&gt;A&lt;/b&gt;", "B&amp;C"] and list(tr["y"]) == [1.5, 2]
    assert tr["name"] == "&lt;a href='x'&gt;n&lt;/a&gt;" and list(tr["text"])[0] == "&lt;i&gt;t&lt;/i&gt;"
    assert [list(r) for r in tr["customdata"]][0] == ["&lt;b&gt;c&lt;/b&gt;"]
    assert tr["hovertemplate"] == "%{x}<br>%{y}<extra></extra>"
    assert d["layout"]["title"]["text"] == "&lt;b&gt;T&lt;/b&gt;"
    assert list(d["layout"]["xaxis"]["ticktext"]) == list(d["layout"]["xaxis"]["tickvals"]) == ["&lt;b&gt;A&lt;/b&gt;"]
    assert d["layout"]["annotations"][0]["text"].startswith("&lt;a ")


# ---------------------------------------------------------------------------------------
# a programme's templates run sandboxed: no way out to Python objects (jinja2 sandbox docs)


def test_programme_template_cannot_reach_python_internals(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from tests.progkit import make_programme
    root = make_programme(tmp_path / "prog")
    stock = (REPO / "templates" / "_caution.html").read_text(encoding="utf-8")
    (root / "templates").mkdir()
    (root / "templates" / "_caution.html").write_text(
        "{{ ''.__class__.__mro__[1].__subclasses__() }}\n" + stock, encoding="utf-8")
    out = tmp_path / "site"
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(out)]) == 1
    err = capsys.readouterr().err
    assert "internal error" not in err and "templates" in err, err
    assert not out.exists()


def test_demo_on_a_full_disk_names_the_file_and_stays_rewritable(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                                 monkeypatch: pytest.MonkeyPatch) -> None:
    import builtins
    real_open = builtins.open
    calls = {"n": 0}

    class Full:
        def __init__(self, fh):  # type: ignore[no-untyped-def]
            self.fh = fh

        def __enter__(self):  # type: ignore[no-untyped-def]
            return self

        def __exit__(self, *exc):  # type: ignore[no-untyped-def]
            self.fh.close()

        def write(self, data):  # type: ignore[no-untyped-def]
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    def fake_open(file, mode="r", *a, **kw):  # type: ignore[no-untyped-def]
        fh = real_open(file, mode, *a, **kw)
        if mode == "xb" and str(tmp_path) in str(file):
            calls["n"] += 1
            if calls["n"] == 4:
                return Full(fh)
        return fh
    monkeypatch.setattr(demo, "open", fake_open, raising=False)
    root = tmp_path / "prog"
    assert main(["demo", str(root), "--people", "40", "--years", "2"]) == 1
    _clean_failure(capsys.readouterr().err, str(root / "data"), "No space left on device")
    monkeypatch.undo()
    # what was written is listed, so the next demo may replace it
    assert main(["demo", str(root), "--people", "40", "--years", "2"]) == 0


def test_failed_build_into_an_empty_folder_leaves_it_empty(tmp_path: Path, capsys: pytest.CaptureFixture[str],
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    from generator.build import SiteWriter
    root = _prog(tmp_path)
    out = tmp_path / "chosen"
    out.mkdir()
    os.chmod(out, 0o710)
    real = SiteWriter.write_file
    calls = {"n": 0}

    def full(self: SiteWriter, rel: str, data: bytes) -> Path:
        calls["n"] += 1
        if calls["n"] > 5:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(self, rel, data)
    monkeypatch.setattr(SiteWriter, "write_file", full)
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        assert main(["build", str(root), "--out", str(out)]) == 1
    _clean_failure(capsys.readouterr().err, str(out), "No space left on device")
    assert list(out.iterdir()) == [] and stat.S_IMODE(out.stat().st_mode) == 0o710
