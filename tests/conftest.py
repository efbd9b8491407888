"""Shared fixtures: a built site_example (built once per test session) and env helpers."""
from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import pytest

REPO = Path(__file__).resolve().parent.parent
#: the example programme (HCPSITE_EXAMPLE may point the shared fixture at another programme folder)
EXAMPLE = Path(os.environ.get("HCPSITE_EXAMPLE") or REPO / "site_example")
#: 2026-01-01T00:00:00Z: after the example's review period, so no record lies in the future.
FIXED_EPOCH = "1767225600"
#: a published-in-the-tests key: codes are stable across test runs, and not the built-in key
TEST_KEY = "test-key-not-a-secret"


@contextlib.contextmanager
def env(**values: str | None) -> Iterator[None]:
    """Set (or, with None, unset) environment variables for the duration of the block."""
    old = {k: os.environ.get(k) for k in values}
    try:
        for k, v in values.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
        yield
    finally:
        for k, v in old.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


@dataclass
class BuiltSite:
    """A site built once for the session: where it is and what the build reported."""

    root: Path
    out: Path
    report: Any

    @property
    def context(self) -> Any:
        """Return the build's SiteContext (programme, results, rules, coder)."""
        return self.report.context

    def files(self) -> list[Path]:
        """Return every output file, sorted."""
        return sorted(p for p in self.out.rglob("*") if p.is_file())

    def pages(self) -> list[Path]:
        """Return every HTML page, sorted."""
        return sorted(self.out.rglob("*.html"))

    def html(self, slug: str) -> str:
        """Return the text of page *slug* ('index', 'exposure', 'exposure/g01')."""
        return (self.out / f"{slug}.html").read_text(encoding="utf-8")


def build_fixed(root: Path, out: Path, **kw: Any) -> Any:
    """Build *root* into *out* with a fixed SOURCE_DATE_EPOCH and person-code key."""
    from generator.build import build_site
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        return build_site(root, out, **kw)


@pytest.fixture(scope="session")
def built_example(tmp_path_factory: pytest.TempPathFactory) -> BuiltSite:
    """Build site_example once into a temporary folder (skipped until site_example exists)."""
    if not (EXAMPLE / "programme.yaml").is_file():
        pytest.skip("site_example/programme.yaml does not exist yet (run 'hcpsite demo site_example')")
    out = tmp_path_factory.mktemp("example") / "site"
    report = build_fixed(EXAMPLE, out)
    return BuiltSite(root=EXAMPLE, out=out, report=report)
