"""The programme.yaml schema: every option declared once, typed, with a default and a doc.

Options are dataclass fields whose ``metadata["doc"]`` is the documentation shown by
``hcpsite new`` and in the README. :func:`load_config` validates the whole file in one
pass, collecting every problem as a :class:`~generator.findings.Finding` with the YAML
line and column, and never falls back silently to a default for a value it rejects.
"""
from __future__ import annotations

import dataclasses
import datetime as dt
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from .findings import Findings

CONFIG_FILE = "programme.yaml"
RULE_SETS = ("osha-1910.95", "niosh-rel", "eu-2003-10", "custom")


def opt(default: Any = dataclasses.MISSING, doc: str = "", choices: tuple = (),
        lo: float | None = None, hi: float | None = None, factory: Any = None) -> Any:
    """Declare one option with its documentation (a dataclass field)."""
    meta = {"doc": doc, "choices": choices, "lo": lo, "hi": hi}
    if factory is not None:
        return field(default_factory=factory, metadata=meta)
    return field(default=default, metadata=meta)


@dataclass
class Period:
    """The review period."""

    start: dt.date = opt(dt.date(2025, 1, 1), "first day of the review period (YYYY-MM-DD)")
    end: dt.date = opt(dt.date(2025, 12, 31), "last day of the review period (YYYY-MM-DD); "
                       "due dates and 'current' status are judged at this date")


@dataclass
class Audiometry:
    """Audiometric evaluation options."""

    age_correction: bool = opt(True, "use the 29 CFR 1910.95 App. F age correction for the STS that "
                               "drives actions (both figures are always shown)")
    mobile_van: bool = opt(False, "baselines are taken by a mobile test van: the baseline is due "
                           "within one year instead of six months (1910.95(g)(5)(ii))")
    retest_days: int = opt(30, "days within which a retest may confirm or cancel a shift", lo=1, hi=365)
    notice_days: int = opt(21, "days within which the worker must be told of a shift in writing",
                           lo=1, hi=365)
    min_quiet_hours: float = opt(14.0, "quiet period before a baseline audiogram, hours", lo=0, hi=1000)


@dataclass
class Privacy:
    """Pseudonyms and suppression on public pages."""

    min_group_size: int = opt(5, "groups with fewer people than this show 'suppressed' instead of "
                              "figures on public pages", lo=1, hi=1000)
    id_key_env: str = opt("HCPSITE_ID_KEY", "name of the environment variable holding the secret key "
                          "for pseudonymous person codes")


@dataclass
class CustomRules:
    """Values of the `custom` rule set (used only when rules or compare_rules name it)."""

    name: str = opt("Custom rule set", "display name")
    criterion_level: float = opt(85.0, "criterion level, dB(A) for 100 % dose over the criterion time",
                                 lo=40, hi=140)
    criterion_hours: float = opt(8.0, "criterion time, hours", lo=0.1, hi=24)
    exchange_rate: float = opt(3.0, "exchange rate, dB", lo=1, hi=10)
    threshold: float = opt(80.0, "threshold level below which sound is not counted, dB(A)", lo=0, hi=140)
    lower_action_value: float = opt(80.0, "lower action value, dB(A)", lo=40, hi=140)
    upper_action_value: float = opt(85.0, "upper action value, dB(A)", lo=40, hi=140)
    limit_value: float = opt(87.0, "limit value, dB(A)", lo=40, hi=140)
    peak_limit: float = opt(140.0, "peak limit, dB(C)", lo=100, hi=200)
    protectors_count_for_limit: bool = opt(True, "protector attenuation is taken into account when "
                                           "judging the limit value")
    judge_with_uncertainty: bool = opt(True, "bands are judged on LEX,8h + U (expanded uncertainty)")


@dataclass
class Exposure:
    """Exposure assessment options."""

    stale_after_years: float = opt(3.0, "a group whose latest measurement is older than this many "
                                   "years is listed as needing a new survey", lo=0.1, hi=50)
    map_grid: int = opt(40, "cells per side of the interpolated noise map", lo=5, hi=200)


