"""Pseudonymous person codes (keyed hash) and small-group suppression for public pages.

A person code is ``"P-"`` followed by the first characters of the base32 form of
HMAC-SHA256(key, person_id). The key comes from the environment variable named by
``privacy.id_key_env``; without it a fixed built-in key is used and a warning says that
the codes can then be linked across builds of any programme.
"""
from __future__ import annotations

import base64
import dataclasses
import hashlib
import hmac
import logging
import re
from functools import lru_cache
from typing import Any, Callable, Iterable

import numpy as np
import pandas as pd

from .findings import WARNING, Finding

log = logging.getLogger(__name__)

CODE_PREFIX = "P-"
#: characters of the base32 digest kept in a code (lengthened on a collision)
CODE_LENGTH = 8
#: key used when no secret key is set: stable but not secret
BUILTIN_KEY = "hcpsite-builtin-pseudonym-key-v1"
NO_KEY_MESSAGE = ("person codes are stable but can be linked across builds of any programme; "
                  "set {env}")


def digest32(key: str, person_id: str) -> str:
    """Return the base32 text of HMAC-SHA256(key, person_id), without padding."""
    mac = hmac.digest(key.encode("utf-8"), str(person_id).encode("utf-8"), "sha256")
    return base64.b32encode(mac).decode("ascii").rstrip("=")


#: base32 characters of a whole HMAC-SHA256 (32 bytes), without padding
_FULL = 52


