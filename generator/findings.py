"""Findings (validation errors and warnings) and the one exception family users see.

Every problem the tool finds in a user's input is a :class:`Finding` carrying the file
(relative to the programme folder), the line number in that file, the column, a level
and a message. They are collected in a :class:`Findings` list and printed all at once as
``path:row:column: level: message``; repeats of the same problem in one file and column
are grouped ("and 312 more rows like this").

A finding never spans more than one printed line and never grows with the input: control
characters (line breaks, escape sequences, bidirectional overrides) in a path, column or
message are printed as escapes (``\\n``, ``\\x1b``, ``\\u202e``), and the texts are capped
(:data:`PATH_CHARS`, :data:`COLUMN_CHARS`, :data:`MESSAGE_CHARS`) when the finding is made.
"""
from __future__ import annotations

import re
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Iterable, Iterator

ERROR = "error"
WARNING = "warning"
LEVELS = (ERROR, WARNING)

#: How many rows of one repeated problem are printed before the rest are counted.
GROUP_SHOWN = 3
#: Longest path, column and message kept in a finding (longer ones end in "… (N characters)").
PATH_CHARS = 300
COLUMN_CHARS = 120
MESSAGE_CHARS = 1000

#: C0 and C1 controls, DEL, the Unicode line and paragraph separators and the bidirectional
#: formatting characters: anything that could break a line or disguise its text on a terminal.
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u200e\u200f\u202a-\u202e\u2066-\u2069]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def _escape_char(m: re.Match) -> str:
    c = m.group()
    if c in _NAMED:
        return _NAMED[c]
    return f"\\x{ord(c):02x}" if ord(c) < 0x100 else f"\\u{ord(c):04x}"


def escape(text: str) -> str:
    """Return *text* with every control character written as a visible escape (one line)."""
    return _CONTROL.sub(_escape_char, text)


def cap(text: str, limit: int) -> str:
    """Return *text* cut to *limit* characters, saying how long it was."""
    if len(text) <= limit:
        return text
    return f"{text[:limit]}… ({len(text):,} characters)"


def format_line(path: str, row: int | None, column: str | None, level: str, message: str) -> str:
    """Return one printed ``path:row:column: level: message`` line (controls escaped)."""
    row_text = "" if row is None else str(row)
    return f"{escape(path)}:{row_text}:{escape(column or '')}: {level}: {escape(message)}"


@dataclass(frozen=True)
class Finding:
    """One problem in one place of the input."""

    path: str
    row: int | None
    column: str | None
    level: str
    message: str
    #: Problems with the same key are grouped; defaults to the message itself.
    key: str | None = field(default=None, compare=False)

    def __post_init__(self) -> None:
        for name, limit in (("path", PATH_CHARS), ("column", COLUMN_CHARS), ("message", MESSAGE_CHARS),
                            ("key", MESSAGE_CHARS)):
            value = getattr(self, name)
            if value is not None and len(value) > limit:
                object.__setattr__(self, name, cap(str(value), limit))

    def __lt__(self, other: "Finding") -> bool:
        return _sort_key(self) < _sort_key(other)

    def format(self) -> str:
        """Return the one-line ``path:row:column: level: message`` form."""
        return format_line(self.path, self.row, self.column, self.level, self.message)


@dataclass
class FindingGroup:
    """Findings of one kind in one file and column, for printing and the data-quality page."""

    path: str
    column: str | None
    level: str
    key: str
    items: list[Finding]

    @property
    def count(self) -> int:
        return len(self.items)

    @property
    def rows(self) -> list[int]:
        return [f.row for f in self.items if f.row is not None]


class Findings:
    """An ordered collection of findings with helpers to add, group and print them."""

    def __init__(self) -> None:
        self._items: list[Finding] = []

    def add(self, path: str, row: int | None, column: str | None, level: str,
            message: str, key: str | None = None) -> None:
        """Record one finding."""
        if level not in LEVELS:
            raise ValueError(f"unknown finding level {level!r}")
        self._items.append(Finding(str(path), None if row is None else int(row),
                                   column, level, message, key))

    def error(self, path: str, row: int | None, column: str | None, message: str,
              key: str | None = None) -> None:
        """Record an error (the build cannot go on)."""
        self.add(path, row, column, ERROR, message, key)

    def warning(self, path: str, row: int | None, column: str | None, message: str,
                key: str | None = None) -> None:
        """Record a warning (the build goes on unless --strict)."""
        self.add(path, row, column, WARNING, message, key)

    def add_rows(self, path: str, rows: Iterable[int], column: str | None, level: str,
                 message: str | Iterable[str], key: str | None = None) -> None:
        """Record the same kind of finding for many rows at once (vectorised callers)."""
        rows = list(rows)
        if isinstance(message, str):
            messages = [message] * len(rows)
        else:
            messages = list(message)
        k = key or (message if isinstance(message, str) else None)
        for r, m in zip(rows, messages):
            self.add(path, r, column, level, m, k or m)

    def extend(self, other: Iterable[Finding]) -> None:
        """Append findings from another collection."""
        for f in other:
            self._items.append(f)

    def __iter__(self) -> Iterator[Finding]:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    @property
    def errors(self) -> list[Finding]:
        return [f for f in self._items if f.level == ERROR]

    @property
    def warnings(self) -> list[Finding]:
        return [f for f in self._items if f.level == WARNING]

    def has_errors(self) -> bool:
        """True when at least one error was found."""
        return any(f.level == ERROR for f in self._items)

    def failed(self, strict: bool = False) -> bool:
        """True when the build must stop: errors, or warnings under --strict."""
        return self.has_errors() or (strict and bool(self.warnings))

    def groups(self) -> list[FindingGroup]:
        """Group findings by (path, column, level, key), keeping first-seen order."""
        out: "OrderedDict[tuple, FindingGroup]" = OrderedDict()
        for f in sorted(self._items, key=_sort_key):
            k = (f.path, f.column, f.level, f.key or f.message)
            if k not in out:
                out[k] = FindingGroup(f.path, f.column, f.level, f.key or f.message, [])
            out[k].items.append(f)
        return list(out.values())

    def lines(self, shown: int = GROUP_SHOWN) -> list[str]:
        """Return the printable lines, errors first, repeats grouped."""
        lines: list[str] = []
        groups = sorted(self.groups(), key=lambda g: (g.level != ERROR, g.path, g.items[0].row or 0))
        for g in groups:
            for f in g.items[:shown]:
                lines.append(f.format())
            rest = g.count - shown
            if rest > 0:
                lines.append(format_line(g.path, None, g.column, g.level,
                                         f"and {rest} more row{'s' if rest != 1 else ''} like this"))
        return lines

    def summary(self) -> str:
        """Return e.g. '2 errors, 5 warnings'."""
        e, w = len(self.errors), len(self.warnings)
        return f"{e} error{'s' if e != 1 else ''}, {w} warning{'s' if w != 1 else ''}"


def _sort_key(f: Finding) -> tuple:
    return (f.path, f.row if f.row is not None else -1, f.column or "", f.level, f.message)


class HcpsiteError(Exception):
    """A user mistake the tool reports as one clean message and exit code 1 (no traceback)."""

    exit_code = 1

    def __init__(self, message: str, findings: Findings | None = None) -> None:
        super().__init__(message)
        self.findings = findings


class UsageError(HcpsiteError):
    """A wrong command line: exit code 2."""

    exit_code = 2
