"""The printable review prints to PDF in headless Chromium with every chart drawn.

The site is site_example when it exists (the shared session fixture), otherwise a small
demo programme built here. Chromium is driven by its own command line (``--print-to-pdf``
and ``--dump-dom``); the test is skipped with a reason when /usr/bin/chromium is absent.
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from tests.conftest import EXAMPLE, build_fixed

CHROMIUM = Path("/usr/bin/chromium")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", "--disable-background-networking",
         "--disable-component-update", "--disable-sync"]
TIMEOUT_S = 240

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="Debian chromium (/usr/bin/chromium) is not installed; "
                       "apt-get install chromium to run the print test"),
]


@pytest.fixture(scope="module")
def review_site(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """Return a built site folder holding review.html."""
    if (EXAMPLE / "programme.yaml").is_file():
        return request.getfixturevalue("built_example").out
    from generator.demo import write_demo
    root = tmp_path_factory.mktemp("printprog") / "programme"
    write_demo(root, people=40, years=3, seed=7)
    out = root.parent / "site"
    build_fixed(root, out)
    return out


def _chromium(args: list[str], profile: Path) -> subprocess.CompletedProcess:
    return subprocess.run([str(CHROMIUM), *FLAGS, f"--user-data-dir={profile}", *args], capture_output=True,
                          timeout=TIMEOUT_S, check=False)


def _pdf_pages(data: bytes) -> int:
    """Count the pages of a PDF: page objects (``/Type /Page``), or the largest page-tree ``/Count``."""
    objects = len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", data))
    counts = [int(n) for n in re.findall(rb"/Type\s*/Pages\b[^>]*?/Count\s+(\d+)", data)]
    return max([objects, *counts])


def test_review_prints_to_pdf_with_every_chart(review_site: Path, tmp_path: Path) -> None:
    page = review_site / "review.html"
    assert page.is_file()
    html = page.read_text(encoding="utf-8")
    plot_ids = re.findall(r'<div id="(review-\d+)" class="plotly-graph-div"', html)
    assert plot_ids, "the review carries no chart"
    assert html.count('class="review-part"') >= 3
    assert "break-before: page" in html

    pdf = tmp_path / "review.pdf"
    res = _chromium(["--virtual-time-budget=10000", "--no-pdf-header-footer", f"--print-to-pdf={pdf}",
                     page.as_uri()], tmp_path / "profile-pdf")
    assert pdf.is_file() and pdf.stat().st_size > 0, res.stderr.decode(errors="replace")[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF")
    # one sheet per section at least: cover + every review part
    assert _pdf_pages(data) > html.count('class="review-part"')

    res = _chromium(["--virtual-time-budget=10000", "--dump-dom", page.as_uri()], tmp_path / "profile-dom")
    dom = res.stdout.decode("utf-8", errors="replace")
    assert dom, res.stderr.decode(errors="replace")[-2000:]
    undrawn = []
    for pid in plot_ids:
        m = re.search(r'<div id="' + pid + r'"[^>]*>(.*?)</figure>', dom, flags=re.S)
        if m is None or "main-svg" not in m.group(1):
            undrawn.append(pid)
    assert not undrawn, f"charts not drawn in the review: {undrawn}"


# ---------------------------------------------------------------------------------------
# the review on paper: A4 and US Letter, measured in Chromium driven by Playwright

MM = 96 / 25.4  # CSS pixels per millimetre
PT_PER_MM = 72 / 25.4
#: sheet sizes in mm (ISO 216 A4; ANSI/ASME Y14.1 US Letter, 8.5 x 11 in)
SHEETS = {"A4": (210.0, 297.0), "Letter": (215.9, 279.4)}
#: the left and right page margins the stock style sheet sets (templates/style.css, @page)
SIDE_MARGIN_MM = 14.0

#: Every table and element of the review laid out for print at the sheet's content width: what overflows?
PRINT_JS = """() => {
  const vw = document.documentElement.clientWidth;
  const tables = [], wide = [];
  let n = 0;
  for (const t of document.querySelectorAll('table')) {
    const r = t.getBoundingClientRect();
    if (!r.width) continue;
    n += 1;
    const head = (t.querySelector('th') || {}).textContent || '';
    if (t.scrollWidth > t.parentElement.clientWidth + 1 || r.right > vw + 1 || r.left < -1)
      tables.push(`${head.trim()}: ${t.scrollWidth} px in ${t.parentElement.clientWidth} px`);
  }
  // the page's own content (plotly keeps an off-screen measuring svg of its own outside it)
  for (const e of document.querySelectorAll('header *, main *, #cautions *, footer *')) {
    const r = e.getBoundingClientRect();
    if (r.width && (r.right > vw + 1 || r.left < -1)) wide.push(`${e.tagName}.${e.className && e.className.baseVal !== undefined ? e.className.baseVal : e.className}`);
  }
  const bars = [...document.querySelectorAll('.modebar, .modebar-container')].filter(e => e.getClientRects().length);
  return {tables, wide: wide.slice(0, 20), nTables: n, docWidth: document.documentElement.scrollWidth, vw,
          modebars: bars.length, plots: document.querySelectorAll('.main-svg').length,
          cautionsShown: !!document.querySelector('#cautions .caution-general') &&
                         document.querySelector('#cautions .caution-general').getClientRects().length > 0};
}"""


@pytest.fixture(scope="module")
def pw_browser():
    """Launch Debian's chromium through Playwright once for the module."""
    sync_api = pytest.importorskip("playwright.sync_api")
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), args=FLAGS[1:])
        try:
            yield browser
        finally:
            browser.close()