def _prefixes(macs: list[bytes], n: int) -> list[str]:
    """Return the first *n* base32 characters of each of *macs*, encoded together in one call."""
    if n > 48:
        return [base64.b32encode(m).decode("ascii")[:n] for m in macs]
    # base32 turns each 5 bytes into 8 characters: the first 5k bytes of every mac encode alone alike
    size = 5 * -(-n // 8)
    width = size // 5 * 8
    text = base64.b32encode(b"".join(m[:size] for m in macs)).decode("ascii")
    return [text[i:i + n] for i in range(0, len(text), width)]


def hmac_sha256_many(key: bytes, messages: Iterable[bytes]) -> list[bytes]:
    """Return HMAC-SHA256(key, m) of each message (RFC 2104), the key's padded states hashed once.

    The same values as ``hmac.digest(key, m, "sha256")``, without setting the key up again for
    every message (a third less time over tens of thousands of ids).
    """
    block = 64  # SHA-256's block size in bytes
    if len(key) > block:
        key = hashlib.sha256(key).digest()
    key = key.ljust(block, b"\0")
    inner = hashlib.sha256(bytes(b ^ 0x36 for b in key))
    outer = hashlib.sha256(bytes(b ^ 0x5C for b in key))
    out = []
    for m in messages:
        i = inner.copy()
        i.update(m)
        o = outer.copy()
        o.update(i.digest())
        out.append(o.digest())
    return out


def code_table(person_ids: Iterable[str], key: str, length: int = CODE_LENGTH) -> dict[str, str]:
    """Return person_id -> code, lengthening all codes until no two people share one."""
    ids = sorted({str(p) for p in person_ids})
    macs = hmac_sha256_many(key.encode("utf-8"), (p.encode("utf-8") for p in ids))
    n = length
    while True:
        codes = {p: CODE_PREFIX + d for p, d in zip(ids, _prefixes(macs, n))}
        if len(set(codes.values())) == len(codes) or n >= _FULL:
            return codes
        log.info("person code collision at %d characters; lengthening", n)
        n += 1


def make_coder(people: pd.DataFrame, key: str | None,
               env_name: str = "HCPSITE_ID_KEY") -> tuple[Callable[[str], str], Finding | None]:
    """Return a person_id -> code function for *people* and a warning when no key is set."""
    warning = None
    if not key:
        key = BUILTIN_KEY
        warning = Finding("programme.yaml", None, "privacy.id_key_env", WARNING,
                          NO_KEY_MESSAGE.format(env=env_name))
    ids = people["person_id"].astype(str).tolist() if "person_id" in people.columns else []
    table = code_table(ids, key)
    n = len(next(iter(table.values()), CODE_PREFIX + "X" * CODE_LENGTH)) - len(CODE_PREFIX)

    def code(person_id: str) -> str:
        """Return the pseudonymous code of *person_id*."""
        pid = str(person_id)
        got = table.get(pid)
        if got is None:
            got = CODE_PREFIX + digest32(key, pid)[:n]
        return got

    return code, warning


def code_series(values: pd.Series, code: Callable[[str], str]) -> pd.Series:
    """Return *values* with every non-blank person id replaced by its code."""
    s = values.astype("string").fillna("")
    uniq = pd.unique(s)
    mapping = {u: (code(u) if u else "") for u in sorted(uniq)}
    return s.map(mapping).astype(object)


def small_groups(people: pd.DataFrame, min_size: int) -> frozenset[str]:
    """Return the groups with fewer than *min_size* distinct people."""
    if people.empty or "group" not in people.columns:
        return frozenset()
    counts = people.groupby("group")["person_id"].nunique()
    return frozenset(str(g) for g in counts.index[counts < min_size])


#: texts remembered by one redactor (repeated cells such as locations are redacted once)
REDACT_CACHE_SIZE = 65536

#: a run of word characters and hyphens: a key made only of them is matched exactly when it is a whole run
_RUN = re.compile(r"[\w-]+")
#: one character of a run
_RUN_CHAR = re.compile(r"[\w-]")


class _Redactor:
    """Replace whole known words (ids, names, dates) in free text by a dictionary lookup over its words.

    A key is replaced where it stands whole: not preceded nor followed by a word character or a
    hyphen. Keys made of word characters and hyphens only (ids, dates, one-word names) are found
    as whole runs of the text; a key holding other characters (a name with a space, an
    apostrophe, a dot) is tried at the start of the run it begins with (or at its first
    character when that is not a word character), the longest key first. The text is read once,
    left to right, and a replaced key is not read again.
    """

    def __init__(self, subs: dict[str, str]) -> None:
        self.subs = subs
        #: keys with other characters, by the run they begin with (longest first)
        self.by_run: dict[str, list[str]] = {}
        #: keys beginning with a character that is not a word character or hyphen, by that character
        self.by_char: dict[str, list[str]] = {}
        words = []
        for key in subs:
            lead = _RUN.match(key)
            if lead is not None and lead.end() == len(key):
                words.append(key)
                continue
            bucket = self.by_run.setdefault(lead.group(0), []) if lead else self.by_char.setdefault(key[0], [])
            bucket.append(key)
        for bucket in (*self.by_run.values(), *self.by_char.values()):
            bucket.sort(key=lambda k: (-len(k), k))
        #: every run that may start a replacement
        self.words = frozenset(words) | frozenset(self.by_run)
        chars = "".join(sorted(self.by_char))
        # where a replacement may start: a whole run, or a character some key starts with, not after a run
        self.start = re.compile(r"(?<![\w-])(?:[\w-]+" + ("|[" + re.escape(chars) + "]" if chars else "") + ")")

    def __call__(self, text: str) -> str:
        if self.words.isdisjoint(_RUN.findall(text)) and not any(c in text for c in self.by_char):
            return text
        return self._scan(text)

    def _scan(self, text: str) -> str:
        out: list[str] = []
        last = pos = 0
        subs, search = self.subs, self.start.search
        while True:
            m = search(text, pos)
            if m is None:
                break
            at, word = m.start(), m.group(0)
            run = _RUN_CHAR.match(word) is not None
            hit = None
            for key in (self.by_run if run else self.by_char).get(word, ()):
                if text.startswith(key, at) and _RUN_CHAR.match(text, at + len(key)) is None:
                    hit = key
                    break
            if hit is None and run and word in subs:
                hit = word
            if hit is None:
                pos = m.end()
                continue
            out.append(text[last:at])
            out.append(subs[hit])
            last = pos = at + len(hit)
        out.append(text[last:])
        return "".join(out)


def redactor(people: pd.DataFrame, code: Callable[[str], str]) -> Callable[[str], str]:
    """Return a function that replaces raw ids, names and birth dates in free text."""
    subs: dict[str, str] = {}
    if "person_id" in people.columns:
        ids = [p for p in pd.unique(people["person_id"].astype(str).to_numpy(dtype=object)).tolist() if p]
        subs.update((p, code(p)) for p in ids)
    if "name" in people.columns:
        for name in pd.unique(people["name"].astype(str).to_numpy(dtype=object)).tolist():
            if name.strip() and name not in subs:
                subs[name] = "[name withheld]"
    if "birth_date" in people.columns:
        births = pd.Series(pd.unique(pd.to_datetime(people["birth_date"], errors="coerce").dropna()))
        for text in births.dt.strftime("%Y-%m-%d"):
            subs.setdefault(text, "[date withheld]")
    if not subs:
        return lambda text: text
    # built once per build: a dictionary over the text's words, not a pattern over every key
    replace = _Redactor(subs)

    @lru_cache(maxsize=REDACT_CACHE_SIZE)
    def _redact(text: str) -> str:
        return replace(text)

    def redact(text: str) -> str:
        """Return *text* with every known id or name replaced."""
        return _redact(str(text))

    return redact


# ---------------------------------------------------------------------------------------
# small-cell suppression: one object every public aggregate passes through

#: what a public page or export shows instead of a figure resting on too few people
SUPPRESSED = "suppressed"


def people_in_period(people: pd.DataFrame, start: Any, end: Any) -> pd.DataFrame:
    """Return the rows of *people* employed at some time between *start* and *end* (blank dates: employed)."""
    if people.empty:
        return people
    s, e = pd.Timestamp(start), pd.Timestamp(end)
    hire = pd.to_datetime(people["hire_date"], errors="coerce") if "hire_date" in people.columns \
        else pd.Series(pd.NaT, index=people.index)
    leave = pd.to_datetime(people["leave_date"], errors="coerce") if "leave_date" in people.columns \
        else pd.Series(pd.NaT, index=people.index)
    keep = (hire.isna() | (hire <= e)) & (leave.isna() | (leave >= s))
    return people[keep.to_numpy()]


#: kind and text shown for an action about a group whose figures are withheld
WITHHELD_KIND = "withheld (small group)"
WITHHELD_DETAIL = ("a group of fewer than {n} people: its figures and the actions that tell them are shown in "
                   "the restricted build only")
#: what a public page shows instead of a finding about a withheld group
WITHHELD_FINDING = "a finding about a group of fewer than {n} people (shown in the restricted build only)"


class Suppressor:
    """Small-cell suppression for public output, built once per build.

    Every public aggregate carries the number of distinct *people* it rests on (not rows,
    ears or samples) and goes through :meth:`suppress` (one value) or :meth:`suppress_frame`
    (a table of group-level figures). A figure resting on fewer than ``min_size`` people is
    replaced by :data:`SUPPRESSED` (or blanked in a frame). Group figures rest on the
    group's people employed in the review period; a restricted build suppresses nothing.
    """

    def __init__(self, people: pd.DataFrame, min_size: int, start: Any = None, end: Any = None,
                 restricted: bool = False, groups: Iterable[str] = ()) -> None:
        self.min_size = int(min_size)
        self.restricted = bool(restricted)
        inp = people if start is None or end is None else people_in_period(people, start, end)
        if inp.empty or not {"group", "person_id"} <= set(inp.columns):
            counts = pd.Series(dtype=int)
        else:
            counts = inp.groupby(inp["group"].astype(str))["person_id"].nunique()
        #: group -> distinct people of the group employed in the period
        self.group_people: dict[str, int] = {str(g): int(n) for g, n in sorted(counts.items())}
        # every group of the people table and of the groups table (*groups*): one with nobody in it is withheld too
        known = sorted((set(people["group"].astype(str).tolist()) if "group" in people.columns else set())
                       | {str(g) for g in groups if str(g)})
        #: groups whose figures are withheld on public output (empty in a restricted build)
        self.groups: frozenset[str] = frozenset() if self.restricted else frozenset(
            g for g in known if self.group_people.get(g, 0) < self.min_size)
        #: person_id -> group (people of a withheld group are withheld too)
        self.person_group: dict[str, str] = ({} if people.empty or "person_id" not in people.columns
                                             else dict(zip(people["person_id"].astype(str).tolist(),
                                                           people["group"].astype(str).tolist())))

    def hides(self, n: Any) -> bool:
        """Return True when a figure resting on *n* people is withheld from public output."""
        if self.restricted:
            return False
        try:
            v = float(n)
        except (TypeError, ValueError):
            return True
        return not (v >= self.min_size)

    def suppress(self, value: Any, n: Any, shown: Any = SUPPRESSED) -> Any:
        """Return *value*, or *shown* when it rests on fewer than ``min_size`` people."""
        return shown if self.hides(n) else value

    def hides_group(self, group: Any) -> bool:
        """Return True when the figures of *group* are withheld."""
        return str(group) in self.groups

    def hides_person(self, person_id: Any) -> bool:
        """Return True when *person_id* belongs to a withheld group."""
        return bool(self.groups) and self.person_group.get(str(person_id), "") in self.groups

    def hides_text(self, text: Any) -> bool:
        """Return True when *text* (a finding, a sentence) is about a withheld group ("group G" in it)."""
        if not self.groups:
            return False
        return re.search(r"(?<![\w-])group (?:" + "|".join(re.escape(g) for g in sorted(self.groups))
                         + r")(?![\w-])", str(text)) is not None

    def group_n(self, group: Any) -> int:
        """Return the number of people a figure of *group* rests on (0 for a withheld group)."""
        g = str(group)
        return 0 if g in self.groups else self.group_people.get(g, 0)

    def suppress_frame(self, df: pd.DataFrame, n_col: str, value_cols: Iterable[str]) -> pd.DataFrame:
        """Return *df* with *value_cols* blanked on rows whose *n_col* people are too few (or whose group is withheld)."""
        if self.restricted or df.empty:
            return df
        out = df.copy()
        n = pd.to_numeric(out[n_col], errors="coerce") if n_col in out.columns \
            else pd.Series(np.nan, index=out.index)
        hide = ~(n >= self.min_size)
        if "group" in out.columns:
            hide = hide | out["group"].astype(str).isin(sorted(self.groups))
        return self._blank(out, hide.to_numpy(bool), value_cols)

    def withhold_groups(self, df: pd.DataFrame, value_cols: Iterable[str], group_col: str = "group",
                        person_col: str | None = None) -> pd.DataFrame:
        """Return record-level *df* with the rows of withheld groups (or their people) blanked.

        The group becomes :data:`SUPPRESSED`, *value_cols* and the person column blank: a
        record of a small group's person is a figure resting on fewer than ``min_size`` people.
        """
        if self.restricted or df.empty or not self.groups:
            return df
        out = df.copy()
        hide = np.zeros(len(out), dtype=bool)
        if group_col in out.columns:
            hide |= out[group_col].astype(str).isin(sorted(self.groups)).to_numpy()
        if person_col and person_col in out.columns:
            hide |= out[person_col].astype(str).map(self.person_group).fillna("").isin(
                sorted(self.groups)).to_numpy()
        out = self._blank(out, hide, value_cols)
        if group_col in out.columns:
            out[group_col] = np.where(hide, SUPPRESSED, out[group_col].astype(object))
        if person_col and person_col in out.columns:
            out[person_col] = np.where(hide, "", out[person_col].astype(object))
        return out

    @staticmethod
    def _blank(out: pd.DataFrame, hide: np.ndarray, value_cols: Iterable[str]) -> pd.DataFrame:
        if not hide.any():
            return out
        for c in value_cols:
            if c not in out.columns:
                continue
            col = out[c]
            if pd.api.types.is_integer_dtype(col):
                out[c] = col.astype("Int64").where(~hide, pd.NA)
            elif pd.api.types.is_numeric_dtype(col) and not pd.api.types.is_bool_dtype(col):
                out[c] = col.astype(float).where(~hide, np.nan)
            elif pd.api.types.is_datetime64_any_dtype(col):
                out[c] = col.where(~hide, pd.NaT)
            else:
                out[c] = np.where(hide, "", col.astype(object))
        return out


# ---------------------------------------------------------------------------------------
# one path for free text on public output

#: a cell that is only a number (counts, levels): never taken for an id
_NUMBER_TEXT = re.compile(r"[\d\s.,%+\-–−]*")


def redact_value(value: Any, redact: Callable[[str], str]) -> Any:
    """Return *value* with every text inside it redacted (dicts, lists, tuples, tables, charts, figures)."""
    return _Walk(redact)(value)


#: the types of a plain number (a list of only these holds no text)
_NUMBERS = frozenset({int, float, bool, type(None)})


class _Walk:
    """Redact every text inside a value; each distinct text is looked at once per walk."""

    def __init__(self, redact: Callable[[str], str]) -> None:
        self.redact = redact
        self.memo: dict[str, str] = {}

    def text(self, value: str) -> str:
        got = self.memo.get(value)
        if got is None:
            got = self.memo[value] = value if _NUMBER_TEXT.fullmatch(value) else self.redact(value)
        return got

    def __call__(self, value: Any) -> Any:
        kind = type(value)
        # the common kinds first, by exact type (a subclass takes the general path below)
        if kind is str:
            return self.text(value)
        if kind is list:
            if not _NUMBERS.isdisjoint(map(type, value[:1])) and _NUMBERS.issuperset(map(type, value)):
                return list(value)  # a run of numbers (chart coordinates): nothing to redact
            seen, text = self.memo.get, self.text
            return [(seen(v) or text(v)) if type(v) is str else self(v) for v in value]
        if kind is dict:
            return {k: self(v) for k, v in value.items()}
        if kind is tuple:  # (a table row's cells)
            return tuple([self(v) for v in value])
        if kind is int or kind is float or kind is bool or value is None:
            return value
        return self._other(value)

    def _other(self, value: Any) -> Any:
        from markupsafe import Markup
        if isinstance(value, Markup):
            return Markup(self.redact(str(value)))
        if isinstance(value, str):
            return self.text(value)
        if isinstance(value, dict):
            return {k: self(v) for k, v in value.items()}
        if isinstance(value, list):
            return [self(v) for v in value]
        if isinstance(value, tuple):
            return tuple(self(v) for v in value)
        if isinstance(value, np.ndarray) and value.dtype == object:
            return np.array([self(v) for v in value.tolist()], dtype=object)
        if hasattr(value, "to_plotly_json") and hasattr(value, "data") and hasattr(value, "layout"):
            import plotly.graph_objects as go
            changed: list[bool] = []

            def noting(text: str) -> str:
                out = self.redact(text)
                if out != text:
                    changed.append(True)
                return out

            clean = redact_value(value.to_plotly_json(), noting)
            if not changed:
                return value
            # rebuilt from the whole dict only when a text changed (so the figure's JSON keeps its order otherwise)
            rebuild = getattr(type(value), "from_dict", None)
            return rebuild(clean) if rebuild is not None else go.Figure(clean, skip_invalid=False)
        if dataclasses.is_dataclass(value) and not isinstance(value, type):
            changes = {f.name: self(getattr(value, f.name)) for f in dataclasses.fields(value) if f.init}
            return dataclasses.replace(value, **changes)
        return value


def redact_pages(pages: list[Any], redact: Callable[[str], str]) -> None:
    """Redact, in place, every text a public page shows: its title, context, tables and charts."""
    walk = _Walk(redact)
    for page in pages:
        page.title = walk(page.title)
        page.context = walk(page.context)
        page.charts = [walk(c) for c in page.charts]
