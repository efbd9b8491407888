"""The methods page: formulas, parameters and rule-set values from the definitions the code uses."""
from __future__ import annotations

import dataclasses
import logging
from typing import Any

from ..resources import content_dir
from ..rules import CLAUSE_KEYS, DUTY_KEYS, DUTY_LABELS, RuleSet
from .base import Page, SiteContext, Table

log = logging.getLogger(__name__)

#: RuleSet fields that are not values (shown elsewhere, in their own rows, or not at all).
_NOT_VALUES = {"id", "name", "short", "caution", "clauses", "notes", "duties", "protector_methods"}
_UNITS = {
    "criterion_level": "dB(A)", "criterion_hours": "h", "exchange_rate": "dB", "threshold": "dB(A)",
    "upper_limit": "dB(A)", "lower_action_value": "dB(A)", "upper_action_value": "dB(A)",
    "limit_value": "dB(A)", "peak_lower_action": "dB(C)", "peak_upper_action": "dB(C)",
    "peak_limit": "dB(C)", "baseline_months": "months", "audiogram_interval_months": "months",
    "training_interval_months": "months", "protected_target": "dB(A)",
    "protected_target_after_sts": "dB(A)", "limit_dose_threshold": "dB(A)",
    "acoustic_calibration_months": "months", "exhaustive_calibration_months": "months",
}
#: Value fields whose clause has another key in RuleSet.clauses.
_CLAUSE_OF = {"criterion_hours": "criterion_level", "baseline_months": "baseline", "audiogram_interval_months": "periodic",
              "training_interval_months": "training_interval", "acoustic_calibration_months": "acoustic",
              "exhaustive_calibration_months": "exhaustive"}
#: Readable names of the value fields (the field name with spaces otherwise).
_LABELS = {"threshold": "integration threshold of the dose", "limit_dose_threshold":
           "integration threshold of the limit dose", "upper_limit": "upper end of the integration range",
           "metric": "level judged (twa: dose-based TWA; lex: LEX,8h)",
           "judge_with_uncertainty": "judged on the level + expanded uncertainty",
           "protectors_count_for_limit": "protectors count for the limit value",
           "protected_target": "target under the protector",
           "protected_target_after_sts": "target under the protector after a shift",
           "baseline_months": "baseline audiogram due within", "audiogram_interval_months":
           "audiograms repeated every", "training_interval_months": "training repeated every",
           "acoustic_calibration_months": "acoustic calibration of the audiometer every",
           "exhaustive_calibration_months": "exhaustive calibration of the audiometer every",
           "sts": "threshold shift that calls for follow-up", "notice": "written notice of a shift",
           "retest": "retest of a shift", "refit": "protector refit and retraining after a shift",
           "referral": "referral asked for by the reviewer", "baseline_revision": "revised baseline",
           "review": "audiograms the rules cannot judge", "recordable": "recordable hearing loss",
           "quiet": "quiet period before the baseline audiogram", "functional": "audiometer functional check",
           "booth": "booth background levels", "weekly": "weekly exposure level",
           "monitoring": "exposure monitoring", "exit": "exit audiogram"}
_STARTS = {"lower": "lower action value", "upper": "upper action value", "limit": "limit value"}


def _cell(v: Any) -> str:
    if v is None:
        return "not set"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:g}"
    return str(v)


def _label(name: str) -> str:
    return _LABELS.get(name, name.replace("_", " "))


def duty_cell(rule: RuleSet, duty: str) -> str:
    """Return where a duty starts, with units: "80 dB(A) or 135 dB(C) (lower action value)"."""
    level, peak = rule.duty_values(duty)
    if level is None and peak is None:
        return "not a duty"
    parts = [f"{level:g} dB(A)" if level is not None else "", f"{peak:g} dB(C) peak" if peak is not None else ""]
    at = rule.duties[duty].starts_at
    return " or ".join(p for p in parts if p) + (f" ({_STARTS[at]})" if at in _STARTS else "")


def rule_value_fields(rules: dict[str, RuleSet]) -> list[str]:
    """Return the value fields of the rule sets in declaration order."""
    first = next(iter(rules.values()))
    return [f.name for f in dataclasses.fields(first) if f.name not in _NOT_VALUES]


def rules_table(rules: dict[str, RuleSet]) -> Table:
    """Return the rule sets side by side: one row per value and per duty, one column per rule set."""
    names = rule_value_fields(rules)
    rows = [[_label(n), _UNITS.get(n, "")] + [_cell(getattr(r, n)) for r in rules.values()] for n in names]
    rows += [[f"duty: {DUTY_LABELS[d]}", "starts at"] + [duty_cell(r, d) for r in rules.values()]
             for d in DUTY_KEYS]
    rows.append(["protector methods, first available governs", ""]
                + [" > ".join(r.protector_methods) for r in rules.values()])
    return Table(columns=["value", "unit"] + [r.name for r in rules.values()], rows=rows,
                 caption="Values and duties of the rule sets used in this review (clauses in the tables below)",
                 classes=["", ""] + ["num"] * len(rules))


def clauses_table(rule: RuleSet) -> Table:
    """Return one rule set's values and duties with the clause each comes from."""
    rows = []
    shown: set[str] = set()
    for n in rule_value_fields({rule.id: rule}):
        key = _CLAUSE_OF.get(n, n)
        shown.add(key)
        rows.append([_label(n), _cell(getattr(rule, n)), _UNITS.get(n, ""), rule.clauses.get(key, "")])
    for d in DUTY_KEYS:
        rows.append([f"duty: {DUTY_LABELS[d]}", duty_cell(rule, d), "", rule.clause(d)])
    rows.append(["protector methods, first available governs", " > ".join(rule.protector_methods), "",
                 rule.clause("protector_method")])
    shown.add("protector_method")
    for k in CLAUSE_KEYS:
        if k not in shown:
            rows.append([_label(k), "", "", rule.clause(k)])
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
