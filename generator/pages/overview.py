"""The overview page (index.html): headline figures, data files present and missing, links."""
from __future__ import annotations

import logging
import math
from typing import Any

import pandas as pd

from .. import charts
from ..inputs.spec import FILES
from ..pipeline import Results
from .base import Chart, Page, SiteContext

log = logging.getLogger(__name__)

#: data file -> sections whose figures come from it (said on the overview when it is missing).
USED_BY: dict[str, tuple[str, ...]] = {
    "groups": ("Exposure", "Protection"),
    "noise": ("Exposure", "Protection", "Trends"),
    "tasks": ("Exposure",),
    "audiograms": ("Hearing", "Programme", "Trends"),
    "reviews": ("Hearing",),
    "notices": ("Hearing", "Programme"),
    "training": ("Programme",),
    "protectors": ("Protection",),
    "protector_fits": ("Protection",),
    "audiometers": ("Programme",),
    "people": ("every section",),
}

#: one line under each section link.
BLURBS: dict[str, str] = {
    "exposure": "Noise measurements, dose, TWA and LEX,8h per person and similar exposure group.",
    "protection": "Hearing protectors, their ratings and whether the protected level meets the target.",
    "hearing": "Baselines, threshold shifts and follow-ups, shown by pseudonymous code.",
    "programme": "Enrolment, due audiograms, training and audiometer checks.",
    "actions": "Everything that needs doing, with due dates.",
    "trends": "How the programme's figures changed over the years.",
    "review": "All sections on one page for printing and sign-off.",
    "methods": "Formulas, parameters and the rule sets' values with their clauses.",
    "quality": "Every problem found in the input files, with file, row and column.",
}


def _scalar(v: Any) -> bool:
    if isinstance(v, bool):
        return True
    if isinstance(v, (int, float, str)):
        return not (isinstance(v, float) and math.isnan(v))
    return hasattr(v, "item") and not hasattr(v, "__len__")


def _label(key: str) -> str:
    text = str(key).replace("_", " ").strip()
    return text[:1].upper() + text[1:]


def _value(v: Any) -> str:
    if hasattr(v, "item") and not isinstance(v, (str, bytes)):
        v = v.item()
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, float):
        return f"{v:,.0f}" if float(v).is_integer() else f"{v:,.1f}"
    return str(v)


#: headline figures of the compliance summary shown first, with their labels.
HEADLINE: tuple[tuple[str, str], ...] = (
    ("in_scope", "People in the programme's scope"),
    ("must_be_enrolled", "Exposed at or above the action level"),
    ("not_enrolled", "Exposed but not enrolled"),
    ("sts_this_period", "People with a threshold shift (STS) this period"),
    ("recordables_this_period", "People with a recordable case (29 CFR 1904.10) this period"),
    ("open_actions_total", "Open actions"),
    ("overdue_actions", "Overdue actions"),
    ("overdue_audiograms", "Overdue audiograms"),
    ("overdue_baselines", "Overdue baselines"),
    ("overdue_training", "Overdue training"),
    ("current_audiogram_share", "With a current audiogram"),
    ("trained_share", "Trained in the last interval"),
    ("protector_share", "Issued a protector"),
    ("fit_test_share", "Fit-tested"),
    ("audiometer_days_ok_share", "Test days with valid audiometer checks"),
)
#: figures that call for attention when above zero.
ATTENTION = frozenset({"not_enrolled", "overdue_actions", "overdue_audiograms", "overdue_baselines",
                       "overdue_training", "late_baselines"})


def _tile(key: str, label: str, v: Any) -> dict[str, Any]:
    share = key.endswith("_share") and isinstance(v, (int, float)) and not isinstance(v, bool)
    value = f"{float(v) * 100:.0f} %" if share else _value(v)
    warn = key in ATTENTION and isinstance(v, (int, float)) and v > 0
    return {"label": label, "value": value, "note": "", "warn": bool(warn)}


def summary_tiles(summary: dict[str, Any], limit: int = 15) -> list[dict[str, Any]]:
    """Return headline tiles from a stage summary: the known figures first, else its scalar entries."""
    known = [(k, label) for k, label in HEADLINE if k in summary and _scalar(summary[k])]
    if known:
        return [_tile(k, label, summary[k]) for k, label in known][:limit]
    tiles = [_tile(k, _label(k), v) for k, v in summary.items() if _scalar(v)]
    return tiles[:limit]


