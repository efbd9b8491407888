"""Rule sets as data: one YAML file per rule set beside this module.

A :class:`RuleSet` carries what a regulation or recommendation fixes: criterion level and
time, exchange rate, threshold, action and limit values, peak values, whether protectors
count towards the limit, whether bands are judged on LEX,8h + U, the clauses cited and
the name of its caution text in content/. ``custom`` takes its values from
programme.yaml (``custom_rules``).
"""
from __future__ import annotations

from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

import yaml

from ..config import Config

_HERE = Path(__file__).resolve().parent


@dataclass(frozen=True)
class RuleSet:
    """Values of one rule set; levels in dB(A) unless named peak (dB(C))."""

    id: str
    name: str
    short: str
    criterion_level: float
    criterion_hours: float
    exchange_rate: float
    #: sound below this level is not counted in the dose
    threshold: float
    #: upper end of the integration range (None: no upper end)
    upper_limit: float | None
    #: level compared with the action/limit values: "twa" (dose-based, the rule's exchange
    #: rate) or "lex" (LEX,8h, 3 dB energy equivalence)
    metric: str
    lower_action_value: float | None
    upper_action_value: float | None
    limit_value: float | None
    peak_lower_action: float | None
    peak_upper_action: float | None
    peak_limit: float | None
    protectors_count_for_limit: bool
    judge_with_uncertainty: bool
    #: months after first exposure at/above the action value within which a baseline is due
    baseline_months: float | None
    #: months between periodic audiograms
    audiogram_interval_months: float | None
    #: months between training sessions
    training_interval_months: float | None
    #: protected level targets (dB(A) TWA/LEX under the protector)
    protected_target: float | None
    protected_target_after_sts: float | None
    #: name of the caution text in content/cautions/ (without .md)
    caution: str
    clauses: dict[str, str] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    #: threshold of the dose compared with the limit value, when it differs from `threshold`
    #: (OSHA: only levels >= 90 dB(A) count when the PEL decides on controls); None = `threshold`
    limit_dose_threshold: float | None = None

    def band_labels(self) -> list[str]:
        """Return the band names in increasing order of exposure."""
        labels = []
        if self.lower_action_value is not None:
            labels.append(f"below {self.lower_action_value:g}")
        first = self.lower_action_value if self.lower_action_value is not None else self.upper_action_value
        if self.lower_action_value is not None and self.upper_action_value is not None:
            labels.append(f"{self.lower_action_value:g}–{self.upper_action_value:g}")
        elif first is not None and self.lower_action_value is None:
            labels.append(f"below {first:g}")
        if self.upper_action_value is not None and self.limit_value is not None \
                and self.limit_value > self.upper_action_value:
            labels.append(f"{self.upper_action_value:g}–{self.limit_value:g}")
        if self.limit_value is not None:
            labels.append(f"at or above {self.limit_value:g}")
        return labels


RULE_IDS = ("osha-1910.95", "niosh-rel", "eu-2003-10", "custom")


def _read(name: str) -> dict[str, Any]:
    with open(_HERE / f"{name}.yaml", encoding="utf-8") as fh:
        return yaml.safe_load(fh)


def load_rule_set(rule_id: str, config: Config | None = None) -> RuleSet:
    """Return the rule set *rule_id*; ``custom`` is completed from programme.yaml."""
    if rule_id not in RULE_IDS:
        raise KeyError(f"unknown rule set {rule_id!r}")
    data = _read(rule_id)
    if rule_id == "custom" and config is not None:
        c = config.custom_rules
        data.update(
            name=c.name, criterion_level=c.criterion_level, criterion_hours=c.criterion_hours,
            exchange_rate=c.exchange_rate, threshold=c.threshold,
            lower_action_value=c.lower_action_value, upper_action_value=c.upper_action_value,
            limit_value=c.limit_value, peak_limit=c.peak_limit,
            protectors_count_for_limit=c.protectors_count_for_limit,
            judge_with_uncertainty=c.judge_with_uncertainty,
        )
    known = {f.name for f in fields(RuleSet)}
    unknown = set(data) - known
    if unknown:
        raise ValueError(f"rule set {rule_id}: unknown keys {sorted(unknown)}")
    data["clauses"] = dict(data.get("clauses") or {})
    data["notes"] = tuple(data.get("notes") or ())
    return RuleSet(**data)


def rule_sets_for(config: Config) -> dict[str, RuleSet]:
    """Return the headline and comparison rule sets of a programme, headline first."""
    return {r: load_rule_set(r, config) for r in config.all_rules}
