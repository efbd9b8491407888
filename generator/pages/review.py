"""The printable annual review: a document made of each section's main page, in print order.

This builder runs after the others and reads ``ctx.pages``. It re-uses each section
page's charts (copied under the ids ``review-<n>``), summary tables (per group, per kind,
per year), tiles, sentences and a summary of the methods; it renders nothing itself and
recomputes nothing. Per-person listings stay on the site pages: the review names each one
it leaves out and where its rows are. Restricted pages never enter it.
"""
from __future__ import annotations

import dataclasses
import logging
from typing import Any

from .base import Chart, Page, SiteContext, Table

log = logging.getLogger(__name__)

#: (section id, heading) in print order.
PRINT_ORDER: tuple[tuple[str, str], ...] = (
    ("index", "Summary"),
    ("exposure", "Noise exposure"),
    ("protection", "Hearing protection"),
    ("hearing", "Hearing"),
    ("programme", "Enrolment and duties"),
    ("trends", "Trends"),
    ("actions", "Actions"),
    ("methods", "Methods and sources"),
)
#: context keys holding lists of plain sentences worth printing.
SENTENCE_KEYS = ("changes", "notes")
#: context keys starting with this are left out of the printout (long lists for the screen only).
SKIP_PREFIX = "info_"
#: a context key ``print_<key>`` holds the printed version of the table under ``<key>``.
PRINT_PREFIX = "print_"
#: header labels that mark a table as a per-person (or per-item) listing, left out of the print.
LISTING_COLUMNS = frozenset({"Person", "Subject"})
#: rows of a summary table printed before the rest are referred to the site page.
TABLE_ROWS = 40
#: a chart's data table is printed beneath it up to this many rows (longer ones stay on the screen only).
CHART_ROWS = 15
#: the methods section prints these context keys, the headline rule set's clauses and these texts.
METHODS_TABLES: tuple[str, ...] = ()
METHODS_TEXTS = ("overview",)


