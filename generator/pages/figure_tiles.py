"""Tiles and texts of the headline figures (generator/figures.py) for every page that shows one.

Every page shows a headline figure through :func:`tile` (or :func:`text`), so the value,
its wording and the ``data-figure`` marker templates put on it are the same everywhere.
"""
from __future__ import annotations

from typing import Any

from .. import figures as F
from ..figures import FigureSet, FigureValue
from .base import SiteContext

BLANK = "–"
SUPPRESSED = "suppressed"
#: figures resting on the people tested in the period: withheld when those are too few
TESTED = ("people_with_sts", "recordable_cases", "recordable_rate")
#: counts of exposed people: while a group is withheld, a small one beside the shown groups'
#: figures would tell that group's category
EXPOSED = ("must_be_enrolled", "not_enrolled", "exposed_top_band")


def withheld(ctx: SiteContext) -> frozenset[str]:
    """Return the headline figures a public build must not show (privacy.min_group_size).

    The one place this is decided: tiles, sentences, summary.json and the exports ask here.
    """
    if ctx.restricted:
        return frozenset()
    vals, sup = figures(ctx).values, ctx.sup
    out: set[str] = set()
    tested = vals.get("people_tested")
    if tested is not None and tested.known and tested.value and sup.hides(tested.value):
        out.update(TESTED)
    if sup.groups:
        for name in EXPOSED:
            v = vals.get(name)
            if v is not None and v.known and v.value and sup.hides(v.value):
                out.add(name)
    return frozenset(out)


def value_text(fv: FigureValue | None, unit: str) -> str:
    """Return the value of a figure as shown on every page ('92 %', '145', '0.85', '–' when unknown)."""
    if fv is None or not fv.known:
        return BLANK
    if unit == F.SHARE:
        return f"{round(float(fv.value or 0) * 100):.0f} %"
    if unit == F.RATE:
        return f"{float(fv.value or 0):.2f}"
    return f"{int(fv.value or 0):,}"


def basis_text(fv: FigureValue | None, unit: str) -> str:
    """Return what a share or rate rests on ('130 of 141', '2 cases in 471,800 h'), '' for a count."""
    if fv is None:
        return ""
    if unit == F.SHARE and fv.denominator:
        return f"{fv.numerator:,} of {fv.denominator:,}"
    if unit == F.RATE and fv.numerator is not None:
        cases = f"{fv.numerator:,} case{'s' if fv.numerator != 1 else ''}"
        return f"{cases} in {fv.denominator:,} h worked" if fv.denominator else f"{cases}; hours worked not recorded"
    return ""


def figures(ctx: SiteContext) -> FigureSet:
    """Return the build's headline figures."""
    return ctx.results.figures


def text(ctx: SiteContext, name: str) -> str:
    """Return the shown value of figure *name*."""
    fig = F.BY_NAME[name]
    if name in withheld(ctx):
        return SUPPRESSED
    return value_text(figures(ctx).values.get(name), fig.unit)


def tile(ctx: SiteContext, name: str, *, label: str | None = None, note: str | None = None,
         link: bool = False) -> dict[str, Any]:
    """Return the tile of figure *name*: value, label, note, warn, figure (the marker) and href."""
    fig = F.BY_NAME[name]
    figs = figures(ctx)
    fv = figs.values.get(name)
    value = value_text(fv, fig.unit)
    warn = bool(fig.attention and fv is not None and fv.known and (
        (fig.unit == F.SHARE and float(fv.value or 0) < 1.0) or (fig.unit != F.SHARE and float(fv.value or 0) > 0)))
    basis = basis_text(fv, fig.unit)
    if name in withheld(ctx):
        value, basis, warn = SUPPRESSED, "", False
    return {"label": label if label is not None else figs.labels.get(name, fig.label), "value": value,
            "note": note if note is not None else basis, "warn": warn, "figure": name,
            "href": fig.explained if link else "", "source": figs.sources.get(name, "")}
