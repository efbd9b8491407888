"""The programme.yaml schema: every option declared once, typed, with a default and a doc.

Options are dataclass fields whose ``metadata["doc"]`` is the documentation shown by
``hcpsite new`` and in the README. :func:`load_config` validates the whole file in one
pass, collecting every problem as a :class:`~generator.findings.Finding` with the YAML
line and column, and never falls back silently to a default for a value it rejects.
"""
from __future__ import annotations

import codecs
import dataclasses
import datetime as dt
import os
import difflib
import re
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from .findings import Findings
from .inputfile import InputFileError, read_regular
from .yamltext import YamlError, load_yaml
from .inputs.spec import BY_NAME, FILES, WIDE_HL_COLUMNS

CONFIG_FILE = "programme.yaml"
#: Largest programme.yaml read (a real one is a few kilobytes).
MAX_CONFIG_BYTES = 1024 * 1024
#: Unknown options reported one by one in one section; the rest are counted in one line.
UNKNOWN_SHOWN = 20
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


#: Data files a ``files:`` entry may describe (every tabular file of the programme folder).
DATA_FILES = tuple(f.name for f in FILES)


@dataclass
class FileDress:
    """How one data file is read when it does not come as data/NAME.csv in hcpsite's own dress."""

    path: str | None = opt(None, "the file to read, relative to the programme folder, e.g. "
                           "'exports/Hearing tests 2025.csv' (default data/NAME.csv or data/NAME.xlsx); "
                           "a name ending in .xlsx is read as a workbook, any other as CSV")
    sheet: str | None = opt(None, "for a workbook: the name of the sheet to read (default the first sheet)")
    delimiter: str = opt(",", "the character between cells of a CSV, e.g. ';' or a tab written \"\\t\"")
    decimal: str = opt(".", "the decimal mark of numbers", choices=(".", ","))
    encoding: str = opt("utf-8", "the text encoding of a CSV, e.g. cp1252 or latin-1 (default UTF-8, with "
                        "or without byte-order mark)")
    date_format: str | None = opt(None, "how dates are written, as a strftime pattern, e.g. '%d.%m.%Y' or "
                                  "'%d/%m/%Y' (default ISO YYYY-MM-DD); ISO dates are read as well")
    columns: dict[str, str] = opt(factory=dict, doc="the file's column name -> hcpsite's column name, e.g. "
                                  "{\"Employee No\": person_id}; names are matched without regard to case")
    #: (line, column) in programme.yaml of each key given, "" for the entry itself (for messages)
    where: dict[str, tuple[int | None, str | None]] = field(default_factory=dict, compare=False, repr=False,
                                                            metadata={"internal": True})


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
    files: dict[str, FileDress] = opt(factory=dict, doc="how to read data files exported in another dress "
                                      "(path, sheet, delimiter, decimal, encoding, date_format, columns), "
                                      "one entry per data file; see docs/data-format.md", choices=DATA_FILES)

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
    return _key_nodes(node).get(key, (None, None))


def _key_nodes(node: yaml.Node | None) -> dict[str, tuple[yaml.Node, yaml.Node]]:
    """Return {key text: (key node, value node)} of a mapping node (the last of repeated keys)."""
    if not isinstance(node, yaml.MappingNode):
        return {}
    return {k.value: (k, v) for k, v in node.value if isinstance(k, yaml.ScalarNode)}


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
    index = _key_nodes(node)
    unknown = [key for key in data if key not in known]
    for key in unknown[:UNKNOWN_SHOWN]:
        k_node, _ = index.get(str(key), (None, None))
        kl, kc = _pos(k_node)
        findings.warning(path, kl, f"{prefix}{key}", f"unknown option '{prefix}{key}' is ignored; "
                         f"known: {', '.join(sorted(known))}")
    if len(unknown) > UNKNOWN_SHOWN:
        k_node, _ = index.get(str(unknown[UNKNOWN_SHOWN]), (None, None))
        findings.warning(path, _pos(k_node)[0], prefix.rstrip(".") or None,
                         f"{len(unknown) - UNKNOWN_SHOWN:,} more unknown options "
                         f"{'in ' + prefix.rstrip('.') + ' ' if prefix else ''}are ignored (not listed)")
    for f in dataclasses.fields(cls):
        if f.name not in data:
            continue
        tp = hints[f.name]
        value = data[f.name]
        _, v_node = index.get(f.name, (None, None))
        vl, vc = _pos(v_node)
        where = f"{prefix}{f.name}"
        if isinstance(tp, type) and dataclasses.is_dataclass(tp):
            kwargs[f.name] = _load_into(tp, value, v_node, where + ".", path, findings)
            continue
        meta = f.metadata
        if typing.get_origin(tp) is dict:
            kwargs[f.name] = _load_files(value, v_node, where, path, findings)
            continue
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