def _is_tiles(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(
        isinstance(v, dict) and "label" in v and "value" in v for v in value)


def is_listing(table: Table) -> bool:
    """Return whether *table* lists people or single items (a column of codes or subjects)."""
    return bool(LISTING_COLUMNS & set(map(str, table.columns)))


def cut_table(table: Table, rows: int, where: str) -> Table:
    """Return *table* with at most *rows* rows; the caption then says how many there are and *where*."""
    if len(table.rows) <= rows:
        return table
    caption = (f"{table.caption.rstrip('.')}. " if table.caption else "") + (
        f"Printed: the first {rows} of {len(table.rows):,} rows; all are {where}.")
    return dataclasses.replace(table, rows=table.rows[:rows], caption=caption)


def _listing_note(table: Table) -> str | None:
    """Return the line naming a listing left out of the print (None for an empty one)."""
    if not table.rows:
        return None
    caption = table.caption or "A list"
    if "Showing " in caption:  # a capped listing already says how many rows it has and where they are
        return caption
    n = len(table.rows)
    return f"{caption} ({n:,} row{'s' if n != 1 else ''})"


def collect(page: Page) -> dict[str, Any]:
    """Return the printable parts of a page's context: tiles, sentences, texts, summary tables, left-out lists."""
    tiles: list[dict[str, Any]] = []
    sentences: list[str] = []
    texts: list[str] = []
    tables: list[Table] = []
    left_out: list[str] = []
    where = f"on the site page {page.title}"
    ctx = page.context
    if page.section == "methods":
        return _collect_methods(page)

    def add(table: Table, printed: bool = False) -> None:
        if printed:  # made for the print by its page (e.g. the most urgent actions): printed as it is
            tables.append(table)
        elif is_listing(table):
            note = _listing_note(table)
            if note:
                left_out.append(note)
        else:
            tables.append(cut_table(table, TABLE_ROWS, where))

    for key, value in ctx.items():
        if key.startswith(SKIP_PREFIX):
            note = _listing_note(value) if isinstance(value, Table) else None
            if note:
                left_out.append(note)
            continue
        if key.startswith(PRINT_PREFIX):
            if isinstance(value, Table):
                add(value, printed=True)
            continue
        if isinstance(value, Table):
            if f"{PRINT_PREFIX}{key}" in ctx:
                continue  # its printed version is added under its own key
            add(value)
        elif _is_tiles(value):
            # a headline figure keeps its name (generator/figures.py): the print shows the same value
            tiles.extend({"label": str(v["label"]), "value": str(v["value"]), "note": str(v.get("note", "") or ""),
                          "figure": str(v.get("figure", "") or "")} for v in value)
        elif key == "answers" and isinstance(value, list):  # the overview's sentences, made of parts
            sentences.extend("".join(str(p.get("text", "")) for p in parts) for parts in value
                             if isinstance(parts, list))
        elif key in SENTENCE_KEYS and isinstance(value, list):
            sentences.extend(str(v) for v in value if isinstance(v, str))
        elif isinstance(value, list):
            for item in value:
                if isinstance(item, Table):
                    add(item)
                elif isinstance(item, dict):
                    if isinstance(item.get("markdown"), str):
                        texts.append(item["markdown"])
                    if isinstance(item.get("table"), Table):
                        add(item["table"])
    return {"tiles": tiles, "sentences": sentences, "texts": texts, "tables": tables, "left_out": left_out}


def _collect_methods(page: Page) -> dict[str, Any]:
    """Return the methods summary: the rule-set values, the headline's clauses and the general notes."""
    ctx = page.context
    tables = [ctx[k] for k in METHODS_TABLES if isinstance(ctx.get(k), Table)]
    rule_sets = [r for r in ctx.get("rule_sets", []) if isinstance(r, dict) and isinstance(r.get("table"), Table)]
    if rule_sets:
        head = rule_sets[0]
        tables.append(dataclasses.replace(head["table"], caption=head["table"].caption
                                          or f"{head.get('name', 'Headline rule set')}: values and clauses"))
    texts = [t["markdown"] for t in ctx.get("texts", [])
             if isinstance(t, dict) and t.get("name") in METHODS_TEXTS and isinstance(t.get("markdown"), str)]
    left_out = []
    if len(rule_sets) > 1:
        n = len(rule_sets) - 1
        left_out.append(f"The values of the rule sets side by side, and the clauses of the other {n} rule "
                        f"set{'s' if n > 1 else ''}")
    params = [p for p in ctx.get("parameters", []) if isinstance(p, dict)]
    if params:
        left_out.append(f"The parameters of the calculations ({len(params)} tables)")
    others = [t for t in ctx.get("texts", []) if isinstance(t, dict) and t.get("name") not in METHODS_TEXTS]
    if others:
        left_out.append("The formulas and procedures of each section: "
                        + ", ".join(str(t.get("name", "")) for t in others))
    return {"tiles": [], "sentences": [], "texts": texts, "tables": tables, "left_out": left_out}


def _section_page(pages: list[Page], section: str) -> Page | None:
    """Return the main (navigation) page of *section*, public pages only."""
    candidates = [p for p in pages if p.section == section and not p.restricted and p.slug != "review"]
    main = [p for p in candidates if p.in_nav] or candidates
    return sorted(main, key=lambda p: (p.slug.count("/"), p.slug))[0] if main else None


def _fallback(ctx: SiteContext, section: str) -> Page | None:
    """Build a section page the build has not made yet (e.g. methods, which comes later in the navigation)."""
    from . import methods
    if section != "methods":
        return None
    pages = [p for p in methods.build(ctx) if not p.restricted]
    return _section_page(pages, section)


def build(ctx: SiteContext) -> list[Page]:
    """Return the printable review page."""
    found: list[tuple[str, str, Page]] = []
    for section, heading in PRINT_ORDER:
        page = _section_page(ctx.pages, section)
        if page is None:
            page = _fallback(ctx, section)
        if page is None:
            log.info("review: section %s has no page; left out", section)
            continue
        found.append((section, heading, page))
    # a chart the summary shares with a section (same title) is printed in that section only
    titled = {c.title for s, _, p in found if s != "index" for c in p.charts if c.title}
    parts = []
    review_charts: list[Chart] = []
    long_tables: dict[str, int] = {}
    for section, heading, page in found:
        ids = []
        for chart in page.charts:
            if section == "index" and chart.title in titled:
                continue
            copy = dataclasses.replace(chart, id=f"review-{len(review_charts) + 1}")
            review_charts.append(copy)
            ids.append(copy.id)
            if len(chart.table.rows) > CHART_ROWS:  # printed without its data table (on screen it stays)
                long_tables[copy.id] = len(chart.table.rows)
        parts.append({"section": section, "heading": heading, "title": page.title, "slug": page.slug,
                      "chart_ids": ids, **collect(page)})
    cfg = ctx.programme.config
    context = {
        "parts": parts,
        "long_tables": long_tables,
        "as_of": cfg.period.end.isoformat(),
        "n_actions": ctx.results.figures["open_actions"].value,
        "n_overdue": ctx.results.figures["overdue_actions"].value,
        "signoff": ["Programme manager", "Reviewing audiologist or physician", "Competent noise assessor"],
    }
    return [Page(slug="review", title="Printable annual review", template="review.html", section="review", in_nav=True,
                 context=context, charts=review_charts)]