@dataclass
class Config:
    """programme.yaml: settings of one hearing-conservation programme."""

    title: str = opt("Hearing conservation review", "title shown on every page")
    organisation: str = opt("", "organisation name shown on the overview")
    period: Period = opt(factory=Period, doc="review period")
    rules: str = opt("osha-1910.95", "rule set for the headline figures", choices=RULE_SETS)
    compare_rules: list[str] = opt(factory=list, doc="rule sets shown side by side for comparison",
                                   choices=RULE_SETS)
    audiometry: Audiometry = opt(factory=Audiometry, doc="audiometric evaluation")
    privacy: Privacy = opt(factory=Privacy, doc="privacy of public pages")
    exposure: Exposure = opt(factory=Exposure, doc="exposure assessment")
    custom_rules: CustomRules = opt(factory=CustomRules, doc="values of the custom rule set")
    hours_worked: float | None = opt(None, "hours worked by all employees in the period, for "
                                     "incidence rates per 200,000 h", lo=0)
    site_url_note: str = opt("", "optional note printed in the footer (e.g. where the official copy is kept)")

    @property
    def all_rules(self) -> list[str]:
        """Return the headline rule set followed by the comparison ones, without repeats."""
        out = [self.rules]
        for r in self.compare_rules:
            if r not in out:
                out.append(r)
        return out


# ---------------------------------------------------------------------------------------
# loading


def _node_at(node: yaml.Node | None, key: str) -> tuple[yaml.Node | None, yaml.Node | None]:
    if isinstance(node, yaml.MappingNode):
        for k, v in node.value:
            if isinstance(k, yaml.ScalarNode) and k.value == key:
                return k, v
    return None, None


def _pos(node: yaml.Node | None) -> tuple[int | None, str | None]:
    if node is None:
        return None, None
    return node.start_mark.line + 1, str(node.start_mark.column + 1)


def _type_name(tp: Any) -> str:
    return {str: "text", int: "a whole number", float: "a number", bool: "true or false",
            dt.date: "a date YYYY-MM-DD"}.get(tp, getattr(tp, "__name__", str(tp)))


def _convert(value: Any, tp: Any) -> tuple[bool, Any]:
    """Convert a YAML value to the declared type; return (ok, value)."""
    origin = typing.get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        if value is None:
            return True, None
        return _convert(value, args[0])
    if tp is bool:
        return (True, value) if isinstance(value, bool) else (False, None)
    if tp is int:
        if isinstance(value, bool) or not isinstance(value, int):
            return False, None
        return True, value
    if tp is float:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return False, None
        return True, float(value)
    if tp is str:
        if isinstance(value, (str, int, float)) and not isinstance(value, bool):
            return True, str(value)
        return False, None
    if tp is dt.date:
        if isinstance(value, dt.datetime):
            return True, value.date()
        if isinstance(value, dt.date):
            return True, value
        if isinstance(value, str):
            try:
                return True, dt.date.fromisoformat(value)
            except ValueError:
                return False, None
        return False, None
    return False, None


