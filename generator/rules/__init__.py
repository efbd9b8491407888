"""Rule sets as data: one YAML file per rule set beside this module.

A :class:`RuleSet` carries everything a regulation or recommendation fixes and the compute
stages need: how exposure is judged (metric, criterion, exchange rate, the integration
threshold of each dose, action, limit and peak values, whether uncertainty and protectors
count), which duty starts at which value (:data:`DUTY_KEYS`), the protector verdict
method and targets, the intervals, and the clause cited for each (:data:`CLAUSE_KEYS`).
OSHA, NIOSH, EU and custom are data of one shape; nothing outside this package branches
on a rule-set id or an exchange rate. ``custom`` takes its values from programme.yaml
(``custom_rules``) and cites those settings, never another regime's clause.

A value whose published source could not be verified is cited as the programme's own
setting with its value (:func:`setting`), never as a clause.
"""
from __future__ import annotations

import copy
from dataclasses import dataclass, field, fields
from functools import lru_cache
from pathlib import Path
from typing import Any, Mapping

import yaml

from ..config import Config

_HERE = Path(__file__).resolve().parent

#: Duties that start at an exposure value, in the order the methods page lists them.
DUTY_KEYS = ("audiometry", "hearing_check", "protectors_available", "protectors_worn", "training",
             "programme_of_measures", "signs")
DUTY_LABELS = {
    "audiometry": "audiometric testing and enrolment",
    "hearing_check": "right to a hearing check",
    "protectors_available": "hearing protectors made available",
    "protectors_worn": "hearing protectors worn",
    "training": "information and training",
    "programme_of_measures": "programme of technical and organisational measures (controls)",
    "signs": "warning signs",
}
#: The exposure values a duty can start at: name -> (level field, peak field).
DUTY_LEVELS = {"lower": ("lower_action_value", "peak_lower_action"),
               "upper": ("upper_action_value", "peak_upper_action"),
               "limit": ("limit_value", "peak_limit")}
#: Clause keys every rule set cites (the compute stages look these up; see the YAML files).
CLAUSE_KEYS = (
    # exposure
    "criterion_level", "exchange_rate", "threshold", "metric", "limit_value", "limit_dose_threshold",
    "peak_limit", "judge_with_uncertainty", "protectors_count_for_limit", "weekly", "monitoring",
    # audiometry and follow-up
    "baseline", "periodic", "training_interval", "exit", "quiet", "sts", "notice", "retest", "refit", "referral",
    "baseline_revision", "review", "recordable",
    # audiometer checks
    "functional", "acoustic", "exhaustive", "booth",
    # protectors
    "protected_target", "protected_target_after_sts", "protector_method",
)
#: Methods a rule set may name in ``protector_methods`` (generator/protection.py computes them).
PROTECTOR_METHODS = ("par", "octave", "hml", "snr", "nrr-niosh", "nrr-c", "nrr-a")
#: Rule sets whose figures fill the contract's fixed export columns (exposure_results.csv:
#: osha_dose_pct, osha_twa, osha_pel_dose_pct, niosh_dose_pct, niosh_twa; group osha_twa,
#: niosh_twa), whatever rule sets the programme judges by: the one declared place of that choice.
CONTRACT_RULES = {"osha": "osha-1910.95", "niosh": "niosh-rel"}


def setting(value: Any, unit: str = "", name: str = "") -> str:
    """Return the citation of a value that is the programme's own setting, with the value."""
    v = f"{value:g}" if isinstance(value, float) else str(value)
    where = f" {name}" if name else ""
    return f"the programme's own setting{where}: {v}{(' ' + unit) if unit else ''}"


