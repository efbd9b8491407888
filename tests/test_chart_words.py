"""Charts say what they show: titles name metric and unit, reference lines belong to the
rule set the title names, and one meaning per colour across the site."""
from __future__ import annotations

import colorsys
import html
import json
import re
from typing import Any, Iterator

from generator import charts

#: a chart title names what is counted or measured with its unit
UNIT = re.compile(r"dB\(A\)|dB HL|\bdB\b|%|\bpeople\b|\bnumber of\b|\brows\b|\bcases\b")
#: words of a series that says something is wrong, late or exposed (never green)
ALARM_WORDS = ("overdue", "late", "missing", "insufficient", "exposed", "no protector", "failed", "without")


def is_green(colour: str) -> bool:
    """Return whether a #rrggbb colour reads as green (hue 75-165 degrees, not grey)."""
    r, g, b = (int(colour[i:i + 2], 16) / 255 for i in (1, 3, 5))
    h, s, v = colorsys.rgb_to_hsv(r, g, b)
    return 75 <= h * 360 <= 165 and s >= 0.2 and v >= 0.2


def test_palette_has_one_meaning_per_colour() -> None:
    status = set(charts.STATUS_COLOURS.values())
    rules = set(charts.RULE_COLOURS.values())
    category = set(charts.CATEGORY_COLOURS)
    assert not status & rules and not status & category and not rules & category
    assert len(rules) == len(charts.RULE_COLOURS)  # one colour per rule set
    for name in charts.ALARM_STATUSES:
        assert not is_green(charts.STATUS_COLOURS[name]), name
    # green means "in order" only: no rule set or category is green
    assert not any(is_green(c) for c in rules | category)
    assert is_green(charts.STATUS_COLOURS["on time"]) and is_green(charts.STATUS_COLOURS["adequate"])
    assert not is_green(charts.STATUS_COLOURS["overdue"]) and not is_green(charts.STATUS_COLOURS["late"])


def test_green_detection() -> None:
    assert is_green("#4a9a6a") and is_green("#00ff00") and not is_green("#b8423c")
    assert not is_green("#8a96a3") and not is_green("#2b5d8a")


def site_charts(pages: list) -> Iterator[tuple[str, str, list[dict[str, Any]], dict[str, Any]]]:
    """Yield (page, title, traces, layout) of every chart of the built pages."""
    dec = json.JSONDecoder()
    for path in pages:
        text = path.read_text(encoding="utf-8")
        for m in re.finditer(r'<figure class="chart" id="[^"]+".*?</figure>', text, re.S):
            block = m.group(0)
            title = re.search(r'<h3 class="chart-title">(.*?)</h3>', block)
            rest = block[block.index("Plotly.newPlot(") + len("Plotly.newPlot("):].lstrip()
            _, k = dec.raw_decode(rest)
            rest = rest[k:].lstrip(", \n")
            data, k = dec.raw_decode(rest)
            rest = rest[k:].lstrip(", \n")
            layout, _ = dec.raw_decode(rest)
            yield path.name, html.unescape(title.group(1)) if title else "", data, layout


def colours(trace: dict[str, Any]) -> set[str]:
    out = set()
    for key in ("marker", "line"):
        c = (trace.get(key) or {}).get("color")
        if isinstance(c, str):
            out.add(c.lower())
    return out


def test_charts_of_the_example_say_what_they_show(built_example) -> None:
    rules = built_example.context.rules
    found = list(site_charts(built_example.pages()))
    assert len(found) >= 20
    status = {c.lower() for c in charts.STATUS_COLOURS.values()}
    rule_colours = {r.short: charts.rule_colour(r.short) for r in rules.values()}
    for page, title, traces, layout in found:
        assert title and UNIT.search(title), (page, title)
        for tr in traces:
            name = html.unescape(str(tr.get("name") or ""))
            cs = colours(tr)
            if name in charts.STATUS_COLOURS:
                assert cs == {charts.STATUS_COLOURS[name].lower()}, (page, title, name)
            else:
                # a status colour never stands for anything but its status
                assert not cs & status, (page, title, name, cs)
            if name in rule_colours:
                assert cs == {rule_colours[name].lower()}, (page, title, name)
            if any(w in name.lower() for w in ALARM_WORDS):
                assert not any(is_green(c) for c in cs), (page, title, name, cs)
        # reference lines: each names its rule set, which the title names, and carries that rule set's value
        for note in layout.get("annotations", []):
            label = html.unescape(str(note.get("text", "")))
            level = re.search(r"(\d+(?:\.\d+)?) dB\(A\)", label)
            owner = next((r for r in rules.values() if label.startswith(r.short + " ")), None)
            if owner is None or level is None:
                continue
            assert owner.name in title, (page, title, label)
            values = {owner.lower_action_value, owner.upper_action_value, owner.limit_value, owner.criterion_level,
                      owner.threshold, owner.protected_target, owner.protected_target_after_sts}
            assert float(level.group(1)) in values, (page, title, label)
            if "LEX,8h" in title and "TWA" not in title:
                assert owner.metric == "lex", (page, title, label)
        # "+ U" appears on a chart judged with U only
        if any("+ U" in str(tr.get("name") or "") for tr in traces):
            assert "+ U" in title, (page, title)


def test_lex_chart_carries_the_directive_values(built_example) -> None:
    """The LEX,8h chart of the example (EU compared) draws 80 / 85 / 87 dB(A): Directive 2003/10/EC Art. 3(1)(a)-(c)."""
    found = {t: layout for p, t, _, layout in site_charts([built_example.out / "exposure.html"])}
    lex = [t for t in found if t.startswith("Daily noise exposure level LEX,8h")]
    assert len(lex) == 1 and "Directive 2003/10/EC" in lex[0]
    levels = sorted(float(re.search(r"(\d+) dB\(A\)", n["text"]).group(1)) for n in found[lex[0]]["annotations"])
    assert levels == [80.0, 85.0, 87.0]
    # OSHA's action level and PEL (29 CFR 1910.95(c)(1), (b)(1)) are not drawn on the LEX,8h chart
    assert not any("OSHA" in n["text"] for n in found[lex[0]]["annotations"])
    trends = [t for p, t, _, _ in site_charts([built_example.out / "trends.html"])]
    # the trend chart of exposed people names the rule set, its metric and its values (PEL 90, action level 85)
    assert any("US OSHA 29 CFR 1910.95" in t and "8-h TWA" in t and "action level 85 dB(A)" in t
               and "PEL 90 dB(A)" in t for t in trends)
