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


# ---------------------------------------------------------------------------------------
# screen layout: no table cut off at a desktop and a phone width; the cautions once per page

#: the widths the screen layout is checked at: a wide desktop window, and phones below the
#: site's 640 px breakpoint: 385 px (a 400 px window less its scrollbar: it once showed an
#: overflow that 400 px did not) and 320 px, the narrowest (an overflow at 360 px showed
#: there too). Each width opens every page, about half a minute on a slow CI machine.
LAYOUT_WIDTHS = (1400, 385, 320)

#: For every table of a page (folded blocks opened): is it cut off? A table is in view when it fits the
#: window, or when the box that scrolls it sideways fits the window and keeps its first column in view.
LAYOUT_JS = """() => {
  const cautions = document.getElementById('cautions');
  const strip = document.querySelector('.caution-strip');
  const main = document.querySelector('main');
  const state = {
    cautions: !!cautions, cautionsTag: cautions ? cautions.tagName : '', cautionsOpen: !!(cautions && cautions.open),
    cautionsHeight: cautions ? Math.round(cautions.getBoundingClientRect().height) : 0,
    cautionsAfterMain: !!(cautions && main && (main.compareDocumentPosition(cautions) & Node.DOCUMENT_POSITION_FOLLOWING)),
    strip: strip ? strip.textContent : '',
    stripBeforeMain: !!(strip && main && (strip.compareDocumentPosition(main) & Node.DOCUMENT_POSITION_FOLLOWING)),
    cautionBoxes: document.querySelectorAll('.caution').length,
  };
  document.querySelectorAll('details').forEach(d => { d.open = true; });
  const vw = document.documentElement.clientWidth;
  const cut = [];
  let tables = 0, scrolling = 0;
  for (const t of document.querySelectorAll('table')) {
    const r = t.getBoundingClientRect();
    if (!r.width) continue;
    tables += 1;
    const head = (t.querySelector('th') || {}).textContent || '';
    let scroller = null;
    for (let e = t; e && e !== document.body; e = e.parentElement) {
      const ox = getComputedStyle(e).overflowX;
      if (ox === 'auto' || ox === 'scroll') { scroller = e; break; }
    }
    if (!scroller || scroller.scrollWidth <= scroller.clientWidth + 1) {
      if (r.left < -1 || r.right > vw + 1) cut.push(`${head}: ${Math.round(r.left)}..${Math.round(r.right)} of ${vw}`);
      continue;
    }
    scrolling += 1;
    const s = scroller.getBoundingClientRect();
    if (s.left < -1 || s.right > vw + 1) { cut.push(`${head}: its scroll box spans ${Math.round(s.left)}..${Math.round(s.right)} of ${vw}`); continue; }
    const first = t.querySelector('tbody tr > :first-child');
    if (first && getComputedStyle(first).position !== 'sticky') cut.push(`${head}: scrolls without its first column in view`);
  }
  return {state, cut, tables, scrolling, overflow: document.documentElement.scrollWidth - vw};
}"""


@pytest.fixture(scope="module")
def layouts(context, site: Path) -> dict[int, dict[str, dict]]:
    """Open every page at each width of LAYOUT_WIDTHS and measure its tables and its cautions."""
    found: dict[int, dict[str, dict]] = {}
    page = context.new_page()
    try:
        for width in LAYOUT_WIDTHS:
            page.set_viewport_size({"width": width, "height": 900})
            found[width] = {}
            for rel in _html_files(site):
                page.goto((site / rel).resolve().as_uri(), wait_until="load", timeout=60000)
                found[width][rel] = page.evaluate(LAYOUT_JS)
    finally:
        page.close()
    return found


@pytest.mark.parametrize("width", LAYOUT_WIDTHS)
def test_no_table_is_cut_off(layouts: dict[int, dict[str, dict]], width: int) -> None:
    pages = layouts[width]
    assert sum(m["tables"] for m in pages.values()) > 20, "the example should have tables to measure"
    cut = {rel: m["cut"] for rel, m in pages.items() if m["cut"]}
    assert not cut, f"tables cut off at {width} px: {cut}"
    sideways = {rel: m["overflow"] for rel, m in pages.items() if m["overflow"] > 1}
    assert not sideways, f"pages that scroll sideways at {width} px: {sideways}"
    if width < 500:  # a phone: the wide tables scroll in their own box
        assert sum(m["scrolling"] for m in pages.values()) > 0


def test_cautions_strip_on_top_and_one_folded_block_at_the_foot(layouts: dict[int, dict[str, dict]]) -> None:
    for rel, m in layouts[1400].items():
        st = m["state"]
        assert "qualified audiologist or physician" in st["strip"] and st["stripBeforeMain"], rel
        assert st["cautions"] and st["cautionsTag"] == "DETAILS", f"{rel}: the cautions are not one folded block"
        assert st["cautionBoxes"] >= 2, f"{rel}: the folded block lacks the full cautions"
        if rel == "review.html":  # the printable review shows them unfolded, before the sign-off
            assert st["cautionsOpen"], rel
            continue
        assert not st["cautionsOpen"] and st["cautionsAfterMain"], f"{rel}: the cautions should be folded at the foot"
        assert st["cautionsHeight"] < 80, f"{rel}: the folded cautions take {st['cautionsHeight']} px"


def test_strip_link_unfolds_the_cautions(context, site: Path) -> None:
    page = context.new_page()
    try:
        page.goto((site / "exposure.html").resolve().as_uri(), wait_until="load")
        assert page.evaluate("() => document.getElementById('cautions').open") is False
        page.click(".caution-strip a[href='#cautions']")
        page.wait_for_function("() => document.getElementById('cautions').open")
        assert page.locator("#cautions .caution-general").is_visible()
    finally:
        page.close()


