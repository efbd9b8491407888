"""Page-model builders, one module per section; SECTIONS is the navigation order.

Each section module exposes ``build(ctx: SiteContext) -> list[Page]``. The programme's
own markdown pages (pages/*.md) are built by :mod:`generator.pages.narrative` and placed
in the navigation right after the overview.
"""
from __future__ import annotations

#: (section id, navigation title), in navigation order.
SECTIONS: tuple[tuple[str, str], ...] = (
    ("index", "Overview"),
    ("exposure", "Exposure"),
    ("noise-map", "Noise map"),
    ("protection", "Protection"),
    ("hearing", "Hearing"),
    ("programme", "Enrolment and duties"),
    ("actions", "Actions"),
    ("trends", "Trends"),
    ("review", "Printable annual review"),
    ("methods", "Methods"),
    ("quality", "Data quality"),
)

#: section id -> module under generator.pages (when the name differs from the id).
MODULES: dict[str, str] = {"index": "overview", "noise-map": "exposure"}

#: section id given to the programme's narrative pages.
NARRATIVE = "narrative"


def module_name(section: str) -> str:
    """Return the dotted module name of the builder of *section*."""
    return f"generator.pages.{MODULES.get(section, section)}"


def section_title(section: str) -> str:
    """Return the navigation title of *section* (the id itself when unknown)."""
    return dict(SECTIONS).get(section, section)


def page_builders() -> list:
    """Return the page builders in navigation order, the narrative pages right after the overview."""
    from . import (actions, exposure, hearing, methods, narrative, overview, people, programme, protection,
                   quality, review, trends)
    return [overview.build, narrative.build, exposure.build, protection.build, hearing.build, people.build,
            programme.build, actions.build, trends.build, review.build, methods.build, quality.build]
