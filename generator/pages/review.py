"""The printable annual review: the main page of each section, in print order, on one page.

This builder runs after the others and reads ``ctx.pages``. It re-uses each section
page's charts (copied under the ids ``review-<n>``), tables, tiles, sentences and method
texts; it renders nothing itself and recomputes nothing. Restricted pages never enter it.
"""
from __future__ import annotations

import dataclasses
import importlib
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
    ("programme", "Programme"),
    ("trends", "Trends"),
    ("actions", "Actions"),
    ("methods", "Methods and sources"),
)
#: context keys holding lists of plain sentences worth printing.
SENTENCE_KEYS = ("changes", "notes")
#: context keys starting with this are left out of the printout (long lists for the screen only).
SKIP_PREFIX = "info_"


def _is_tiles(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(
        isinstance(v, dict) and "label" in v and "value" in v for v in value)


def collect(page: Page) -> dict[str, Any]:
    """Return the printable parts of a page's context: tiles, sentences, markdown texts and tables."""
    tiles: list[dict[str, Any]] = []
    sentences: list[str] = []
    texts: list[str] = []
    tables: list[Table] = []
    for key, value in page.context.items():
        if key.startswith(SKIP_PREFIX):
            continue
        if isinstance(value, Table):
            tables.append(value)
        elif _is_tiles(value):
            tiles.extend({"label": str(v["label"]), "value": str(v["value"]), "note": str(v.get("note", "") or "")}
                         for v in value)
        elif key in SENTENCE_KEYS and isinstance(value, list):
            sentences.extend(str(v) for v in value if isinstance(v, str))
        elif isinstance(value, list):
            for item in value:
                if isinstance(item, Table):
                    tables.append(item)
                elif isinstance(item, dict):
                    if isinstance(item.get("markdown"), str):
                        texts.append(item["markdown"])
                    if isinstance(item.get("table"), Table):
                        tables.append(item["table"])
    return {"tiles": tiles, "sentences": sentences, "texts": texts, "tables": tables}


def _section_page(pages: list[Page], section: str) -> Page | None:
    """Return the main (navigation) page of *section*, public pages only."""
    candidates = [p for p in pages if p.section == section and not p.restricted and p.slug != "review"]
    main = [p for p in candidates if p.in_nav] or candidates
    return sorted(main, key=lambda p: (p.slug.count("/"), p.slug))[0] if main else None


def _fallback(ctx: SiteContext, section: str) -> Page | None:
    """Build a section page the build has not made yet (e.g. methods, which comes later in the navigation)."""
    from . import module_name
    try:
        mod = importlib.import_module(module_name(section))
    except ImportError:
        return None
    pages = [p for p in mod.build(ctx) if not p.restricted]
    return _section_page(pages, section)


def build(ctx: SiteContext) -> list[Page]:
    """Return the printable review page."""
    parts = []
    review_charts: list[Chart] = []
    for section, heading in PRINT_ORDER:
        page = _section_page(ctx.pages, section)
        if page is None:
            page = _fallback(ctx, section)
        if page is None:
            log.info("review: section %s has no page; left out", section)
            continue
        ids = []
        for chart in page.charts:
            copy = dataclasses.replace(chart, id=f"review-{len(review_charts) + 1}")
            review_charts.append(copy)
            ids.append(copy.id)
        parts.append({"section": section, "heading": heading, "title": page.title, "slug": page.slug,
                      "chart_ids": ids, **collect(page)})
    comp = ctx.results.get("compliance")
    cfg = ctx.programme.config
    context = {
        "parts": parts,
        "as_of": cfg.period.end.isoformat(),
        "n_actions": None if comp is None else int(len(comp.actions)),
        "signoff": ["Programme manager", "Reviewing audiologist or physician", "Competent noise assessor"],
    }
    return [Page(slug="review", title="Annual review", template="review.html", section="review", in_nav=True,
                 context=context, charts=review_charts)]
