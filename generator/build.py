"""The build pipeline: load -> compute stages -> page builders -> render -> atomic write.

Nothing is written before the inputs validated. The site is written into a temporary
sibling folder carrying a marker file, then swapped in for the previous site, so a
failed or killed build leaves the previous site as it was. The tool only ever replaces
a folder that carries its marker.
"""
from __future__ import annotations

import datetime as dt
import importlib
import importlib.util
import logging
import os
import re
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any

from . import clock, progress
from .config import CONFIG_FILE
from .findings import Findings, HcpsiteError, UsageError
from .model import Programme
from .pages import NARRATIVE, SECTIONS, module_name
from .pages.base import Page, SiteContext
from .privacy import make_coder, small_groups
from .rules import rule_sets_for

log = logging.getLogger(__name__)

#: Compute stages in order: (result name, module exposing compute(programme, results)).
STAGES: tuple[tuple[str, str], ...] = (
    ("exposure", "generator.exposure"),
    ("protection", "generator.protection"),
    ("hearing", "generator.hearing"),
    ("compliance", "generator.compliance"),
)

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
    skipped_stages: list[str] = field(default_factory=list)
    skipped_sections: list[str] = field(default_factory=list)
    restricted: bool = False
    #: the SiteContext of the build (programme, results, rule sets, coder), for tests and tools
    context: Any = field(default=None, repr=False)


def validation_today() -> dt.date:
    """Return the date future dates are judged against: SOURCE_DATE_EPOCH (UTC) or the system date."""
    return clock.today()


def module_available(name: str) -> bool:
    """True when module *name* exists (a missing module during development is skipped)."""
    try:
        return importlib.util.find_spec(name) is not None
    except ModuleNotFoundError:
        return False


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


def compute(programme: Programme) -> tuple[dict[str, Any], list[str]]:
    """Run the compute stages in order; add their findings to the programme's. Return (results, skipped)."""
    results: dict[str, Any] = {}
    skipped: list[str] = []
    for name, module in STAGES:
        if not module_available(module):
            log.warning("stage %s (%s) is not available; skipped", name, module)
            skipped.append(name)
            continue
        mod = importlib.import_module(module)
        result = mod.compute(programme, results)
        results[name] = result
        programme.findings.extend(sorted(getattr(result, "findings", None) or []))
    return results, skipped


def make_context(programme: Programme, results: dict[str, Any], restricted: bool = False) -> SiteContext:
    """Return the SiteContext: rule sets, person codes and suppressed groups; adds the no-key warning."""
    cfg = programme.config
    people = programme.table("people")
    code, warning = make_coder(people, os.environ.get(cfg.privacy.id_key_env) or None, cfg.privacy.id_key_env)
    if warning is not None:
        programme.findings.extend([warning])
    return SiteContext(programme=programme, results=results, rules=rule_sets_for(cfg), code=code,
                       suppressed_groups=small_groups(people, cfg.privacy.min_group_size),
                       restricted=restricted)


def prepare(root: Path, *, strict: bool = False, restricted: bool = False) -> tuple[SiteContext, list[str]]:
    """Load, validate and compute; return the context and skipped stages. Raise HcpsiteError on failure."""
    programme = load(root, strict)
    results, skipped = compute(programme)
    ctx = make_context(programme, results, restricted)
    _stop_if_failed(root, programme.findings, strict)
    return ctx, skipped


def _add_pages(ctx: SiteContext, pages: list[Page]) -> None:
    known = {id(p) for p in ctx.pages}
    ctx.pages.extend(p for p in pages if id(p) not in known)


def build_pages(ctx: SiteContext) -> list[str]:
    """Run the page builders in SECTIONS order (narrative pages after the overview); return skipped sections."""
    skipped: list[str] = []
    order = [s for s, _ in SECTIONS]
    order.insert(order.index("index") + 1, NARRATIVE)
    for section in order:
        module = module_name(section)
        if not module_available(module):
            log.warning("section %s (%s) is not available; skipped", section, module)
            skipped.append(section)
            continue
        mod = importlib.import_module(module)
        _add_pages(ctx, list(mod.build(ctx)))
    return skipped


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


