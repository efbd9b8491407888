"""The built example site in a real browser: Debian's chromium driven by Playwright.

Every page is opened once from ``file://``; what it did (console errors, requests, charts
drawn, links) is recorded, and the tests below judge the records. Screenshots and the
printed review go to ``tests/artifacts/`` for a person to look at.
"""
from __future__ import annotations

import re
import shutil
from collections import deque
from dataclasses import dataclass, field
from pathlib import Path
from urllib.parse import unquote, urlsplit

import pytest

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "site_example"
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
               "--disable-component-update", "--disable-sync"]
#: URL schemes that do not leave the machine (inline data, object URLs, blank frames).
LOCAL_SCHEMES = ("file:", "data:", "blob:", "about:")
#: Selector of plot containers: plotly's own div class, and the class it adds once drawn.
PLOT_SELECTOR = ".plotly-graph-div, .js-plotly-plot"
DESKTOP = {"width": 1366, "height": 900}
PHONE = {"width": 390, "height": 844}

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="Debian chromium (/usr/bin/chromium) is not installed; "
                       "apt-get install chromium"),
]


@dataclass
class Visit:
    """What one page did in the browser."""

    rel: str
    console_errors: list[str] = field(default_factory=list)
    outside_requests: list[str] = field(default_factory=list)
    plots: int = 0
    plots_drawn: int = 0
    links: list[str] = field(default_factory=list)
    load_error: str = ""


def _site_from_fixture(request: pytest.FixtureRequest) -> Path | None:
    """Return the site folder of the shared ``built_example`` fixture, if there is one."""
    try:
        built = request.getfixturevalue("built_example")
    except pytest.FixtureLookupError:
        return None
    except pytest.skip.Exception as exc:  # the browser checks run whenever chromium is there
        pytest.fail(f"the shared built_example fixture skipped: {exc}")
    out = Path(built.out)
    assert (out / "index.html").is_file(), f"built_example wrote no index.html into {out}"
    return out


@pytest.fixture(scope="module")
def site(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Return the folder of the built site_example (shared fixture, or built here)."""
    found = _site_from_fixture(request)
    if found is not None:
        return found
    from generator.build import build_site

    prog = tmp_path_factory.mktemp("browser") / "programme"
    shutil.copytree(EXAMPLE, prog, ignore=shutil.ignore_patterns("_site"))
    out = prog.parent / "site"
    build_site(prog, out=out)
    assert (out / "index.html").is_file(), "the build wrote no index.html"
    return out


@pytest.fixture(scope="module")
def browser():
    """Launch Debian's chromium once for the module."""
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=str(CHROMIUM), args=LAUNCH_ARGS)
        try:
            yield b
        finally:
            b.close()


def _html_files(site: Path) -> list[str]:
    return sorted(p.relative_to(site).as_posix() for p in site.rglob("*.html"))


def _is_internal(href: str) -> bool:
    low = href.strip().lower()
    return bool(low) and not low.startswith(("http:", "https:", "mailto:", "#", "javascript:", "tel:", "data:"))


def _target(site: Path, page_rel: str, href: str) -> Path:
    """Return the file an internal link of *page_rel* points at."""
    path = unquote(urlsplit(href).path)
    return (site / page_rel).parent.joinpath(path).resolve() if path else (site / page_rel).resolve()


def _visit(page, site: Path, rel: str, current: dict) -> Visit:
    """Open one page in the shared tab and record what it did."""
    visit = current["visit"] = Visit(rel)
    try:
        page.goto((site / rel).resolve().as_uri(), wait_until="load", timeout=60000)
        visit.plots = page.locator(PLOT_SELECTOR).count()
        if visit.plots:
            try:
                page.wait_for_function(
                    "sel => [...document.querySelectorAll(sel)].every(d => d.querySelector('.main-svg'))",
                    arg=PLOT_SELECTOR, timeout=20000)
            except Exception:  # recorded below as undrawn plots
                pass
        visit.plots_drawn = page.evaluate(
            "sel => [...document.querySelectorAll(sel)].filter(d => d.querySelector('.main-svg')).length",
            PLOT_SELECTOR)
        visit.links = page.evaluate("() => [...document.querySelectorAll('a[href]')].map(a => a.getAttribute('href'))")
    except Exception as exc:  # a page that cannot load is a failure of every check
        visit.load_error = str(exc)
    return visit


@pytest.fixture(scope="module")
def context(browser):
    """Return one browser context for the module (its cache serves plotly.min.js once)."""
    ctx = browser.new_context(viewport=DESKTOP, device_scale_factor=1)
    try:
        yield ctx
    finally:
        ctx.close()