# ---------------------------------------------------------------------------------------
# sorting and filtering of long tables (assets/tables.js)

#: the texts of one column of the visible body rows of the table holding a column headed `head`
COLUMN_JS = """([head, col]) => {
  const table = [...document.querySelectorAll('table.data')].find(t => t.tHead && [...t.tHead.rows[0].cells]
      .some(c => c.textContent.trim() === head));
  const idx = [...table.tHead.rows[0].cells].findIndex(c => c.textContent.trim() === col);
  return [...table.tBodies[0].rows].filter(r => !r.hidden).map(r => r.cells[idx].textContent.trim());
}"""


def _natural(text: str) -> tuple:
    """Sort key of text in natural order, digits before letters, case ignored (as Intl.Collator numeric)."""
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part.lower())
                 for part in re.findall(r"\d+|[^\d]+", text))


def test_actions_table_sorts_and_filters(context, site: Path) -> None:
    page = context.new_page()
    page.set_viewport_size({"width": 1400, "height": 900})
    try:
        page.goto((site / "actions.html").resolve().as_uri(), wait_until="load")
        table = page.locator("table.sortable", has=page.locator("th", has_text=re.compile(r"^\s*Subject\s*$")))
        assert table.count() == 1, "the action list has no sorting"
        original = page.evaluate(COLUMN_JS, ["Due", "Subject"])
        due = page.evaluate(COLUMN_JS, ["Due", "Due"])
        assert len(original) >= 12
        subject = table.locator("thead th", has_text=re.compile(r"^\s*Subject\s*$"))
        subject.click()
        assert subject.get_attribute("aria-sort") == "ascending"
        assert page.evaluate(COLUMN_JS, ["Due", "Subject"]) == sorted(original, key=_natural)
        subject.click()
        assert subject.get_attribute("aria-sort") == "descending"
        assert page.evaluate(COLUMN_JS, ["Due", "Subject"]) == sorted(original, key=_natural, reverse=True)
        subject.click()  # the third click restores the page's own order (most urgent first)
        assert subject.get_attribute("aria-sort") is None
        assert page.evaluate(COLUMN_JS, ["Due", "Subject"]) == original
        table.locator("thead th", has_text=re.compile(r"^\s*Due\s*$")).click()
        dated = [d for d in due if re.fullmatch(r"\d{4}-\d{2}-\d{2}", d)]
        assert page.evaluate(COLUMN_JS, ["Due", "Due"])[:len(dated)] == sorted(dated)

        kinds = page.evaluate(COLUMN_JS, ["Due", "Kind"])
        word = "training" if "training" in kinds else kinds[0].split()[0]
        rows = table.evaluate("t => [...t.tBodies[0].rows].map(r => [...r.cells].map(c => c.textContent.trim())"
                              ".join(' ').toLowerCase())")
        expected = sum(word in r for r in rows)
        filt = table.locator("xpath=ancestor::div[contains(@class,'table-block')]//input[@type='search']")
        filt.fill(word)
        shown = page.evaluate(COLUMN_JS, ["Due", "Kind"])
        assert 0 < len(shown) == expected < len(rows)
        count = table.locator("xpath=ancestor::div[contains(@class,'table-block')]//*[contains(@class,'table-count')]")
        assert count.inner_text() == f"{expected} of {len(rows)} rows"
        filt.fill("")
        assert len(page.evaluate(COLUMN_JS, ["Due", "Kind"])) == len(rows)
    finally:
        page.close()


def test_sorting_is_numeric_aware(context, site: Path, tmp_path: Path) -> None:
    # numbers as the site prints them (thousands separators, units, a minus sign), blanks last
    values = ["1,234", "99", "-3.5", "12 %", "", "\u2013", "2.5", "100", "\u22127", "10", "9", "1,000", "85 dB(A)"]
    rows = "".join(f"<tr><td>R{i}</td><td class=\"num\">{v}</td></tr>" for i, v in enumerate(values))
    html = (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><script src="{(site / "assets" / "tables.js").as_uri()}">'
            f'</script></head><body><div class="table-wrap"><table class="data"><thead><tr><th>Row</th><th class="num">Value</th>'
            f"</tr></thead><tbody>{rows}</tbody></table></div></body></html>")
    test_page = tmp_path / "numbers.html"
    test_page.write_text(html, encoding="utf-8")
    page = context.new_page()
    try:
        page.goto(test_page.as_uri(), wait_until="load")
        page.locator("th", has_text="Value").click()
        got = page.evaluate(COLUMN_JS, ["Row", "Value"])
        assert got == ["\u22127", "-3.5", "2.5", "9", "10", "12 %", "85 dB(A)", "99", "100", "1,000", "1,234", "", "\u2013"]
        page.locator("th", has_text="Value").click()
        got = page.evaluate(COLUMN_JS, ["Row", "Value"])
        assert got[:3] == ["1,234", "1,000", "100"] and got[-2:] == ["", "\u2013"]  # blanks stay last
    finally:
        page.close()


def test_pdf_page_counter() -> None:
    # two page objects and the page-tree object (/Pages is not a page)
    sample = b"%PDF-1.4 1 0 obj <</Type /Pages /Count 2>> 2 0 obj <</Type /Page>> 3 0 obj <</Type/Page /X 1>>"
    assert _pdf_pages(sample) == 2