@pytest.fixture(scope="module")
def printed(pw_browser, review_site: Path, tmp_path_factory: pytest.TempPathFactory) -> dict[str, dict]:
    """Lay the review out for print at each sheet's content width, measure it, and print it to PDF."""
    out = tmp_path_factory.mktemp("printed")
    found = {}
    for sheet, (width_mm, _height) in SHEETS.items():
        width = int((width_mm - 2 * SIDE_MARGIN_MM) * MM)
        page = pw_browser.new_page(viewport={"width": width, "height": 1000})
        try:
            page.goto((review_site / "review.html").as_uri(), wait_until="load", timeout=120000)
            page.wait_for_function("() => [...document.querySelectorAll('.plotly-graph-div')]"
                                   ".every(d => d.querySelector('.main-svg'))", timeout=60000)
            page.emulate_media(media="print")
            page.evaluate("() => window.dispatchEvent(new Event('beforeprint'))")
            page.wait_for_timeout(300)
            measured = page.evaluate(PRINT_JS)
        finally:
            page.close()
        # printed as a user would, from a wide window: the charts are redrawn to fit the sheet for print
        page = pw_browser.new_page(viewport={"width": 1400, "height": 900})
        try:
            page.goto((review_site / "review.html").as_uri(), wait_until="load", timeout=120000)
            page.wait_for_function("() => [...document.querySelectorAll('.plotly-graph-div')]"
                                   ".every(d => d.querySelector('.main-svg'))", timeout=60000)
            widths = "() => [...document.querySelectorAll('.js-plotly-plot')].map(d => d.offsetWidth)"
            before = page.evaluate(widths)
            pdf = out / f"review-{sheet}.pdf"
            page.pdf(path=str(pdf), format=sheet, print_background=True)
            page.wait_for_timeout(500)
            after = page.evaluate(widths)
        finally:
            page.close()
        found[sheet] = {"measured": measured, "pdf": pdf, "width": width, "charts": (before, after)}
    return found


@pytest.mark.parametrize("sheet", sorted(SHEETS))
def test_charts_return_to_the_window_width_after_printing(printed: dict[str, dict], sheet: str) -> None:
    before, after = printed[sheet]["charts"]
    assert before and min(before) > 700, "the charts of a 1400 px window should be wider than a sheet"
    assert after == before


@pytest.mark.parametrize("sheet", sorted(SHEETS))
def test_printed_review_fits_the_sheet(printed: dict[str, dict], sheet: str) -> None:
    m = printed[sheet]["measured"]
    assert m["nTables"] >= 5 and m["plots"] >= 3, m
    assert not m["tables"], f"tables wider than the {sheet} sheet: {m['tables']}"
    assert m["docWidth"] <= m["vw"] + 1 and not m["wide"], f"wider than the {sheet} sheet: {m['wide']}"
    assert m["modebars"] == 0, "the chart toolbar shows in print"
    assert m["cautionsShown"], "the cautions do not print"


