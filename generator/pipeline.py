"""The compute pipeline: every stage in its dependency order, with typed inputs and results.

This module is the one place where the order of the stages is written down. Each stage is
a plain function of the loaded programme and of the earlier stages' results, passed by
name and type; each returns a frozen result. Nothing here reads or writes HTML.

    exposure ──────────────┬──────────────────────────────┐
    audiometer checks ──┐  │                              │
                        ▼  ▼                              │
                      hearing ──► (shifts in force) ──► protection
                        │                                 │
                        └──────────► compliance ◄─────────┘
                                        │
                                      trends
"""
from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Callable, Iterator

from . import audiometers, compliance, exposure, hearing, protection, trends
from .audiometers import AudiometerChecks
from .compliance import ComplianceResult
from .exposure import ExposureResult
from .findings import Finding
from .hearing import HearingResult
from .model import Programme
from .protection import ProtectionResult
from .rules import RuleSet
from .trends import TrendsResult

#: the stages in the order they run (names used in progress lines and on the methods page)
STAGE_NAMES: tuple[str, ...] = ("exposure", "audiometer checks", "hearing", "protection", "compliance", "trends")


@dataclass(frozen=True)
class Results:
    """Every stage's result of one build."""

    #: rule-set id -> RuleSet, headline first
    rules: dict[str, RuleSet]
    exposure: ExposureResult
    checks: AudiometerChecks
    hearing: HearingResult
    protection: ProtectionResult
    compliance: ComplianceResult
    trends: TrendsResult

    @property
    def headline(self) -> RuleSet:
        """Return the headline rule set."""
        return next(iter(self.rules.values()))

    def findings(self) -> Iterator[Finding]:
        """Yield the findings the stages added about the data, stage by stage, sorted within each."""
        for stage in (self.exposure, self.hearing, self.protection, self.compliance):
            yield from sorted(stage.findings or [])


#: called as ``step(name, seconds)`` after each stage (progress lines)
StepHook = Callable[[str, float], None]


def run(programme: Programme, rules: dict[str, RuleSet], on_step: StepHook | None = None) -> Results:
    """Run every stage on *programme* with its rule sets (headline first) and return the results."""
    head = next(iter(rules.values()))
    clock = _Clock(on_step)
    with clock("exposure"):
        exp = exposure.compute(programme, rules)
    with clock("audiometer checks"):
        checks = audiometers.compute(programme, head)
    with clock("hearing"):
        hear = hearing.compute(programme, exposure=exp, checks=checks, rules=head)
    with clock("protection"):
        # 29 CFR 1910.95(j)(3) and its like: the target under the protector is lower for a
        # person with a shift in force, so protection is judged after the hearing stage
        prot = protection.compute(programme, exposure=exp, sts_people=hear.sts_people, rules=head)
    with clock("compliance"):
        comp = compliance.compute(programme, rule=head, exposure=exp, hearing=hear, protection=prot,
                                  checks=checks)
    with clock("trends"):
        trend = trends.compute(programme, compliance=comp, exposure=exp, hearing=hear)
    return Results(rules=rules, exposure=exp, checks=checks, hearing=hear, protection=prot,
                   compliance=comp, trends=trend)


class _Clock:
    """Time each stage and report it to the step hook (if any)."""

    def __init__(self, hook: StepHook | None) -> None:
        self.hook = hook

    def __call__(self, name: str) -> "_Timer":
        return _Timer(name, self.hook)


class _Timer:
    def __init__(self, name: str, hook: StepHook | None) -> None:
        self.name, self.hook, self.t0 = name, hook, 0.0

    def __enter__(self) -> None:
        self.t0 = time.perf_counter()

    def __exit__(self, *exc: object) -> None:
        if self.hook is not None and exc[0] is None:
            self.hook(self.name, time.perf_counter() - self.t0)