def check_output(root: Path, out: Path) -> None:
    """Raise HcpsiteError unless *out* is a folder the tool may replace."""
    root, out = Path(root).resolve(), Path(out).resolve()
    if out == root:
        raise HcpsiteError(f"{out}: the output folder cannot be the programme folder")
    if _inside(root, out):
        raise HcpsiteError(f"{out}: the output folder cannot contain the programme folder")
    for name in INPUT_FOLDERS:
        if _inside(out, root / name):
            raise HcpsiteError(f"{out}: the output folder cannot lie inside the programme's {name}/ folder")
    if out.exists() or out.is_symlink():
        if not out.is_dir() or out.is_symlink():
            raise HcpsiteError(f"{out}: exists and is not a folder")
        if (out / CONFIG_FILE).exists() or (out / "data").exists():
            raise HcpsiteError(f"{out}: looks like a programme folder (has programme.yaml or data/); "
                               f"choose another output folder")
        if not (out / MARKER).is_file() and any(out.iterdir()):
            raise HcpsiteError(f"{out}: exists and was not made by hcpsite (no {MARKER} file); "
                               f"remove it or choose another output folder")


class SiteWriter:
    """Write files below one folder only, each path at most once."""

    def __init__(self, folder: Path) -> None:
        self.folder = Path(folder)
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
        target.parent.mkdir(parents=True, exist_ok=True)
        with open(target, "xb") as fh:
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


def clean_stale(out: Path) -> None:
    """Remove temporary folders of dead builds beside *out*; restore a site left aside by a killed swap."""
    parent, prefix = out.parent, f"{TMP_PREFIX}{out.name}-"
    if not parent.is_dir():
        return
    for entry in sorted(parent.iterdir()):
        if not entry.name.startswith(prefix) or not entry.is_dir():
            continue
        m = _TMP_NAME.match(entry.name[len(prefix):])
        if not m or _alive(int(m.group("pid"))) or not (entry / MARKER).is_file():
            continue
        if m.group("old") and not out.exists():
            log.warning("restoring the previous site from %s", entry)
            os.rename(entry, out)
            continue
        shutil.rmtree(entry, ignore_errors=True)


def _pause_seconds() -> float:
    raw = os.environ.get(PAUSE_ENV, "")
    try:
        return float(raw) if raw else 0.0
    except ValueError:
        return 0.0


def write_site(files: dict[str, bytes], out: Path) -> int:
    """Write *files* into a temporary sibling of *out* and swap it in; return bytes written."""
    out = Path(out).resolve()
    out.parent.mkdir(parents=True, exist_ok=True)
    clean_stale(out)
    pid = os.getpid()
    tmp = out.parent / f"{TMP_PREFIX}{out.name}-{pid}"
    aside = out.parent / f"{TMP_PREFIX}{out.name}-{pid}-old"
    for p in (tmp, aside):
        if p.exists():
            shutil.rmtree(p)
    tmp.mkdir()
    try:
        writer = SiteWriter(tmp)
        writer.write_file(MARKER, MARKER_TEXT)
        names = sorted(files)
        pause = _pause_seconds()
        for i, rel in enumerate(names):
            if pause and i == len(names) // 2:
                log.info("pausing %.1f s halfway through writing (%s)", pause, PAUSE_ENV)
                time.sleep(pause)
            writer.write_file(rel, files[rel])
        if out.exists():
            os.rename(out, aside)
        try:
            os.rename(tmp, out)
        except OSError:
            if aside.exists() and not out.exists():
                os.rename(aside, out)
            raise
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    shutil.rmtree(aside, ignore_errors=True)
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
        ctx, skipped_stages = prepare(root, strict=strict, restricted=restricted)
        with progress.step("pages"):
            skipped_sections = build_pages(ctx)
        with progress.step("render"):
            files = render_site(ctx)
            files.update(narrative_images(root, set(files)))
        with progress.step("write"):
            size = write_site(files, out)
    pages = sorted(p.slug for p in ctx.pages if restricted or not p.restricted)
    log.info("built %d pages (%d files, %d bytes) into %s", len(pages), len(files) + 1, size, out)
    return BuildReport(out=out.resolve(), pages=pages, files=len(files) + 1, bytes=size,
                       findings=ctx.programme.findings, stages=list(ctx.results),
                       skipped_stages=skipped_stages, skipped_sections=skipped_sections,
                       restricted=restricted, context=ctx)
