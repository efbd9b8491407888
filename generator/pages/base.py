"""Page models: what a template may use. No HTML here and no computation of results.

A section module ``generator/pages/<section>.py`` exposes ``build(ctx: SiteContext) ->
list[Page]``. It reads computed results from ``ctx.results`` and turns them into tables,
charts (figures made by ``generator.charts``) and plain values for its template.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Callable

from ..model import Programme
from ..privacy import Suppressor
from ..rules import RuleSet

if TYPE_CHECKING:
    from ..pipeline import Results


@dataclass(frozen=True)
class Link:
    """A table cell that links to another page of the site (href relative to the site root)."""

    text: str
    href: str

    def __str__(self) -> str:
        return self.text


@dataclass
class Table:
    """A table for a template: header labels and rows of already formatted cells."""

    columns: list[str]
    rows: list[list[Any]]
    caption: str = ""
    #: optional per-column CSS class (e.g. "num" for right alignment)
    classes: list[str] | None = None

    @property
    def cells(self) -> list[list[tuple[Any, Any, str | None]]]:
        """Return the rows as ``(class, text, href)`` per cell (href None unless the cell is a :class:`Link`).

        A template reads a long table through this: plain tuples, so a cell costs no attribute lookup.
        """
        classes = list(self.classes or ())
        out: list[list[tuple[Any, Any, str | None]]] = []
        for row in self.rows:
            width = len(row)
            if len(classes) < width:
                classes += [""] * (width - len(classes))
            out.append([(cls, cell.text, cell.href) if isinstance(cell, Link) else (cls, cell, None)
                        for cls, cell in zip(classes, row)])
        return out


@dataclass
class Chart:
    """One interactive chart with its text summary and its data as a table."""

    id: str  # stable: page slug + position, e.g. "exposure-1"
    figure: Any  # generator.charts.Figure
    summary: str  # one sentence a screen reader and a printout can use
    table: Table
    height: int = 420
    title: str = ""


@dataclass
class Page:
    """One HTML page of the site."""

    slug: str  # file name without .html; may contain "/" for subfolders (e.g. "groups/g01")
    title: str
    template: str  # jinja2 template name, e.g. "exposure.html"
    section: str  # navigation section id (see generator.pages.SECTIONS)
    context: dict[str, Any] = field(default_factory=dict)
    charts: list[Chart] = field(default_factory=list)
    #: shown in the navigation (sub-pages are reached from their section page)
    in_nav: bool = False
    restricted: bool = False


@dataclass
class SiteContext:
    """What page builders get: the programme, computed results and privacy helpers."""

    programme: Programme
    #: every stage's result (generator/pipeline.py), e.g. results.exposure
    results: Results
    #: rule-set id -> RuleSet, headline first
    rules: dict[str, RuleSet]
    #: person_id -> pseudonymous code (public pages never show a raw id)
    code: Callable[[str], str]
    #: groups below the minimum size: their figures are suppressed on public pages
    suppressed_groups: frozenset[str]
    restricted: bool = False
    #: pages built so far (the printable review reads them)
    pages: list[Page] = field(default_factory=list)
    #: small-cell suppression every public aggregate passes through (built from the people table when not given)
    suppress: Suppressor | None = None
    #: free text -> text without ids, names or birth dates (identity in a restricted build)
    redact: Callable[[str], str] = str

    def __post_init__(self) -> None:
        if self.suppress is None:
            cfg = self.programme.config
            self.suppress = Suppressor(self.programme.table("people"), cfg.privacy.min_group_size,
                                       cfg.period.start, cfg.period.end, self.restricted)
            self.suppress.groups = frozenset(self.suppressed_groups)
        else:
            self.suppressed_groups = self.suppress.groups

    @property
    def sup(self) -> Suppressor:
        """Return the build's suppressor."""
        assert self.suppress is not None
        return self.suppress

    @property
    def headline(self) -> RuleSet:
        """Return the headline rule set."""
        return next(iter(self.rules.values()))


def group_slug(group: str) -> str:
    """Return the page slug part of a group code (lower case, safe characters)."""
    s = re.sub(r"[^a-z0-9]+", "-", str(group).lower()).strip("-")
    return s or "group"


def group_slugs(groups: list[str]) -> dict[str, str]:
    """Return a unique slug per group code (a numeric suffix where two codes slug alike)."""
    out: dict[str, str] = {}
    used: set[str] = set()
    for g in sorted(groups):
        base = group_slug(g)
        s, k = base, 2
        while s in used:
            s, k = f"{base}-{k}", k + 1
        used.add(s)
        out[g] = s
    return out