@pytest.fixture(scope="module")
def visits(context, site: Path) -> dict[str, Visit]:
    """Open every page of the site once, one after the other in one tab."""
    pages = _html_files(site)
    assert "index.html" in pages, "the site has no index.html"
    current: dict = {"visit": Visit("")}
    page = context.new_page()
    page.on("console", lambda m: current["visit"].console_errors.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: current["visit"].console_errors.append(f"uncaught: {e}"))
    page.on("requestfailed", lambda r: current["visit"].console_errors.append(f"failed request: {r.url}"))
    page.on("request", lambda r: None if r.url.startswith(LOCAL_SCHEMES)
            else current["visit"].outside_requests.append(r.url))
    try:
        return {rel: _visit(page, site, rel, current) for rel in pages}
    finally:
        page.close()


def test_every_page_loads_without_console_errors(visits: dict[str, Visit]) -> None:
    bad = {r: v.load_error or v.console_errors for r, v in visits.items() if v.load_error or v.console_errors}
    assert not bad, f"pages with console errors: {bad}"


def test_no_page_requests_anything_but_local_files(visits: dict[str, Visit]) -> None:
    bad = {r: v.outside_requests for r, v in visits.items() if v.outside_requests}
    assert not bad, f"pages that reach outside file://: {bad}"


def test_every_chart_draws_an_svg(visits: dict[str, Visit]) -> None:
    assert sum(v.plots for v in visits.values()) > 0, "no page of the example has a chart"
    bad = {r: f"{v.plots_drawn}/{v.plots} drawn" for r, v in visits.items() if v.plots_drawn != v.plots}
    assert not bad, f"charts that did not draw: {bad}"


def test_every_internal_link_resolves(site: Path, visits: dict[str, Visit]) -> None:
    broken = []
    for rel, v in visits.items():
        for href in v.links:
            if _is_internal(href):
                target = _target(site, rel, href)
                if not target.is_file() or site.resolve() not in target.parents:
                    broken.append(f"{rel} -> {href}")
    assert not broken, f"broken internal links: {broken}"


def test_navigation_reaches_every_page(site: Path, visits: dict[str, Visit]) -> None:
    root = site.resolve()
    seen, queue = {"index.html"}, deque(["index.html"])
    while queue:
        rel = queue.popleft()
        for href in visits[rel].links if rel in visits else ():
            if not _is_internal(href):
                continue
            target = _target(site, rel, href)
            if target.suffix == ".html" and target.is_file() and root in target.parents:
                t = target.relative_to(root).as_posix()
                if t not in seen:
                    seen.add(t)
                    queue.append(t)
    unreached = sorted(set(visits) - seen)
    assert not unreached, f"pages no link chain from index.html reaches: {unreached}"


def _pdf_pages(pdf: bytes) -> int:
    """Return the number of page objects in a PDF (chromium writes them uncompressed)."""
    return len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf))


def test_review_prints_to_a_multi_page_pdf(context, site: Path) -> None:
    review = site / "review.html"
    assert review.is_file(), "the site has no printable review.html"
    page = context.new_page()
    try:
        page.goto(review.resolve().as_uri(), wait_until="load")
        page.emulate_media(media="print")
        pdf = page.pdf(format="A4", print_background=True)
    finally:
        page.close()
    assert pdf.startswith(b"%PDF-")
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / "review.pdf").write_bytes(pdf)
    assert _pdf_pages(pdf) > 1, "the printed review has a single page"


@pytest.mark.parametrize("name,viewport", [("desktop", DESKTOP), ("phone", PHONE)])
def test_index_screenshots(context, site: Path, name: str, viewport: dict) -> None:
    page = context.new_page()
    page.set_viewport_size(viewport)
    try:
        page.goto((site / "index.html").resolve().as_uri(), wait_until="load")
        page.wait_for_timeout(300)
        ARTIFACTS.mkdir(exist_ok=True)
        shot = page.screenshot(path=str(ARTIFACTS / f"index-{name}.png"), full_page=False)
        page.screenshot(path=str(ARTIFACTS / f"index-{name}-full.png"), full_page=True)
        overflow = page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth")
    finally:
        page.close()
    assert shot[:8] == b"\x89PNG\r\n\x1a\n"
    assert overflow <= 1, f"index.html scrolls sideways by {overflow}px at {viewport['width']}px wide"


def test_pdf_page_counter() -> None:
    # two page objects and the page-tree object (/Pages is not a page)
    sample = b"%PDF-1.4 1 0 obj <</Type /Pages /Count 2>> 2 0 obj <</Type /Page>> 3 0 obj <</Type/Page /X 1>>"
    assert _pdf_pages(sample) == 2