def _load_into(cls: type, data: Any, node: yaml.Node | None, prefix: str, path: str,
               findings: Findings) -> Any:
    hints = typing.get_type_hints(cls)
    kwargs: dict[str, Any] = {}
    line, col = _pos(node)
    if data is None:
        data = {}
    if not isinstance(data, dict):
        findings.error(path, line, prefix.rstrip(".") or None, "expected a mapping of options")
        return cls()
    known = {f.name for f in dataclasses.fields(cls)}
    for key in data:
        if key not in known:
            k_node, _ = _node_at(node, str(key))
            kl, kc = _pos(k_node)
            findings.warning(path, kl, f"{prefix}{key}", f"unknown option '{prefix}{key}' is ignored; "
                             f"known: {', '.join(sorted(known))}")
    for f in dataclasses.fields(cls):
        if f.name not in data:
            continue
        tp = hints[f.name]
        value = data[f.name]
        _, v_node = _node_at(node, f.name)
        vl, vc = _pos(v_node)
        where = f"{prefix}{f.name}"
        if isinstance(tp, type) and dataclasses.is_dataclass(tp):
            kwargs[f.name] = _load_into(tp, value, v_node, where + ".", path, findings)
            continue
        meta = f.metadata
        if typing.get_origin(tp) is list:
            (item_tp,) = typing.get_args(tp)
            if value is None:
                value = []
            if not isinstance(value, list):
                value = [value]
            items = []
            for i, item in enumerate(value):
                ok, conv = _convert(item, item_tp)
                if not ok or (meta.get("choices") and conv not in meta["choices"]):
                    findings.error(path, vl, where, f"'{item}' is not one of: {', '.join(meta.get('choices') or ())}"
                                   if meta.get("choices") else f"item {i + 1} must be {_type_name(item_tp)}")
                    continue
                items.append(conv)
            kwargs[f.name] = items
            continue
        ok, conv = _convert(value, tp)
        if not ok:
            base = [a for a in typing.get_args(tp) if a is not type(None)] or [tp]
            findings.error(path, vl, where, f"'{value}' must be {_type_name(base[0])}")
            continue
        if conv is not None and meta.get("choices") and conv not in meta["choices"]:
            findings.error(path, vl, where, f"'{conv}' is not one of: {', '.join(meta['choices'])}")
            continue
        if isinstance(conv, (int, float)) and not isinstance(conv, bool):
            lo, hi = meta.get("lo"), meta.get("hi")
            if (lo is not None and conv < lo) or (hi is not None and conv > hi):
                rng = f"{'' if lo is None else lo}..{'' if hi is None else hi}"
                findings.error(path, vl, where, f"{conv} is outside the allowed range {rng}")
                continue
        kwargs[f.name] = conv
    return cls(**kwargs)


def load_config(folder: Path, findings: Findings) -> Config:
    """Read and validate ``folder/programme.yaml``; record every problem in *findings*."""
    path = Path(folder) / CONFIG_FILE
    rel = CONFIG_FILE
    if not path.is_file():
        findings.error(rel, None, None, "programme.yaml is missing (run 'hcpsite new DIR' for a starter)")
        return Config()
    try:
        text = path.read_bytes().decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        findings.error(rel, None, None, f"not UTF-8 text ({exc.reason} at byte {exc.start})")
        return Config()
    try:
        node = yaml.compose(text, Loader=yaml.SafeLoader)
        data = yaml.safe_load(text)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line = mark.line + 1 if mark else None
        col = str(mark.column + 1) if mark else None
        findings.error(rel, line, col, f"YAML syntax: {exc.problem or exc.context}")
        return Config()
    except yaml.YAMLError as exc:
        findings.error(rel, None, None, f"YAML syntax: {exc}")
        return Config()
    cfg = _load_into(Config, data, node, "", rel, findings)
    if cfg.period.end < cfg.period.start:
        _, p_node = _node_at(node, "period")
        findings.error(rel, _pos(p_node)[0], "period", "period.end is before period.start")
    return cfg


def iter_options(cls: type = Config, prefix: str = "") -> list[tuple[str, str, Any, str]]:
    """Return (dotted name, type, default, doc) for every option, for docs and `new`."""
    out = []
    hints = typing.get_type_hints(cls)
    for f in dataclasses.fields(cls):
        tp = hints[f.name]
        name = prefix + f.name
        if isinstance(tp, type) and dataclasses.is_dataclass(tp):
            out.append((name, "section", None, f.metadata.get("doc", "")))
            out.extend(iter_options(tp, name + "."))
            continue
        default = f.default if f.default is not dataclasses.MISSING else (
            f.default_factory() if f.default_factory is not dataclasses.MISSING else None)
        doc = f.metadata.get("doc", "")
        if f.metadata.get("choices"):
            doc += f" (one of: {', '.join(f.metadata['choices'])})"
        out.append((name, _type_name(tp) if not typing.get_origin(tp) else str(tp), default, doc))
    return out
