"""The printable review prints to PDF in headless Chromium with every chart drawn.

The site is site_example when it exists (the shared session fixture), otherwise a small
demo programme built here. Chromium is driven by its own command line (``--print-to-pdf``
and ``--dump-dom``); the test is skipped with a reason when /usr/bin/chromium is absent.
"""
from __future__ import annotations

import re
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
