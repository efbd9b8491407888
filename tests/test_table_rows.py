"""The table body written by the ``table_rows`` filter equals the same rows written by a plain jinja loop.

Oracle: jinja2 itself, autoescaping, rendering the cell loop the stock _table.html used to hold
(``<td class=...>``, a link where the cell has one), over random cells: texts with markup
characters and quotes, numbers, None, Markup, empty and missing classes, links.
"""
from __future__ import annotations

import jinja2
import numpy as np
import pytest
from markupsafe import Markup

from generator.pages.base import Link, Table
from generator.site import make_environment

LOOP = ('{% for row in cells %}\n<tr>{% for cls, text, href in row %}<td{% if cls %} class="{{ cls }}"{% endif %}>'
        '{% if href is not none %}<a href="{{ root }}{{ href }}">{{ text }}</a>{% else %}{{ text }}{% endif %}'
        '</td>{% endfor %}</tr>\n{% endfor %}')
TEXTS = ["", "a", "<b>", "x & y", '"q"', "'s'", "92.5", "–", "P-0001", "<script>alert(1)</script>", "é ü"]


def _cell(rng: np.random.Generator):
    kind = rng.integers(6)
    if kind == 0:
        return float(rng.normal(85, 5))
    if kind == 1:
        return int(rng.integers(-5, 500))
    if kind == 2:
        return None
    if kind == 3:
        return Markup("<em>kept</em>")
    if kind == 4:
        return Link(str(rng.choice(TEXTS)), str(rng.choice(["people/P1.html", "a?b=1&c=<2>", "x\"y"])))
    return str(rng.choice(TEXTS))


@pytest.mark.parametrize("seed", range(3))
def test_table_rows_filter_matches_jinja_loop(seed):
    rng = np.random.default_rng(seed)
    oracle = jinja2.Environment(autoescape=True, trim_blocks=True, lstrip_blocks=True).from_string(LOOP)
    env = make_environment()
    for _ in range(200):
        width = int(rng.integers(1, 7))
        rows = [[_cell(rng) for _ in range(width)] for _ in range(int(rng.integers(1, 8)))]
        classes = [str(rng.choice(["", "num", "a<b", "wide"])) for _ in range(int(rng.integers(0, width + 1)))]
        table = Table(columns=[f"c{i}" for i in range(width)], rows=rows, classes=classes or None)
        root = str(rng.choice(["", "../", "../../", "x&y/"]))
        got = env.filters["table_rows"](table.cells, root)
        assert isinstance(got, Markup)
        assert str(got) == oracle.render(cells=table.cells, root=root)


def test_empty_table_says_no_rows():
    env = make_environment()
    html = env.get_template("_table.html").render(table=Table(columns=["a", "b"], rows=[]), root="")
    assert '<tr><td colspan="2" class="empty">No rows.</td></tr>' in html
    assert "<tbody>\n<tr><td colspan" in html