@pytest.mark.parametrize("sheet", sorted(SHEETS))
def test_printed_review_has_the_sheet_size_and_a_page_per_section(printed: dict[str, dict], review_site: Path,
                                                                 sheet: str) -> None:
    data = printed[sheet]["pdf"].read_bytes()
    assert data.startswith(b"%PDF")
    boxes = {(float(w), float(h)) for w, h in
             re.findall(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", data)}
    width_mm, height_mm = SHEETS[sheet]
    assert boxes and all(abs(w - width_mm * PT_PER_MM) < 1.5 and abs(h - height_mm * PT_PER_MM) < 1.5
                         for w, h in boxes), boxes
    html = (review_site / "review.html").read_text(encoding="utf-8")
    # cover + every section on its own sheet + cautions + sign-off
    assert _pdf_pages(data) >= html.count('class="review-part"') + 3


def _words(pdf: Path) -> list[dict]:
    """Return every word of *pdf* with its page, box (pt) and the page size, read by poppler's pdftotext."""
    res = subprocess.run(["pdftotext", "-bbox", str(pdf), "-"], capture_output=True, text=True, timeout=120,
                         check=True)
    words, page = [], 0
    size = (0.0, 0.0)
    for line in res.stdout.splitlines():
        p = re.search(r'<page width="([\d.]+)" height="([\d.]+)"', line)
        if p:
            page += 1
            size = (float(p.group(1)), float(p.group(2)))
            continue
        w = re.search(r'<word xMin="([\d.]+)" yMin="([\d.]+)" xMax="([\d.]+)" yMax="([\d.]+)">(.*)</word>', line)
        if w:
            words.append({"page": page, "x0": float(w.group(1)), "y0": float(w.group(2)), "x1": float(w.group(3)),
                          "y1": float(w.group(4)), "text": w.group(5), "size": size})
    return words


@pytest.mark.parametrize("sheet", sorted(SHEETS))
def test_printed_text_stays_inside_the_margins_with_a_running_header(printed: dict[str, dict], review_site: Path,
                                                                    sheet: str) -> None:
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext (poppler-utils) is not installed; the layout checks above still ran")
    words = _words(printed[sheet]["pdf"])
    pages = max(w["page"] for w in words)
    margin = SIDE_MARGIN_MM * PT_PER_MM
    outside = [f"p{w['page']} {w['text']!r} {w['x0']:.0f}..{w['x1']:.0f}" for w in words
               if w["x0"] < margin - 2 or w["x1"] > w["size"][0] - margin + 2]
    assert not outside, f"text beyond the side margins on {sheet}: {outside[:10]}"
    html = (review_site / "review.html").read_text(encoding="utf-8")
    period = re.search(r"<dt>Review period</dt><dd>(\S+) to (\S+)</dd>", html)
    assert period
    for n in range(1, pages + 1):
        on_page = [w for w in words if w["page"] == n]
        top = " ".join(w["text"] for w in on_page if w["y1"] < 16 * PT_PER_MM)
        bottom = " ".join(w["text"] for w in on_page if w["y0"] > w["size"][1] - 16 * PT_PER_MM)
        assert f"{period.group(1)} to {period.group(2)}" in top, f"page {n} has no running header: {top!r}"
        assert f"Page {n} of {pages}" in bottom, f"page {n} has no page number: {bottom!r}"
    body = [w["text"] for w in words if w["page"] == pages]
    assert "Sign-off" in body and "Signature" in body, "the last sheet is not the sign-off"


def test_folded_cautions_print_open_on_every_page_kind(pw_browser, review_site: Path) -> None:
    # the style sheet alone unfolds them for print (no script needed), and hides the chart toolbar
    page = pw_browser.new_page(viewport={"width": 700, "height": 1000}, java_script_enabled=False)
    try:
        for rel in ("index.html", "exposure.html", "actions.html"):
            page.goto((review_site / rel).as_uri(), wait_until="load")
            shown = "() => document.querySelector('#cautions .caution-general').checkVisibility()"
            height = "() => document.getElementById('cautions').getBoundingClientRect().height"
            assert page.evaluate(shown) is False and page.evaluate(height) < 80, f"{rel}: not folded on screen"
            page.emulate_media(media="print")
            assert page.evaluate(shown) is True, f"{rel}: the folded cautions do not print"
            assert page.evaluate(height) > 200, f"{rel}: the cautions print folded"
            page.emulate_media(media="screen")
    finally:
        page.close()