# ---------------------------------------------------------------------------------------
# files: how each data file is dressed

#: Encodings that are UTF-8 (read with or without a byte-order mark).
UTF8_NAMES = ("utf-8", "utf_8", "utf8", "u8", "utf-8-sig", "utf_8_sig", "cp65001")
_DRIVE = re.compile(r"^[A-Za-z]:")


def closest(word: str, candidates: list[str] | tuple[str, ...]) -> str:
    """Return ' (did you mean X?)' for the candidate closest to *word*, or ''."""
    hit = difflib.get_close_matches(str(word).lower(), [str(c) for c in candidates], n=1, cutoff=0.6)
    return f" (did you mean '{hit[0]}'?)" if hit else ""


def file_columns(name: str) -> tuple[str, ...]:
    """Return the column names a ``files:`` entry of data file *name* may map onto."""
    names = tuple(c.name for c in BY_NAME[name].columns)
    return names + (WIDE_HL_COLUMNS if name == "audiograms" else ())


def _check_path(value: str) -> str | None:
    """Return why *value* cannot be a path inside the programme folder, or None."""
    text = value.replace("\\", "/")
    if not text.strip():
        return "is empty"
    if "\x00" in text:
        return "holds a NUL character"
    if text.startswith("/") or _DRIVE.match(text):
        return "is an absolute path; give it relative to the programme folder"
    if ".." in text.split("/"):
        return "leaves the programme folder ('..'); give a path inside it"
    return None


def _check_date_format(value: str) -> str | None:
    """Return why *value* is not a strftime pattern of a whole date, or None."""
    if "%" not in value:
        return "has no % directive; write it as a strftime pattern such as '%d.%m.%Y'"
    probe = dt.datetime(2025, 12, 31)
    try:
        back = dt.datetime.strptime(probe.strftime(value), value)
    except ValueError as exc:
        return f"is not a strftime pattern that can be read back ({exc})"
    if back.date() != probe.date():
        return "does not hold a whole date (day, month and year, e.g. '%d.%m.%Y')"
    return None


def _load_files(data: Any, node: yaml.Node | None, where: str, path: str,
                findings: Findings) -> dict[str, FileDress]:
    """Read the ``files:`` mapping: one :class:`FileDress` per named data file."""
    line, col = _pos(node)
    if data is None:
        return {}
    if not isinstance(data, dict):
        findings.error(path, line, where, "expected a mapping of data file names (such as 'audiograms:') "
                       "to their reading settings")
        return {}
    out: dict[str, FileDress] = {}
    paths: dict[str, str] = {}
    for name in data:
        k_node, v_node = _node_at(node, str(name))
        kl, kc = _pos(k_node)
        key = str(name)
        if key not in DATA_FILES:
            findings.warning(path, kl, f"{where}.{key}", f"'{key}' is not a data file{closest(key, DATA_FILES)}; "
                             f"the entry is ignored; known: {', '.join(DATA_FILES)}")
            continue
        dress = _load_dress(key, data[name], v_node, f"{where}.{key}", path, findings)
        if dress is None:
            continue
        dress.where[""] = (kl, kc)
        if dress.path is not None:
            norm = dress.path.replace("\\", "/").strip("/").lower()
            if norm in paths:
                findings.error(path, dress.where["path"][0], f"{where}.{key}.path",
                               f"'{dress.path}' is also the path of {where}.{paths[norm]}; give each data "
                               "file its own file")
                dress.path = None
            else:
                paths[norm] = key
        out[key] = dress
    return {k: out[k] for k in sorted(out)}


