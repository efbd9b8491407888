"""The data-quality page: every finding, grouped as the command line prints them."""
from __future__ import annotations

import logging

from ..findings import ERROR, WARNING
from ..privacy import WITHHELD_FINDING
from .base import Page, SiteContext, Table
from .overview import file_rows, stage_rows

log = logging.getLogger(__name__)

#: rows of one group listed by number before the rest are counted.
ROWS_SHOWN = 20
#: groups of findings listed on a public page (errors first); the counts by file are complete
GROUPS_SHOWN = 200


def _rows_text(rows: list[int]) -> str:
    if not rows:
        return ""
    shown = ", ".join(str(r) for r in rows[:ROWS_SHOWN])
    rest = len(rows) - ROWS_SHOWN
    return shown + (f" and {rest} more" if rest > 0 else "")


def build(ctx: SiteContext) -> list[Page]:
    """Return the data-quality page."""
    findings = ctx.programme.findings
    withheld = WITHHELD_FINDING.format(n=ctx.sup.min_size)

    def clean(text: str) -> str:
        if ctx.restricted:
            return text
        return withheld if ctx.sup.hides_text(text) else ctx.redact(text)

    groups = sorted(findings.groups(), key=lambda g: (g.level != ERROR, g.path, g.column or "",
                                                      g.items[0].row or 0))
    n_groups = len(groups)
    shown = groups if ctx.restricted else groups[:GROUPS_SHOWN]
    caption = "Findings, repeats of one problem in one file and column grouped"
    if len(shown) < n_groups:
        caption += (f". Showing {len(shown):,} of {n_groups:,} groups, errors first; the counts by file above are "
                    "complete and hcpsite check prints every group")
    table = Table(
        columns=["level", "file", "column", "problem", "rows", "count"],
        rows=[[g.level, g.path, g.column or "", clean(g.items[0].message)
               + (" (and similar)" if len({f.message for f in g.items}) > 1 else ""),
               _rows_text(g.rows), g.count] for g in shown],
        caption=caption,
        classes=["", "", "", "", "", "num"],
    )
    by_file: dict[str, dict[str, int]] = {}
    for f in findings:
        by_file.setdefault(f.path, {ERROR: 0, WARNING: 0})[f.level] += 1
    counts = Table(columns=["file", "errors", "warnings"],
                   rows=[[path, c[ERROR], c[WARNING]] for path, c in sorted(by_file.items())],
                   caption="Findings by file and level", classes=["", "num", "num"])
    files = file_rows(ctx)
    files_table = Table(
        columns=["File", "Status", "Rows", "Contents"],
        rows=[[f["path"], "read" if f["present"] else ("missing (required)" if f["required"] else "not supplied"),
               f"{f['rows']:,}" if f["present"] else "–", f["doc"]] for f in files],
        caption="Data files read for this review", classes=["", "", "num", ""])
    stages_table = Table(
        columns=["Calculation", "Warnings about the data", "Actions raised"],
        rows=[[r["stage"], r["findings"], r["actions"]] for r in stage_rows(ctx.results)],
        caption="What each calculation run on the records found: warnings about the data and actions raised", classes=["", "num", "num"])
    return [Page(
        slug="quality", title="Data quality", template="quality.html", section="quality", in_nav=True,
        context={"findings_table": table, "counts_table": counts,
                 "n_errors": len(findings.errors), "n_warnings": len(findings.warnings),
                 "files_table": files_table, "stages_table": stages_table,
                 "digest": ctx.programme.digest or ""},
    )]