@dataclass(frozen=True)
class Duty:
    """A duty of a rule set: the exposure value it starts at and the clause that imposes it."""

    #: "lower", "upper" or "limit" (the rule set's value and peak value of that name);
    #: None when the rule set has no such duty
    starts_at: str | None
    clause: str


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
    #: duty key (DUTY_KEYS) -> the value it starts at and its clause
    duties: Mapping[str, Duty] = field(default_factory=dict)
    #: protector methods in order of precedence; the first one the data allow governs
    protector_methods: tuple[str, ...] = ()
    #: calendar months between acoustic and exhaustive audiometer calibrations
    acoustic_calibration_months: float | None = None
    exhaustive_calibration_months: float | None = None

    def clause(self, key: str) -> str:
        """Return the clause cited for *key* (a CLAUSE_KEYS or DUTY_KEYS entry)."""
        if key in self.duties:
            return self.duties[key].clause
        return self.clauses[key]

    def all_clauses(self) -> dict[str, str]:
        """Return every clause the rule set cites, duties included, by key."""
        return {**{k: self.clauses[k] for k in CLAUSE_KEYS}, **{k: d.clause for k, d in self.duties.items()}}

    def duty_values(self, key: str) -> tuple[float | None, float | None]:
        """Return (level, peak) at which duty *key* starts ((None, None): no such duty)."""
        d = self.duties.get(key)
        if d is None or d.starts_at is None:
            return None, None
        lf, pf = DUTY_LEVELS[d.starts_at]
        return getattr(self, lf), getattr(self, pf)

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


@lru_cache(maxsize=None)
def _parsed(name: str) -> dict[str, Any]:
    with open(_HERE / f"{name}.yaml", encoding="utf-8") as fh:
        return yaml.safe_load(fh)


def _read(name: str) -> dict[str, Any]:
    """Return the packaged rule set file *name*, parsed once per process (a fresh copy each call)."""
    return copy.deepcopy(_parsed(name))


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
    cfg = config if config is not None else Config()
    data["clauses"] = {k: _resolve(v, cfg) for k, v in (data.get("clauses") or {}).items()}
    data["notes"] = tuple(data.get("notes") or ())
    duties = dict(data.get("duties") or {})
    data["duties"] = {k: Duty(starts_at=duties[k].get("starts_at"), clause=_resolve(duties[k].get("clause", ""), cfg))
                      for k in DUTY_KEYS if k in duties}
    data["protector_methods"] = tuple(data.get("protector_methods") or ())
    rs = RuleSet(**data)
    _check(rs, duties)
    return rs


def _check(rs: RuleSet, duties: dict[str, Any]) -> None:
    """Raise ValueError where a rule set is not of the one shape every stage reads."""
    missing = [k for k in CLAUSE_KEYS if not rs.clauses.get(k)]
    if missing:
        raise ValueError(f"rule set {rs.id}: no clause for {missing}")
    if set(duties) != set(DUTY_KEYS):
        raise ValueError(f"rule set {rs.id}: duties must be exactly {list(DUTY_KEYS)}")
    for k, d in rs.duties.items():
        if d.starts_at is not None and d.starts_at not in DUTY_LEVELS:
            raise ValueError(f"rule set {rs.id}: duty {k} starts at unknown value {d.starts_at!r}")
        if not d.clause:
            raise ValueError(f"rule set {rs.id}: duty {k} cites no clause")
    bad = [m for m in rs.protector_methods if m not in PROTECTOR_METHODS]
    if bad or not rs.protector_methods:
        raise ValueError(f"rule set {rs.id}: protector_methods must name some of {list(PROTECTOR_METHODS)}")


def _resolve(v: Any, cfg: Config) -> str:
    """Return the text of one clause entry of a YAML file.

    A string is cited as written; ``{setting: PATH, unit: U}`` cites the programme.yaml option
    PATH with its value; ``{own: VALUE, unit: U}`` cites the programme's own setting VALUE
    (a value with no verified published source).
    """
    if isinstance(v, str):
        return v
    if isinstance(v, dict) and "setting" in v:
        obj: Any = cfg
        for part in str(v["setting"]).split("."):
            obj = getattr(obj, part)
        if isinstance(obj, bool):
            obj = "yes" if obj else "no"
        val = f"{obj:g}" if isinstance(obj, float) else str(obj)
        unit = v.get("unit", "")
        return f"programme setting {v['setting']} = {val}{(' ' + unit) if unit else ''}"
    if isinstance(v, dict) and "own" in v:
        return setting(v["own"], v.get("unit", ""))
    raise ValueError(f"clause entry {v!r}: a text, {{setting: ...}} or {{own: ...}}")


def rule_sets_for(config: Config) -> dict[str, RuleSet]:
    """Return the headline and comparison rule sets of a programme, headline first."""
    return {r: load_rule_set(r, config) for r in config.all_rules}
