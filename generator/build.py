"""The build pipeline: load -> compute stages -> page builders -> render -> atomic write.

Nothing is written before the inputs validated. The site is written into a temporary
sibling folder carrying a marker file, then swapped in for the previous site, so a
failed or killed build leaves the previous site as it was. The tool only ever replaces
a folder that carries its marker.
"""
from __future__ import annotations

import datetime as dt
import logging
import os
import re
import shutil
import stat
import time
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from . import clock, progress
from .config import CONFIG_FILE
from .findings import Findings, HcpsiteError, UsageError
from .model import Programme
from . import pipeline
from .pages import page_builders
from .pages.people import link_person_codes
from .pages.base import Page, SiteContext
from .pipeline import STAGE_NAMES, Results
from .privacy import Suppressor, make_coder, redactor
from .rules import rule_sets_for

log = logging.getLogger(__name__)

MARKER = ".hcpsite-site"
MARKER_TEXT = b"This folder was made by hcpsite and is replaced as a whole by each build.\n"
TMP_PREFIX = ".hcpsite-tmp-"
DEFAULT_OUT = "_site"
#: folders of a programme that hold inputs: an output folder may not lie inside them.
INPUT_FOLDERS = ("data", "pages", "templates")
#: test hook: seconds to pause halfway through writing (lets a test kill the build there).
PAUSE_ENV = "HCPSITE_TEST_PAUSE_WRITE"


@dataclass
class BuildReport:
    """What a build did."""

    out: Path
    pages: list[str]
    files: int
    bytes: int
    findings: Findings
    stages: list[str] = field(default_factory=list)
    restricted: bool = False
    #: the SiteContext of the build (programme, results, rule sets, coder), for tests and tools
    context: Any = field(default=None, repr=False)


def validation_today() -> dt.date:
    """Return the date future dates are judged against: SOURCE_DATE_EPOCH (UTC) or the system date."""
    return clock.today()


def load(root: Path, strict: bool = False) -> Programme:
    """Load and validate the programme at *root*; raise HcpsiteError when it must stop."""
    root = Path(root)
    if not root.is_dir():
        raise UsageError(f"{root}: no such programme folder")
    from .inputs.reader import load_programme
    with progress.step("load"):
        programme = load_programme(root, today=validation_today())
    _stop_if_failed(root, programme.findings, strict)
    return programme


def _stop_if_failed(root: Path, findings: Findings, strict: bool) -> None:
    """Raise HcpsiteError when *findings* stop the build (errors, or warnings under --strict)."""
    if findings.failed(strict):
        why = "" if findings.has_errors() else " (warnings fail under --strict)"
        raise HcpsiteError(f"{root}: {findings.summary()}{why}", findings)


def compute(programme: Programme) -> Results:
    """Run the compute pipeline (generator/pipeline.py) with the programme's rule sets."""
    return pipeline.run(programme, rule_sets_for(programme.config))


def make_context(programme: Programme, results: Results, restricted: bool = False) -> SiteContext:
    """Return the SiteContext: rule sets, person codes and suppressed groups; adds the no-key warning."""
    cfg = programme.config
    people = programme.table("people")
    code, warning = make_coder(people, os.environ.get(cfg.privacy.id_key_env) or None, cfg.privacy.id_key_env)
    if warning is not None:
        programme.findings.extend([warning])
    # built once per build: every public aggregate and every free text passes through these two
    groups = programme.table("groups")
    suppress = Suppressor(people, cfg.privacy.min_group_size, cfg.period.start, cfg.period.end, restricted,
                          groups=groups["group"].astype(str).tolist() if "group" in groups.columns else ())
    redact = str if restricted else redactor(people, code)
    return SiteContext(programme=programme, results=results, rules=results.rules, code=code,
                       suppressed_groups=suppress.groups, restricted=restricted, suppress=suppress,
                       redact=redact)


def prepare(root: Path, *, strict: bool = False, restricted: bool = False) -> SiteContext:
    """Load, validate and compute; return the site context. Raise HcpsiteError on failure."""
    programme = load(root, strict)
    results = compute(programme)
    programme.findings.extend(results.findings())
    ctx = make_context(programme, results, restricted)
    _stop_if_failed(root, programme.findings, strict)
    return ctx


