"""Every headline figure has one value on every page and file that shows it.

Driven by the definitions in generator/figures.py: each one names where it is shown; the
pages mark the elements showing it with ``data-figure="<name>"``.
"""
from __future__ import annotations

import csv
import html
import io
import json
import re

import pytest

from generator import figures as F
from generator.export import export_files
from generator.pages.figure_tiles import value_text

#: pages that show a figure: slug of the page in the built site
PAGES = ("index", "exposure", "hearing", "programme", "actions", "trends", "review")
MARK = re.compile(r'<(\w+)[^>]*\sdata-figure="([a-z_]+)"[^>]*>(.*?)</\1>', re.S)


def _marked(text: str) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for _, name, inner in MARK.findall(text):
        out.setdefault(name, []).append(html.unescape(re.sub(r"<[^>]+>", "", inner)).strip())
    return out


@pytest.fixture(scope="module")
def shown(built_example) -> dict[str, dict[str, list[str]]]:
    return {slug: _marked(built_example.html(slug)) for slug in PAGES}


@pytest.fixture(scope="module")
def exports(built_example) -> dict[str, bytes]:
    return export_files(built_example.context)


@pytest.mark.parametrize("fig", F.FIGURES, ids=[f.name for f in F.FIGURES])
def test_figure_has_one_value_everywhere(fig, built_example, shown, exports) -> None:
    figs = built_example.context.results.figures
    fv = figs[fig.name]
    expected = value_text(fv, fig.unit)
    for where in fig.shown_on:
        if where == "summary.json":
            data = json.loads(exports["summary.json"])["figures"][fig.name]
            assert data["value"] == fv.value, where
            assert (data["numerator"], data["denominator"]) == (fv.numerator, fv.denominator)
            assert data["label"] == figs.labels[fig.name] and data["source"] == figs.sources[fig.name]
            continue
        values = shown[where].get(fig.name, [])
        assert values, f"{fig.name} is not marked on {where}.html"
        assert set(values) == {expected}, (where, values, expected)


def test_trends_row_of_the_period_is_the_period_figure(built_example) -> None:
    results = built_example.context.results
    t = results.trends.table.set_index("year")
    year = built_example.context.programme.config.period.end.year
    for fig in F.yearly():
        v = results.figures[fig.name].value
        got = t.loc[year, fig.name]
        assert (v is None and got != got) or got == pytest.approx(v), fig.name


def test_exports_agree_with_the_figures(built_example, exports) -> None:
    figs = built_example.context.results.figures
    actions = list(csv.DictReader(io.StringIO(exports["actions.csv"].decode("utf-8"))))
    assert len(actions) == figs["open_actions"].value
    groups = list(csv.DictReader(io.StringIO(exports["group_exposure.csv"].decode("utf-8"))))
    # every person in scope belongs to one group: the group headcounts add up to the people in scope
    assert sum(int(g["n_people"]) for g in groups) == figs["in_scope"].value
    summary = json.loads(exports["summary.json"])["summary"]
    assert summary["in_scope"] == figs["in_scope"].value
    assert summary["recordables_this_period"] == figs["recordable_cases"].value
    assert summary["audiometer_days_ok_share"] == figs["audiometer_days_ok_share"].value
    assert summary["open_actions_total"] == figs["open_actions"].value


def test_overview_answers_first_and_links_each_figure(built_example) -> None:
    text = built_example.html("index")
    assert text.index('class="answers"') < text.index('aria-label="Headline figures"')
    for fig in F.FIGURES:
        page, _, anchor = fig.explained.partition("#")
        assert f'href="{fig.explained}"' in text, fig.name
        target = (built_example.out / page).read_text(encoding="utf-8")
        if anchor:
            assert f'id="{anchor}"' in target, fig.explained
    # internal tables live on the data-quality page
    assert "Computed stages" not in text and "fingerprint of the input files" not in text.lower().split("<footer")[0]
    quality = built_example.html("quality")
    assert 'id="inputs"' in quality and "What each calculation run on the records found" in quality
