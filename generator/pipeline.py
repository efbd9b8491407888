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
                                      trends (the headline figures of generator/figures.py,
                                              for the period and at each year end)
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

from . import audiometers, compliance, exposure, hearing, progress, protection, trends
from .audiometers import AudiometerChecks
from .compliance import ComplianceResult
from .exposure import ExposureResult
from .figures import FigureSet
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
    def figures(self) -> FigureSet:
        """Return the headline figures of the review period (each defined once in generator/figures.py)."""
        assert self.trends.figures is not None
        return self.trends.figures

    @property
    def headline(self) -> RuleSet:
        """Return the headline rule set."""
        return next(iter(self.rules.values()))

    def findings(self) -> Iterator[Finding]:
        """Yield the findings the stages added about the data, stage by stage, sorted within each."""
        for stage in (self.exposure, self.hearing, self.protection, self.compliance):
            yield from sorted(stage.findings or [])


def run(programme: Programme, rules: dict[str, RuleSet]) -> Results:
    """Run every stage on *programme* with its rule sets (headline first) and return the results.

    Each stage is timed as a progress step (a line on stderr with ``-v``; see progress.py).
    """
    head = next(iter(rules.values()))
    clock = progress.step
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
        # the headline figures (generator/figures.py) for the period and at each year end
        trend = trends.compute(programme, compliance=comp, exposure=exp, hearing=hear, checks=checks)
    return Results(rules=rules, exposure=exp, checks=checks, hearing=hear, protection=prot,
                   compliance=comp, trends=trend)
