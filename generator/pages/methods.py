"""The methods page: formulas, parameters and rule-set values from the definitions the code uses."""
from __future__ import annotations

import dataclasses
import logging
from typing import Any

from ..resources import content_dir
from ..rules import RuleSet
from .base import Page, SiteContext, Table

log = logging.getLogger(__name__)

#: RuleSet fields that are not values (shown elsewhere or not at all).
_NOT_VALUES = {"id", "name", "short", "caution", "clauses", "notes"}
_UNITS = {
    "criterion_level": "dB(A)", "criterion_hours": "h", "exchange_rate": "dB", "threshold": "dB(A)",
    "upper_limit": "dB(A)", "lower_action_value": "dB(A)", "upper_action_value": "dB(A)",
    "limit_value": "dB(A)", "peak_lower_action": "dB(C)", "peak_upper_action": "dB(C)",
    "peak_limit": "dB(C)", "baseline_months": "months", "audiogram_interval_months": "months",
    "training_interval_months": "months", "protected_target": "dB(A)",
    "protected_target_after_sts": "dB(A)", "limit_dose_threshold": "dB(A)",
}


def _cell(v: Any) -> str:
    if v is None:
        return "not set"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


def rule_value_fields(rules: dict[str, RuleSet]) -> list[str]:
    """Return the value fields of the rule sets in declaration order."""
    first = next(iter(rules.values()))
    return [f.name for f in dataclasses.fields(first) if f.name not in _NOT_VALUES]


def rules_table(rules: dict[str, RuleSet]) -> Table:
    """Return the rule sets side by side: one row per value, one column per rule set."""
    names = rule_value_fields(rules)
    rows = [[n.replace("_", " "), _UNITS.get(n, "")] + [_cell(getattr(r, n)) for r in rules.values()]
            for n in names]
    return Table(columns=["value", "unit"] + [r.name for r in rules.values()], rows=rows,
                 caption="Values of the rule sets used in this review", classes=["", ""] + ["num"] * len(rules))


def clauses_table(rule: RuleSet) -> Table:
    """Return one rule set's values with the clause each comes from."""
    rows = []
    for n in rule_value_fields({rule.id: rule}):
        rows.append([n.replace("_", " "), _cell(getattr(rule, n)), _UNITS.get(n, ""), rule.clauses.get(n, "")])
    for k in sorted(set(rule.clauses) - set(rule_value_fields({rule.id: rule}))):
        rows.append([k.replace("_", " "), "", "", rule.clauses[k]])
    return Table(columns=["value", "setting", "unit", "clause"], rows=rows, caption="",
                 classes=["", "num", "", ""])


def _stage_parameters() -> list[tuple[str, str, list[tuple[Any, ...]]]]:
    """Return (name, module, PARAMETERS) of each compute stage and of the shared arithmetic."""
    from .. import compliance, exposure, hearing, levels, norms, protection
    mods = (("exposure", exposure), ("hearing", hearing), ("protection", protection),
            ("compliance", compliance), ("levels", levels), ("norms", norms))
    return [(name, mod.__name__, list(getattr(mod, "PARAMETERS", None) or [])) for name, mod in mods]


def parameter_tables() -> list[dict[str, Any]]:
    """Return one table per module that declares PARAMETERS: rows of (name, value, unit, source)."""
    out = []
    for name, module, params in _stage_parameters():
        if not params:
            continue
        for p in params:
            if not isinstance(p, tuple) or len(p) != 4:
                raise TypeError(f"{module}.PARAMETERS: each entry must be (name, value, unit, source), got {p!r}")
        rows = [[str(p[0]), _cell(p[1]), str(p[2]), str(p[3])] for p in params]
        out.append({"name": name, "module": module,
                    "table": Table(columns=["parameter", "value", "unit", "source"], rows=rows,
                                   caption=f"Parameters of {module}", classes=["", "num", "", ""])})
    return out


def method_texts() -> list[dict[str, str]]:
    """Return the markdown texts of content/methods/ (overview first) and the glossary."""
    folder = content_dir() / "methods"
    if not folder.is_dir():
        return []
    # the general notes (overview.md) come first, then the domain texts by name
    files = sorted(folder.glob("*.md"), key=lambda p: (p.stem != "overview", p.name))
    texts = [{"name": p.stem, "markdown": p.read_text(encoding="utf-8")} for p in files]
    glossary = content_dir() / "glossary.md"
    if glossary.is_file():
        texts.append({"name": "glossary", "markdown": glossary.read_text(encoding="utf-8")})
    return texts


def build(ctx: SiteContext) -> list[Page]:
    """Return the methods page."""
    rules = ctx.rules
    return [Page(
        slug="methods", title="Methods and sources", template="methods.html", section="methods",
        in_nav=True,
        context={
            "rules_table": rules_table(rules),
            "rule_sets": [{"id": r.id, "name": r.name, "table": clauses_table(r), "notes": list(r.notes)}
                          for r in rules.values()],
            "parameters": parameter_tables(),
            "texts": method_texts(),
        },
    )]