def count_tiles(ctx: SiteContext) -> list[dict[str, str]]:
    """Return tiles counting the records read."""
    prog = ctx.programme
    people = prog.table("people")
    tiles = [{"label": "People in the records", "value": f"{len(people):,}", "note": ""}]
    if "leave_date" in people.columns:
        end = pd.Timestamp(prog.config.period.end)
        employed = people["leave_date"].isna() | (people["leave_date"] > end)
        if "hire_date" in people.columns:
            employed &= people["hire_date"].isna() | (people["hire_date"] <= end)
        current = int(employed.sum())
        tiles.append({"label": "Employed at the end of the period", "value": f"{current:,}", "note": ""})
    groups = people["group"].nunique() if "group" in people.columns else 0
    tiles.append({"label": "Similar exposure groups", "value": f"{groups:,}",
                  "note": f"{len(ctx.suppressed_groups)} suppressed (small)" if ctx.suppressed_groups else ""})
    if prog.has("noise"):
        tiles.append({"label": "Noise measurements", "value": f"{len(prog.table('noise')):,}", "note": ""})
    if prog.has("audiograms"):
        a = prog.table("audiograms")
        tests = len(a.drop_duplicates(["person_id", "date"])) if len(a) else 0
        tiles.append({"label": "Audiograms", "value": f"{tests:,}", "note": "one per person and date"})
    return tiles


def all_actions(results: Results) -> pd.DataFrame:
    """Return the one action list (the compliance stage merges every stage's actions)."""
    return results.compliance.actions


def file_rows(ctx: SiteContext) -> list[dict[str, Any]]:
    """Return one entry per declared data file: present or missing, rows, sections affected."""
    prog = ctx.programme
    out = []
    for spec in FILES:
        present = prog.has(spec.name)
        out.append({
            "name": spec.name,
            "path": prog.present.get(spec.name, spec.path),
            "present": present,
            "required": spec.required,
            "rows": len(prog.table(spec.name)) if present else 0,
            "doc": spec.doc,
            "used_by": ", ".join(USED_BY.get(spec.name, ())),
        })
    return out


def stage_rows(results: Results) -> list[dict[str, Any]]:
    """Return per computed stage: name, findings and actions counts."""
    rows = []
    stages = (("exposure", results.exposure), ("hearing", results.hearing), ("protection", results.protection),
              ("compliance", results.compliance))
    for name, res in stages:
        acts = getattr(res, "actions", None)
        rows.append({"stage": name, "findings": len(getattr(res, "findings", []) or []),
                     "actions": len(acts) if isinstance(acts, pd.DataFrame) else 0})
    return rows


def overview_chart(actions: pd.DataFrame | None, files: list[dict[str, Any]]) -> Chart:
    """Return the overview chart: open actions by kind, or records per data file when there are none."""
    if actions is not None and len(actions) and "kind" in actions.columns:
        counts = actions["kind"].astype(str).value_counts()
        df = pd.DataFrame({"kind": counts.index, "n": counts.values}).sort_values(
            ["n", "kind"], ascending=[False, True], kind="mergesort")
        fig = charts.bar(df["kind"], df["n"], horizontal=True, xaxis_title="open actions",
                         height=max(240, 40 + 28 * len(df)))
        top = df.iloc[0]
        summary = (f"{int(df['n'].sum())} open actions in {len(df)} kinds; the most frequent is "
                   f"'{top['kind']}' with {int(top['n'])}.")
        table = charts.table_from_frame(df, {"kind": "Kind of action", "n": "Open"}, {"n": "d"})
        return Chart("index-1", fig, summary, table, height=max(240, 40 + 28 * len(df)),
                     title="Open actions by kind")
    df = pd.DataFrame([f for f in files if f["present"]], columns=["name", "rows"])
    fig = charts.bar(df["name"], df["rows"], horizontal=True, xaxis_title="rows",
                     height=max(240, 40 + 28 * len(df)))
    summary = f"{len(df)} data files were read with {int(df['rows'].sum()):,} rows in all; no actions are open."
    table = charts.table_from_frame(df, {"name": "File", "rows": "Rows"}, {"rows": "d"})
    return Chart("index-1", fig, summary, table, height=max(240, 40 + 28 * len(df)),
                 title="Records per data file")


def build(ctx: SiteContext) -> list[Page]:
    """Return the overview page."""
    results = ctx.results
    comp = results.compliance
    summary = getattr(comp, "summary", None) if comp is not None else None
    headline = summary_tiles(summary) if isinstance(summary, dict) else []
    actions = all_actions(results)
    files = file_rows(ctx)
    missing = [f for f in files if not f["present"]]
    findings = ctx.programme.findings
    page = Page(
        slug="index", title="Overview", template="overview.html", section="index", in_nav=True,
        context={
            "headline": headline,
            "actions_in_headline": any(t["label"] == "Open actions" for t in headline),
            "counts": count_tiles(ctx),
            "open_actions": None if actions is None else int(len(actions)),
            "files": files,
            "missing": missing,
            "stages": stage_rows(results),
            "blurbs": BLURBS,
            "n_errors": len(findings.errors),
            "n_warnings": len(findings.warnings),
            "rule_names": [r.name for r in ctx.rules.values()],
        },
        charts=[overview_chart(actions, files)],
    )
    return [page]
