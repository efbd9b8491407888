"""Pseudonymous person codes (keyed hash) and small-group suppression for public pages.

A person code is ``"P-"`` followed by the first characters of the base32 form of
HMAC-SHA256(key, person_id). The key comes from the environment variable named by
``privacy.id_key_env``; without it a fixed built-in key is used and a warning says that
the codes can then be linked across builds of any programme.
"""
from __future__ import annotations

import base64
import hashlib
import hmac
import logging
import re
from functools import lru_cache, partial
from typing import Callable, Iterable

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
    mac = hmac.new(key.encode("utf-8"), str(person_id).encode("utf-8"), hashlib.sha256).digest()
    return base64.b32encode(mac).decode("ascii").rstrip("=")


def code_table(person_ids: Iterable[str], key: str, length: int = CODE_LENGTH) -> dict[str, str]:
    """Return person_id -> code, lengthening all codes until no two people share one."""
    ids = sorted({str(p) for p in person_ids})
    digests = {p: digest32(key, p) for p in ids}
    full = len(next(iter(digests.values()), "A" * 52))
    n = length
    while True:
        codes = {p: CODE_PREFIX + d[:n] for p, d in digests.items()}
        if len(set(codes.values())) == len(codes) or n >= full:
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


def trie_pattern(keys: Iterable[str]) -> str:
    """Return a regex alternation of *keys* folded into a prefix tree (longest key preferred)."""
    root: dict[str, dict] = {}
    for k in keys:
        node = root
        for ch in k:
            node = node.setdefault(ch, {})
        node[""] = {}

    def emit(node: dict[str, dict]) -> str:
        end = "" in node
        alts = [re.escape(ch) + emit(sub) for ch, sub in sorted(node.items()) if ch]
        if not alts:
            return ""
        body = alts[0] if len(alts) == 1 else "(?:" + "|".join(alts) + ")"
        if end:
            # greedy: the longer key is tried first, the shorter one when the rest does not match
            return (body if len(alts) > 1 else "(?:" + body + ")") + "?"
        return body

    return emit(root)


#: a key made of word characters and hyphens only: matched whole exactly when it is a whole run of them
_RUN = re.compile(r"[\w-]+")


@lru_cache(maxsize=8)
def _word_pattern(keys: tuple[str, ...]) -> re.Pattern[str]:
    """Return the compiled pattern of whole *keys* containing other characters, or else of any run of [\\w-]."""
    # keys such as ids and dates are whole runs of [\w-] and are looked up in a dict; only the others
    # (names with spaces, ...) go into the prefix tree, tried first since they are longer at any position
    tree = trie_pattern(keys)
    return re.compile(r"(?<![\w-])(?:" + (tree + "|" if tree else "") + r"[\w-]+)(?![\w-])")


def redactor(people: pd.DataFrame, code: Callable[[str], str]) -> Callable[[str], str]:
    """Return a function that replaces raw ids, names and birth dates in free text."""
    subs: dict[str, str] = {}
    if "person_id" in people.columns:
        ids = [p for p in pd.unique(people["person_id"].astype(str)) if p]
        subs.update((p, code(p)) for p in ids)
    if "name" in people.columns:
        for name in pd.unique(people["name"].astype(str)):
            if name.strip() and name not in subs:
                subs[name] = "[name withheld]"
    if "birth_date" in people.columns:
        births = pd.to_datetime(people["birth_date"], errors="coerce").dropna()
        for text in pd.unique(births.dt.strftime("%Y-%m-%d")):
            subs.setdefault(text, "[date withheld]")
    if not subs:
        return lambda text: text
    # one compiled pattern: each position costs the depth of a prefix tree, not the number of keys
    pattern = _word_pattern(tuple(sorted(k for k in subs if not _RUN.fullmatch(k))))

    def swap(m: re.Match[str]) -> str:
        g = m.group(0)
        return subs.get(g, g)

    replace = partial(pattern.sub, swap)

    @lru_cache(maxsize=REDACT_CACHE_SIZE)
    def _redact(text: str) -> str:
        return replace(text)

    def redact(text: str) -> str:
        """Return *text* with every known id or name replaced."""
        return _redact(str(text))

    return redact