def _load_dress(name: str, data: Any, node: yaml.Node | None, where: str, path: str,
                findings: Findings) -> FileDress | None:
    """Read one entry of ``files:``; record every problem with its line."""
    line, col = _pos(node)
    if data is None:
        data = {}
    if not isinstance(data, dict):
        findings.error(path, line, where, "expected a mapping of settings (path, sheet, delimiter, decimal, "
                       "encoding, date_format, columns)")
        return None
    fields = [f for f in dataclasses.fields(FileDress) if not f.metadata.get("internal")]
    known = [f.name for f in fields]
    dress = FileDress()
    for key in data:
        if str(key) not in known:
            k_node, _ = _node_at(node, str(key))
            findings.warning(path, _pos(k_node)[0], f"{where}.{key}", f"unknown setting '{key}'"
                             f"{closest(str(key), known)} is ignored; known: {', '.join(known)}")
    for f in fields:
        if f.name not in data:
            continue
        value = data[f.name]
        _, v_node = _node_at(node, f.name)
        vl, vc = _pos(v_node)
        dress.where[f.name] = (vl, vc)
        at = f"{where}.{f.name}"
        if f.name == "columns":
            cols = _load_columns(name, value, v_node, at, path, findings)
            if cols is not None:
                dress.columns = cols
            continue
        if value is None and f.default is None:
            continue
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            findings.error(path, vl, at, f"'{value}' must be text")
            continue
        text = str(value)
        problem = None
        if f.name == "path":
            problem = _check_path(text)
            text = text.replace("\\", "/")
        elif f.name == "sheet":
            problem = None if text.strip() else "is empty"
        elif f.name == "delimiter":
            if text.lower() == "tab":
                text = "\t"
            if len(text) != 1:
                problem = "must be one character, such as ',' or ';' (a tab is written \"\\t\")"
            elif text in ('"', "\n", "\r") or text.isalnum() or text == ".":
                problem = "cannot separate cells (a quote, a line break, a letter, a digit or '.')"
        elif f.name == "decimal":
            if text not in f.metadata["choices"]:
                problem = "must be '.' or ','"
        elif f.name == "encoding":
            try:
                codecs.lookup(text)
                "a".encode(text)
            except LookupError:
                problem = f"is not a known text encoding{closest(text, ('cp1252', 'latin-1', 'utf-8', 'iso-8859-15'))}"
        elif f.name == "date_format":
            problem = _check_date_format(text)
        if problem:
            findings.error(path, vl, at, f"'{text}' {problem}")
            continue
        setattr(dress, f.name, text)
    return dress


def _load_columns(name: str, value: Any, node: yaml.Node | None, where: str, path: str,
                  findings: Findings) -> dict[str, str] | None:
    """Read ``columns:`` of one file: the file's column name -> hcpsite's column name."""
    line, col = _pos(node)
    if value is None:
        return {}
    if not isinstance(value, dict):
        findings.error(path, line, where, "expected a mapping of the file's column names to hcpsite's, "
                       "such as {\"Employee No\": person_id}")
        return None
    allowed = file_columns(name)
    out: dict[str, str] = {}
    taken: dict[str, str] = {}
    ok = True
    for own, ours in value.items():
        k_node, v_node = _node_at(node, str(own))
        at_line = _pos(k_node)[0] or line
        if isinstance(own, bool) or isinstance(ours, bool) or own is None or ours is None \
                or not isinstance(own, (str, int, float)) or not isinstance(ours, (str, int, float)):
            findings.error(path, at_line, where, f"'{own}: {ours}': both names must be text")
            ok = False
            continue
        target = str(ours).strip().lower()
        if target not in allowed:
            findings.error(path, at_line, where, f"'{ours}' is not a column of {name}{closest(target, allowed)}")
            ok = False
            continue
        if target in taken:
            findings.error(path, at_line, where, f"both '{taken[target]}' and '{own}' are mapped to '{target}'")
            ok = False
            continue
        taken[target] = str(own)
        out[str(own).strip()] = target
    return out if ok else None


def load_config(folder: Path, findings: Findings) -> Config:
    """Read and validate ``folder/programme.yaml``; record every problem in *findings*."""
    path = Path(folder) / CONFIG_FILE
    rel = CONFIG_FILE
    if not os.path.lexists(path):
        findings.error(rel, None, None, "programme.yaml is missing (run 'hcpsite new DIR' for a starter)")
        return Config()
    try:
        raw = read_regular(path, MAX_CONFIG_BYTES)
    except InputFileError as exc:
        findings.error(rel, None, None, str(exc))
        return Config()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        start = exc.start + (3 if raw.startswith(b"\xef\xbb\xbf") else 0)
        line = raw[:start].count(b"\n") + 1
        findings.error(rel, line, None, f"not UTF-8 text ({exc.reason} at byte {start + 1} of the file)")
        return Config()
    try:
        node, data = load_yaml(text)
    except YamlError as exc:
        for p in exc.problems:
            findings.error(rel, p.line, None if p.column is None else str(p.column), p.message)
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
        if typing.get_origin(tp) is dict:
            # a mapping of named entries: no entries by default, written as a blank value
            doc += f" (entries: {', '.join(f.metadata['choices'])})"
            out.append((name, "mapping", None, doc))
            continue
        if f.metadata.get("choices"):
            doc += f" (one of: {', '.join(f.metadata['choices'])})"
        out.append((name, _type_name(tp) if not typing.get_origin(tp) else str(tp), default, doc))
    return out
