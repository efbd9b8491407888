"""Restricted person pages: who the page is about, linked from every person code of the
restricted tables, with the baseline in force marked the same in the chart and the table."""
from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd
import pytest

from tests.conftest import EXAMPLE, build_fixed


@pytest.fixture(scope="module")
def restricted_site(tmp_path_factory: pytest.TempPathFactory):
    out = tmp_path_factory.mktemp("restricted") / "site"
    report = build_fixed(EXAMPLE, out, restricted=True)
    return out, report


def _people() -> pd.DataFrame:
    return pd.read_csv(EXAMPLE / "data" / "people.csv", dtype=str).fillna("")


def test_action_list_codes_link_to_a_page_naming_the_person(restricted_site) -> None:
    out, report = restricted_site
    code = report.context.code
    people = _people()
    actions = (out / "actions.html").read_text(encoding="utf-8")
    links = re.findall(r'<a href="(people/P-[A-Z0-9]+\.html)">(P-[A-Z0-9]+)</a>', actions)
    assert len(links) >= 10
    by_code = {code(pid): (pid, name) for pid, name in zip(people["person_id"], people["name"])}
    for href, shown in links[:10]:
        page = (out / href).read_text(encoding="utf-8")
        pid, name = by_code[shown]
        assert pid in page and name in page
        assert "occupational-health office only" in page


def test_every_person_has_a_page_and_the_index_lists_them(restricted_site) -> None:
    out, report = restricted_site
    people = _people()
    pages = sorted((out / "people").glob("*.html"))
    assert len(pages) == len(people)
    index = (out / "people.html").read_text(encoding="utf-8")
    assert index.count('href="people/P-') == len(people)
    # the programme and hearing tables link their person codes too
    for slug in ("programme", "hearing"):
        assert 'href="people/P-' in (out / f"{slug}.html").read_text(encoding="utf-8")


def test_public_build_has_no_person_pages(built_example) -> None:
    assert not (built_example.out / "people").exists()
    assert not (built_example.out / "people.html").exists()
    assert 'href="people/' not in built_example.html("actions")


def test_baseline_in_force_is_marked_alike_in_chart_and_table(restricted_site) -> None:
    # 29 CFR 1910.95(g)(9): a revised baseline replaces the old one for later audiograms. P00005's
    # left ear was revised (reviews.csv) to the audiogram of 2025-09-19: the chart must not call
    # the older baseline "the baseline" while the table names the revised one.
    out, report = restricted_site
    h = report.context.results.hearing
    base = h.baselines[(h.baselines["person_id"] == "P00005") & (h.baselines["ear"] == "L")]
    in_force = pd.Timestamp(base["baseline_date"].iloc[0]).strftime("%Y-%m-%d")
    assert in_force == "2025-09-19"
    page = (out / f"people/{report.context.code('P00005')}.html").read_text(encoding="utf-8")
    figure = json.loads(re.search(r'Plotly\.newPlot\(\s*"[^"]+",\s*(\[.*?\]),\s*\{', page, re.S).group(1))
    names = [t["name"] for t in figure if t["name"].startswith("left ear")]
    marked = [n for n in names if "baseline in force" in n]
    assert marked and all(n.endswith(in_force) for n in marked)
    assert "Baselines in force now" in page and in_force in page