def _add_pages(ctx: SiteContext, pages: list[Page]) -> None:
    known = {id(p) for p in ctx.pages}
    ctx.pages.extend(p for p in pages if id(p) not in known)


def build_pages(ctx: SiteContext) -> None:
    """Run the page builders in navigation order (narrative pages right after the overview)."""
    for builder in page_builders():
        _add_pages(ctx, list(builder(ctx)))
    link_person_codes(ctx, ctx.pages)


#: image files beside the narrative pages that are copied into the site (no SVG: it can carry script).
IMAGE_SUFFIXES = (".png", ".jpg", ".jpeg", ".gif", ".webp")
IMAGE_MAX_BYTES = 5 * 1024 * 1024
_IMAGE_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")


def narrative_images(root: Path, taken: set[str]) -> dict[str, bytes]:
    """Return the images of the programme's pages/ folder (top level) to copy beside the pages."""
    folder = Path(root) / "pages"
    out: dict[str, bytes] = {}
    if not folder.is_dir() or folder.is_symlink():
        return out
    for p in sorted(folder.iterdir()):
        if p.suffix.lower() not in IMAGE_SUFFIXES or p.is_symlink() or not p.is_file():
            continue
        if not _IMAGE_NAME.match(p.name) or p.name in taken or p.name.lower().startswith("assets"):
            log.warning("pages/%s: image not copied (unsafe or clashing name)", p.name)
            continue
        if p.stat().st_size > IMAGE_MAX_BYTES:
            log.warning("pages/%s: image larger than %d MB not copied", p.name, IMAGE_MAX_BYTES // 2**20)
            continue
        out[p.name] = p.read_bytes()
    return out


# ---------------------------------------------------------------------------------------
# output folder


def _inside(path: Path, folder: Path) -> bool:
    try:
        path.relative_to(folder)
        return True
    except ValueError:
        return False


def check_output(root: Path, out: Path, *, marker: str = MARKER, what: str = "output") -> None:
    """Raise HcpsiteError unless *out* is a folder the tool may replace (new, empty or carrying *marker*)."""
    given = Path(out).absolute()
    root, out = Path(root).resolve(), Path(out).resolve()
    if out == root:
        raise HcpsiteError(f"{out}: the {what} folder cannot be the programme folder")
    if _inside(root, out):
        raise HcpsiteError(f"{out}: the {what} folder cannot contain the programme folder")
    for name in INPUT_FOLDERS:
        if _inside(out, root / name):
            raise HcpsiteError(f"{out}: the {what} folder cannot lie inside the programme's {name}/ folder")
    if given.is_symlink():
        raise HcpsiteError(f"{given}: is a symbolic link; name the folder itself")
    for parent in out.parents:
        if parent.exists() and not parent.is_dir():
            raise HcpsiteError(f"{out}: cannot be made, {parent} is a file and not a folder")
    if out.exists() or out.is_symlink():
        if not out.is_dir() or out.is_symlink():
            raise HcpsiteError(f"{out}: exists and is not a folder")
        if (out / CONFIG_FILE).exists() or (out / "data").exists():
            raise HcpsiteError(f"{out}: looks like a programme folder (has programme.yaml or data/); "
                               f"choose another {what} folder")
        if not (out / marker).is_file() and any(out.iterdir()):
            raise HcpsiteError(f"{out}: exists and was not made by hcpsite (no {marker} file); "
                               f"remove it or choose another {what} folder")


#: modes of a restricted build or export: readable by the user only
PRIVATE_DIR_MODE = 0o700
PRIVATE_FILE_MODE = 0o600


class SiteWriter:
    """Write files below one folder only, each path at most once (user-only modes when *private*)."""

    def __init__(self, folder: Path, private: bool = False) -> None:
        self.folder = Path(folder)
        self.private = private
        self.written: set[str] = set()
        self.bytes = 0

    def write_file(self, rel: str, data: bytes) -> Path:
        """Write *data* to the relative path *rel*; refuse absolute paths, '..' and a second write."""
        if not isinstance(rel, str) or not rel or "\\" in rel or "\x00" in rel:
            raise ValueError(f"refusing to write {rel!r}: not a relative path")
        pure = PurePosixPath(rel)
        if pure.is_absolute() or re.match(r"^[A-Za-z]:", rel) or any(p in ("..", ".", "") for p in rel.split("/")):
            raise ValueError(f"refusing to write {rel!r}: outside the output folder")
        if rel in self.written:
            raise ValueError(f"refusing to write {rel!r} twice in one build")
        target = self.folder.joinpath(*pure.parts)
        if not _inside(target.resolve().parent, self.folder.resolve()):
            raise ValueError(f"refusing to write {rel!r}: outside the output folder")
        folder = self.folder
        if not folder.is_dir():
            folder.mkdir(parents=True, mode=PRIVATE_DIR_MODE if self.private else 0o777)
        for part in pure.parts[:-1]:
            folder = folder / part
            if not folder.is_dir():
                folder.mkdir(mode=PRIVATE_DIR_MODE if self.private else 0o777)
        flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_NOFOLLOW", 0) | getattr(os, "O_BINARY", 0)
        fd = os.open(target, flags, PRIVATE_FILE_MODE if self.private else 0o666)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        self.written.add(rel)
        self.bytes += len(data)
        return target


_TMP_NAME = re.compile(r"^(?P<pid>\d+)(?P<old>-old)?$")


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _make_writable(folder: Path) -> None:
    """Give the user write and search rights on *folder* and every folder below it (links not followed)."""
    st = os.lstat(folder)
    if not stat.S_ISDIR(st.st_mode):
        return
    want = stat.S_IMODE(st.st_mode) | stat.S_IRWXU
    if want != stat.S_IMODE(st.st_mode):
        os.chmod(folder, want)
    with os.scandir(folder) as it:
        subdirs = [Path(e.path) for e in it if e.is_dir(follow_symlinks=False)]
    for sub in subdirs:
        _make_writable(sub)


def remove_tool_folder(folder: Path, marker: str = MARKER) -> None:
    """Remove *folder*, a folder the tool made (it carries *marker*), even when it was made read-only.

    A folder without the marker is left alone. Failures are logged, not raised: the next
    build tries again.
    """
    folder = Path(folder)
    if folder.is_symlink() or not folder.is_dir() or not (folder / marker).is_file():
        return
    try:
        shutil.rmtree(folder)
        return
    except OSError:
        pass
    try:
        _make_writable(folder)
        shutil.rmtree(folder)
    except OSError as exc:
        log.warning("%s: could not be removed (%s); remove it by hand", folder, exc.strerror or exc)


def clean_stale(out: Path, marker: str = MARKER) -> None:
    """Remove temporary folders of dead builds beside *out*; restore a site left aside by a killed swap."""
    parent, prefix = out.parent, f"{TMP_PREFIX}{out.name}-"
    if not parent.is_dir():
        return
    for entry in sorted(parent.iterdir()):
        if not entry.name.startswith(prefix) or not entry.is_dir() or entry.is_symlink():
            continue
        m = _TMP_NAME.match(entry.name[len(prefix):])
        if not m or _alive(int(m.group("pid"))) or not (entry / marker).is_file():
            continue
        if m.group("old") and not out.exists():
            log.warning("restoring the previous site from %s", entry)
            os.rename(entry, out)
            continue
        remove_tool_folder(entry, marker)


def _pause_seconds() -> float:
    raw = os.environ.get(PAUSE_ENV, "")
    try:
        return float(raw) if raw else 0.0
    except ValueError:
        return 0.0


def _with_path(exc: OSError, path: Path) -> OSError:
    """Return *exc* naming *path* when it names no file (so the message says where it happened)."""
    if exc.filename is None and exc.errno is not None:
        return type(exc)(exc.errno, exc.strerror or os.strerror(exc.errno), str(path))
    return exc


def _write_into_empty(files: dict[str, bytes], out: Path, private: bool, marker: str,
                      marker_text: bytes) -> int:
    """Write *files* straight into the existing empty folder *out* (kept with its permissions).

    There is no previous site to keep, so no swap: on failure everything written is
    removed again and *out* is left empty, as it was.
    """
    before = {p for p in out.iterdir()}
    writer = SiteWriter(out, private=private)
    try:
        writer.write_file(marker, marker_text)
        for rel in sorted(files):
            try:
                writer.write_file(rel, files[rel])
            except OSError as exc:
                raise _with_path(exc, out) from exc
    except BaseException:
        for rel in sorted(writer.written, reverse=True):
            out.joinpath(*rel.split("/")).unlink(missing_ok=True)
        made = sorted((p for p in out.rglob("*") if p.is_dir() and not p.is_symlink() and p not in before),
                      key=lambda p: len(p.parts), reverse=True)
        for p in made:
            try:
                p.rmdir()
            except OSError:
                pass
        raise
    return writer.bytes


def write_site(files: dict[str, bytes], out: Path, *, private: bool = False, marker: str = MARKER,
               marker_text: bytes = MARKER_TEXT) -> int:
    """Write *files* into a temporary sibling of *out* and swap it in; return bytes written.

    *private* writes folders 0700 and files 0600 (a restricted build or export). An
    existing empty *out* folder is kept (with its permissions) and written into directly.
    """
    out = Path(out).absolute()
    if out.is_symlink():
        raise HcpsiteError(f"{out}: is a symbolic link; name the folder itself")
    out = out.resolve()
    try:
        out.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise _with_path(exc, out.parent) from exc
    clean_stale(out, marker)
    pid = os.getpid()
    tmp = out.parent / f"{TMP_PREFIX}{out.name}-{pid}"
    aside = out.parent / f"{TMP_PREFIX}{out.name}-{pid}-old"
    if out.is_dir() and not any(out.iterdir()):
        return _write_into_empty(files, out, private, marker, marker_text)
    for p in (tmp, aside):
        if p.exists() or p.is_symlink():
            if p.is_dir() and not p.is_symlink() and not any(p.iterdir()):
                p.rmdir()  # an empty folder of an earlier process with this id
            elif not (p / marker).is_file():
                raise HcpsiteError(f"{p}: is in the way and was not made by hcpsite; remove it")
            else:
                remove_tool_folder(p, marker)
    try:
        tmp.mkdir(mode=PRIVATE_DIR_MODE if private else 0o777)
    except OSError as exc:
        raise _with_path(exc, tmp) from exc
    try:
        writer = SiteWriter(tmp, private=private)
        writer.write_file(marker, marker_text)
        names = sorted(files)
        pause = _pause_seconds()
        for i, rel in enumerate(names):
            if pause and i == len(names) // 2:
                log.info("pausing %.1f s halfway through writing (%s)", pause, PAUSE_ENV)
                time.sleep(pause)
            try:
                writer.write_file(rel, files[rel])
            except OSError as exc:
                raise _with_path(exc, out) from exc
        if out.exists():
            os.rename(out, aside)
        try:
            os.rename(tmp, out)
        except OSError:
            if aside.exists() and not out.exists():
                os.rename(aside, out)
            raise
    except BaseException:
        if tmp.exists():
            remove_tool_folder(tmp, marker)
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
        raise
    remove_tool_folder(aside, marker)
    return writer.bytes


def build_site(root: Path, out: Path | None = None, *, strict: bool = False,
               restricted: bool = False) -> BuildReport:
    """Build the site of the programme at *root* into *out* (default root/_site)."""
    from .site import render_site
    root = Path(root)
    out = Path(out) if out is not None else root / DEFAULT_OUT
    check_output(root, out)
    clean_stale(Path(out).resolve())
    with progress.step("build"):
        ctx = prepare(root, strict=strict, restricted=restricted)
        with progress.step("pages"):
            build_pages(ctx)
        with progress.step("render"):
            files = render_site(ctx)
            files.update(narrative_images(root, set(files)))
        with progress.step("write"):
            size = write_site(files, out, private=restricted)
    pages = sorted(p.slug for p in ctx.pages if restricted or not p.restricted)
    log.info("built %d pages (%d files, %d bytes) into %s", len(pages), len(files) + 1, size, out)
    return BuildReport(out=out.resolve(), pages=pages, files=len(files) + 1, bytes=size,
                       findings=ctx.programme.findings, stages=list(STAGE_NAMES),
                       restricted=restricted, context=ctx)
