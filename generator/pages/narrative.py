"""The programme's own markdown pages (pages/*.md), rendered and sanitised by the site."""
from __future__ import annotations

import logging
import re

from . import NARRATIVE, SECTIONS
from .base import Page, SiteContext

log = logging.getLogger(__name__)

_SAFE = re.compile(r"[^a-z0-9_-]+")
#: names a narrative page may not take (section pages and the assets folder).
TAKEN = frozenset(s for s, _ in SECTIONS) | {"assets"}


def page_slug(slug: str) -> str:
    """Return a safe file name for a narrative page that cannot clash with a section."""
    s = _SAFE.sub("-", slug.lower()).strip("-") or "page"
    return f"{s}-page" if s in TAKEN else s


def build(ctx: SiteContext) -> list[Page]:
    """Return one page per markdown file of the programme, ordered by front-matter order."""
    pages = []
    used: set[str] = set()
    for p in sorted(ctx.programme.pages, key=lambda p: (p.order, p.slug)):
        slug = page_slug(p.slug)
        base, n = slug, 2
        while slug in used:
            slug, n = f"{base}-{n}", n + 1
        used.add(slug)
        pages.append(Page(slug=slug, title=p.title, template="narrative.html", section=NARRATIVE,
                          in_nav=True, context={"body": p.markdown, "order": p.order, "source": p.source}))
    return pages
