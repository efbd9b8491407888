"""Read a programme folder into a validated :class:`~generator.model.Programme`.

Cells are converted per the declared kind of their column (:mod:`generator.inputs.spec`),
column by column with vectorised pandas/numpy operations. In quote-free CSV, numbers and
ISO dates are parsed typed at once; a column that would need a finding is read as text
and converted from its text, so that findings quote the cells as written.
Nothing here raises for a user mistake: each problem becomes a finding
(``path:row:column: level: message``) in ``programme.findings`` and the caller decides
whether to stop (``findings.failed(strict)``). Inputs are opened read-only; files that
resolve outside the programme folder are reported and not read.
"""
from __future__ import annotations

import csv
import datetime as dt
import hashlib
import io
import itertools
import logging
import os
import re
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

import numpy as np
import pandas as pd

from .. import clock
from ..config import CONFIG_FILE, MAX_CONFIG_BYTES, Config, load_config
from ..findings import ERROR, WARNING, Findings
from ..inputfile import InputFileError, read_regular, size_text
from ..model import NarrativePage, NoiseLogs, PersonIndex, Programme
from ..yamltext import YamlError, load_yaml
from .dress import Dresser
from .spec import FILES, GROUPS, NOISE_LOG, Column, FileSpec

log = logging.getLogger(__name__)

DATA_DIR = "data"
LOG_DIR = "data/noise_logs"
PAGES_DIR = "pages"
TEMPLATES_DIR = "templates"

#: Slugs of the site's own pages; a narrative page that would take one gets a ``page-`` prefix.
RESERVED_SLUGS = frozenset({"index", "methods", "quality", "exposure", "protection", "hearing",
                            "programme", "actions", "trends", "review"})
#: Front-matter keys of narrative pages.
PAGE_KEYS = ("title", "order")
#: Order of a narrative page without an ``order`` key.
DEFAULT_PAGE_ORDER = 100
#: Dates outside these years are rejected (they are typing mistakes, and they keep every
#: date inside the datetime64[ns] range).
YEAR_MIN, YEAR_MAX = 1900, 2200
#: A logged interval further than this from the log's median interval is warned about (s).
LOG_INTERVAL_TOLERANCE_S = 1.0
#: Age at hire outside this range is warned about (years).
HIRE_AGE_MIN, HIRE_AGE_MAX = 14.0, 90.0
#: Longest cell text quoted back in a message.
SHOWN_CHARS = 40
#: Largest data file read (CSV, xlsx, noise log); larger files are refused, not read in part.
MAX_FILE_BYTES = 512 * 1024 * 1024
#: Largest narrative page or template read.
MAX_PAGE_BYTES = 4 * 1024 * 1024
#: Longest line of a CSV file or noise log (a file holding a longer one is not read).
MAX_LINE_BYTES = 1024 * 1024
#: Most columns a data file may have (header cells, or cells of an xlsx row).
MAX_COLUMNS = 1024
#: Largest unpacked size of an xlsx workbook (all its parts; the sheet is read as it streams).
MAX_XLSX_UNPACKED = 512 * 1024 * 1024
#: Most cells (rows with data by columns) read from one xlsx sheet.
MAX_XLSX_CELLS = 50_000_000
#: Files of templates/ that jinja2 reads as UTF-8 text (checked when loading).
TEMPLATE_SUFFIXES = (".html", ".htm", ".css", ".js", ".txt", ".xml", ".svg", ".j2", ".jinja")
#: Unknown front-matter keys reported one by one in a page; the rest are counted in one line.
UNKNOWN_SHOWN = 20

_FORMULA = r"^[=+\-@][A-Za-z]"
_TZ_SUFFIX = r"\d{2}:\d{2}(?::\d{2}(?:\.\d+)?)?\s*(?:Z|[+-]\d{2}:?\d{2})$"
_YEAR_ONLY = r"^\d{4}$"
_SLUG_BAD = re.compile(r"[^a-z0-9-]+")
_NUMERIC_KINDS = ("float", "int", "level", "hours")
_TEXT_KINDS = ("id", "text")


def build_date() -> dt.date:
    """Return the build date: SOURCE_DATE_EPOCH (UTC) when set, else the system date."""
    return clock.today()


# ---------------------------------------------------------------------------------------
# small helpers


class _Sink:
    """Emit findings for masked rows of one table whose rows may come from several files."""

    def __init__(self, findings: Findings, path: str | np.ndarray, rows: np.ndarray) -> None:
        self.findings = findings
        self.path = path
        self.rows = np.asarray(rows, dtype=np.int64)

    def add(self, mask: Any, column: str | None, level: str, message: str | Any, key: str) -> None:
        """Record one finding per True entry of *mask* (message: text or per-row texts)."""
        idx = np.flatnonzero(np.asarray(mask, dtype=bool))
        if not idx.size:
            return
        if isinstance(message, str):
            msgs: Any = message
        elif callable(message):
            msgs = np.asarray(message(idx), dtype=object)
        else:
            msgs = np.asarray(message, dtype=object)[idx]
        if isinstance(self.path, str):
            self.findings.add_rows(self.path, self.rows[idx].tolist(), column, level,
                                   msgs if isinstance(msgs, str) else msgs.tolist(), key=key)
            return
        paths = self.path[idx]
        for p in sorted(set(paths.tolist())):
            sel = paths == p
            self.findings.add_rows(p, self.rows[idx[sel]].tolist(), column, level,
                                   msgs if isinstance(msgs, str) else msgs[sel].tolist(), key=key)


def _short(v: Any) -> str:
    """Return a cell text shortened for a message."""
    t = str(v)
    return t if len(t) <= SHOWN_CHARS else t[:SHOWN_CHARS] + "…"


def _each(template: str, **values: Any) -> Callable[[np.ndarray], list[str]]:
    """Return a message builder formatting *template* with the values of the flagged rows only."""
    arrays = {k: np.asarray(v, dtype=object) for k, v in values.items()}

    def build(idx: np.ndarray) -> list[str]:
        picked = {k: a[idx] for k, a in arrays.items()}
        return [template.format(**{k: _short(v) if isinstance(v, str) else v
                                   for k, v in ((k, picked[k][i]) for k in picked)})
                for i in range(len(idx))]

    return build


def _byte_hints(arr: np.ndarray, commas: np.ndarray | None = None, nl: np.ndarray | None = None) -> tuple[bool, bool]:
    """Return (some cell may need stripping, some cell may look like a formula) for quote-free CSV bytes."""
    return _space_hint(arr, commas, nl), _formula_hint(arr, commas, nl)


def _sparse(arr: np.ndarray, commas: np.ndarray | None, nl: np.ndarray | None) -> bool:
    """True when the bytes hold few cells for their size: a look at the edges of each cell is faster."""
    return commas is not None and nl is not None and (commas.size + nl.size) * 8 < arr.size


def _space_hint(arr: np.ndarray, commas: np.ndarray | None = None, nl: np.ndarray | None = None,
                raw: bytes | None = None) -> bool:
    """Return True when some cell of quote-free CSV bytes (*arr*, and the same as *raw*) may begin or end
    with a space or tab.

    With the positions of every comma and newline (*commas*, *nl*) of bytes holding few
    cells for their size, only the first and last byte of each cell is looked at.
    """
    if not arr.size or (raw is not None and b" " not in raw and b"\t" not in raw):
        return False
    last = arr.size - 1
    if _sparse(arr, commas, nl):
        assert commas is not None and nl is not None
        space, tab = np.uint8(32), np.uint8(9)
        for marks in (commas, nl, np.zeros(1, dtype=np.int64) - 1):  # (-1: the cell that starts the file)
            c = arr[marks[marks < last] + 1]  # a cell's first byte
            if ((c == space) | (c == tab)).any():
                return True
        for marks in (commas, nl, np.flatnonzero(arr == 13), np.asarray([last + 1])):
            c = arr[marks[marks > 0] - 1]  # a cell's last byte
            if ((c == space) | (c == tab)).any():
                return True
        return False
    ws = np.flatnonzero((arr == 32) | (arr == 9))
    if not ws.size:
        return False
    prev = np.where(ws > 0, arr[np.maximum(ws - 1, 0)], 10)
    nxt = np.where(ws < last, arr[np.minimum(ws + 1, last)], 10)
    return bool(((prev == 44) | (prev == 10)).any() or ((nxt == 44) | (nxt == 10) | (nxt == 13)).any())


def _formula_hint(arr: np.ndarray, commas: np.ndarray | None = None, nl: np.ndarray | None = None) -> bool:
    """Return True when some cell of quote-free CSV bytes may begin with =, +, - or @ and a letter."""
    if not arr.size:
        return False
    last = arr.size - 1
    if _sparse(arr, commas, nl):
        assert commas is not None and nl is not None
        for marks in (commas, nl, np.zeros(1, dtype=np.int64) - 1):
            first = marks[marks < last] + 1  # a cell's first byte
            c = arr[first]
            lead = first[(c == 61) | (c == 43) | (c == 45) | (c == 64)]  # = + - @
            lead = lead[lead < last]
            if lead.size and _letters(arr[lead + 1]):
                return True
        return False
    lead = np.flatnonzero((arr == 61) | (arr == 43) | (arr == 45) | (arr == 64))  # = + - @
    lead = lead[lead < last]
    if not lead.size:
        return False
    before = arr[np.maximum(lead - 1, 0)]
    at_start = (lead == 0) | (before == 44) | (before == 10)
    return _letters(arr[lead[at_start] + 1])


def _letters(c: np.ndarray) -> bool:
    """True when some byte of *c* is an ASCII letter."""
    c = c | 32  # ASCII letters fold to lower case
    return bool(((c >= 97) & (c <= 122)).any())


#: bytes of quote-free CSV looked at in one piece (whole lines) when cells are counted or
#: located: the positions of one piece's commas (8 bytes each) are all that is held at once,
#: never those of the whole file (a file of commas would need 8 bytes per byte)
_PIECE = 1 << 21


def _byte_positions(arr: np.ndarray, value: int) -> np.ndarray:
    """Return the positions of every byte *value* in *arr*, as int32 when the positions fit."""
    dtype: type[np.signedinteger[Any]] = np.int32 if arr.size < 2 ** 31 - 1 else np.int64
    parts: list[np.ndarray] = []
    for a in range(0, arr.size, _PIECE):
        at = np.flatnonzero(arr[a:a + _PIECE] == value).astype(dtype)
        at += a
        parts.append(at)
    return np.concatenate(parts) if parts else np.zeros(0, dtype=dtype)


def _line_pieces(nl: np.ndarray, size: int) -> Iterator[tuple[int, int, int, int]]:
    """Yield (first line, end line, first byte, end byte) of runs of whole lines of about _PIECE bytes.

    *nl* holds the end of every line (a newline, or *size* for a last line without one).
    """
    a, n = 0, nl.size
    while a < n:
        start = 0 if a == 0 else int(nl[a - 1]) + 1
        b = min(max(int(np.searchsorted(nl, start + _PIECE, side="left")), a + 1), n)
        yield a, b, start, min(int(nl[b - 1]) + 1, size)
        a = b


def _cells_per_line(arr: np.ndarray, nl: np.ndarray) -> np.ndarray:
    """Return the number of cells (commas + 1) of every line of quote-free CSV bytes."""
    out = np.empty(nl.size, dtype=np.int64)
    for a, b, s, e in _line_pieces(nl, arr.size):
        commas = np.flatnonzero(arr[s:e] == 44)
        out[a:b] = np.diff(np.searchsorted(commas, nl[a:b] - s), prepend=0) + 1
    return out


def _hints_by_piece(arr: np.ndarray, nl: np.ndarray, raw: bytes | None = None, formula: bool = True
                    ) -> tuple[bool, bool]:
    """Return _space_hint and (with *formula*, else False) _formula_hint of quote-free CSV bytes,
    worked on pieces of whole lines (the same answers: a piece begins and ends at a line's edge)."""
    spaces = not (raw is not None and b" " not in raw and b"\t" not in raw)
    found = [False, False]
    for a, b, s, e in _line_pieces(nl, arr.size):
        seg = arr[s:e]
        commas, local = np.flatnonzero(seg == 44), nl[a:b].astype(np.int64) - s
        if spaces and not found[0]:
            found[0] = _space_hint(seg, commas, local)
        if formula and not found[1]:
            found[1] = _formula_hint(seg, commas, local)
        if found[0] and (found[1] or not formula):
            break
    return found[0], found[1]


def _fmt(x: float) -> str:
    """Return a bound as short text."""
    return f"{x:g}"


def _range_text(c: Column) -> str:
    """Return the allowed range of column *c* in words."""
    if c.lo is not None and c.hi is not None:
        if c.lo_open:
            return f"above {_fmt(c.lo)} up to {_fmt(c.hi)}"
        return f"{_fmt(c.lo)} to {_fmt(c.hi)}"
    if c.lo is not None:
        return f"more than {_fmt(c.lo)}" if c.lo_open else f"at least {_fmt(c.lo)}"
    return f"at most {_fmt(c.hi)}" if c.hi is not None else "any"


def _inside(root: Path, path: Path) -> Path | None:
    """Return the resolved *path* when it lies inside *root* (already resolved), else None."""
    try:
        real = path.resolve(strict=False)
    except (OSError, RuntimeError):
        return None
    try:
        real.relative_to(root)
    except ValueError:
        return None
    return real


def _rel(root: Path, path: Path) -> str:
    """Return *path* relative to *root* in POSIX form (without resolving links)."""
    try:
        return path.relative_to(root).as_posix()
    except ValueError:
        return path.as_posix()


class _Inputs:
    """Read input files read-only, confined to the programme folder, recording them for the digest.

    The digest runs over the files in the order of their relative paths. ``settle(bound)``
    says that no file sorting before *bound* will be read any more: the files read so far
    that sort before it are hashed then and their bytes let go, so a large file is not
    held to the end of the load.
    """

    def __init__(self, root: Path, findings: Findings) -> None:
        self.root = root
        self.findings = findings
        self.read: dict[str, bytes] = {}  # read, not hashed yet
        self._hash = hashlib.sha256()
        self._hashed: dict[str, Path] = {}  # hashed already (the last one sorts last)
        self._bound = ""  # no file sorting before it is read any more
        self._late = False  # a file sorting before the bound was read after all
        self._paths: dict[str, Path] = {}

    def get(self, path: Path, rel: str | None = None, folder_inside: bool = False,
            limit: int | None = None) -> bytes | None:
        """Return the bytes of *path*, or None (with an error) when it may not or cannot be read.

        With *folder_inside* (the containing folder already resolved inside the programme),
        only a symbolic link needs resolving. Only regular files of at most *limit* bytes are
        read (a named pipe would block, a device never end); *limit* defaults to MAX_FILE_BYTES.
        """
        rel = rel or _rel(self.root, path)
        if (not folder_inside or os.path.islink(path)) and _inside(self.root, path) is None:
            self.findings.error(rel, None, None, "resolves outside the programme folder (symbolic link?); "
                                "not read")
            return None
        try:
            data = read_regular(path, MAX_FILE_BYTES if limit is None else limit)
        except InputFileError as exc:
            self.findings.error(rel, None, None, str(exc))
            return None
        if rel < self._bound or rel in self._hashed:
            self._late = True  # (the digest then reads the hashed files again, in order)
        self.read[rel] = data
        self._paths[rel] = path
        return data

    def settle(self, bound: str, through: bool = False) -> None:
        """Hash and let go of the files read so far that sort before *bound* (or are *bound*, with
        *through*): no file sorting before it is read any more."""
        if self._late:
            return
        ready = sorted(r for r in self.read if r < bound or (through and r == bound))
        for rel in ready:
            self._update(self._hash, rel, self.read.pop(rel))
            self._hashed[rel] = self._paths[rel]
        self._bound = max(self._bound, bound)

    @staticmethod
    def _update(h: Any, rel: str, data: bytes) -> None:
        """Feed one file (its relative path and its bytes, each with its length) into *h*."""
        name = rel.encode("utf-8")
        h.update(len(name).to_bytes(8, "big") + name)
        h.update(len(data).to_bytes(8, "big"))
        h.update(data)  # not concatenated: that would copy the largest file once more

    def digest(self) -> str:
        """Return sha256 over the sorted (relative path, bytes) of every file read."""
        if self._late:  # files came out of order: hash every file again from the start
            h = hashlib.sha256()
            for rel in sorted({*self._hashed, *self.read}):
                data = self.read.get(rel)
                if data is None:
                    try:
                        data = read_regular(self._hashed[rel], MAX_FILE_BYTES)
                    except InputFileError:
                        data = b""
                self._update(h, rel, data)
            return h.hexdigest()
        h = self._hash.copy()
        for rel in sorted(self.read):
            self._update(h, rel, self.read[rel])
        return h.hexdigest()


def _long_line(raw: bytes, limit: int) -> tuple[int, int] | None:
    """Return (line number, length in bytes) of the first line longer than *limit*, or None."""
    if len(raw) <= limit:
        return None
    arr = np.frombuffer(raw, dtype=np.uint8)
    chunk = 16 * 1024 * 1024
    line, last_end = 1, -1  # last_end: position of the newline ending the previous line
    for a in range(0, arr.size, chunk):
        nl = np.flatnonzero(arr[a:a + chunk] == 10) + a
        ends = np.concatenate(([last_end], nl))
        lengths = np.diff(ends) - 1
        over = np.flatnonzero(lengths > limit)
        if over.size:
            return line + int(over[0]), int(lengths[over[0]])
        line += nl.size
        if nl.size:
            last_end = int(nl[-1])
    tail = arr.size - last_end - 1
    return (line, tail) if tail > limit else None


def _decode(raw: bytes, rel: str, findings: Findings, max_line: int | None = -1) -> str | None:
    """Return UTF-8 text (BOM removed) or None with one error naming the first bad byte.

    A file with a line longer than *max_line* bytes (default MAX_LINE_BYTES; None: no
    limit) is refused before it is decoded.
    """
    max_line = MAX_LINE_BYTES if max_line == -1 else max_line
    long = _long_line(raw, max_line) if max_line else None
    if long is not None:
        findings.error(rel, long[0], None, f"line {long[0]} is {long[1]:,} bytes long, more than the "
                       f"{size_text(max_line)} a line may have; the file is not read")  # type: ignore[arg-type]
        return None
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        findings.error(rel, 1, None, "looks like UTF-16 text (byte-order mark); save the file as UTF-8")
        return None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        # the decoder counts from after a byte-order mark; positions here are in the whole file
        start = exc.start + (3 if raw.startswith(b"\xef\xbb\xbf") else 0)
        line = raw.count(b"\n", 0, start) + 1
        col = start - (raw.rfind(b"\n", 0, start) + 1) + 1
        findings.error(rel, line, None, f"not UTF-8 text: byte 0x{raw[start]:02x} on line {line} (byte {col} "
                       f"of the line, {start + 1} of the file) cannot be decoded; save the file as UTF-8")
        return None
    if "\x00" in text:
        line = text[:text.index("\x00")].count("\n") + 1
        findings.error(rel, line, None, "contains NUL bytes: not a text file; save it as UTF-8 CSV")
        return None
    return text


# ---------------------------------------------------------------------------------------
# parsing CSV text and xlsx sheets into (header, cells, line numbers)


@dataclass
class _Grid:
    """Cells of one sheet as text: header labels, body cells by position, line of each record."""

    header: list[str]
    cells: pd.DataFrame  # columns 0..n-1, str, "" for blank
    rows: np.ndarray  # line number of each body record
    path: str | np.ndarray
    #: (cells may carry surrounding spaces, cells may look like formulas); True when unknown
    hints: tuple[bool, bool] = (True, True)
    #: hearing-level columns read as numbers (by position): True where the cell said NR
    nr: dict[int, np.ndarray] = field(default_factory=dict)


_NR_TEXTS = ["NR", "nr", "Nr", "nR"]
#: the ASCII characters that str.strip() removes
_ASCII_SPACE = b" \t\n\r\x0b\x0c\x1c\x1d\x1e\x1f"


def _first_line(text: str) -> str:
    """Return the first line of *text* without its line end."""
    end = text.find("\n")
    return (text if end < 0 else text[:end]).rstrip("\r")


def _typed_columns(text: str, spec: FileSpec | None) -> dict[int, Column]:
    """Return the columns (by position) of quote-free CSV *text* that may be read as numbers at once.

    These are the numeric and hearing-level columns that *spec* declares under their own
    name (the first of a repeated name only); none for wide audiograms.
    """
    if spec is None:
        return {}
    labels = [h.replace("\ufeff", "").strip().lower() for h in _first_line(text).split(",")]
    if spec.name == "audiograms" and "ear" not in labels:
        return {}
    numeric = {c.name: c for c in spec.columns if c.kind in _NUMERIC_KINDS or c.kind in ("hl", "date")}
    out: dict[int, Column] = {}
    seen: set[str] = set()
    for i, name in enumerate(labels):
        if name in numeric and name not in seen:
            out[i] = numeric[name]
        seen.add(name)
    return out


def _clean_numbers(c: Column, values: np.ndarray, blanks_only: Callable[[], bool]) -> bool:
    """Return True when the numbers of a column read at once need no finding but 'blank'.

    A column that fails (a cell that is not a finite number within the declared range, a
    hearing level that is blank or NR, a NaN that may have been written as text) is read
    again as text so that its findings quote the cells as written.
    """
    nan = np.isnan(values)
    if nan.any() and (c.kind == "hl" or not blanks_only()):
        return False
    return _clean_values(c, values[~nan])


def _clean_values(c: Column, v: np.ndarray) -> bool:
    """Return True when every number of *v* (no NaN) is finite, whole where declared and in range."""
    if not np.isfinite(v).all():
        return False
    if c.lo is not None and ((v <= c.lo) if c.lo_open else (v < c.lo)).any():
        return False
    if c.hi is not None and (v > c.hi).any():
        return False
    return not (c.kind == "int" and (np.mod(v, 1.0) != 0).any())


class _Fields:
    """Where the cells of some columns of quote-free CSV bytes lie, for files whose every line has
    the header's cells.

    Lets a column be checked or parsed straight from the bytes: its blank cells, its ``NR``
    cells, its ISO dates. *lines* are the indices of the body records among all lines. Only
    the cell edges of *columns* are kept (one position per line and edge, int32 below 2 GiB);
    the other columns are looked at piece by piece (``formula``).
    """

    def __init__(self, arr: np.ndarray, nl: np.ndarray, ncols: int, lines: np.ndarray,
                 columns: Iterable[int] = ()) -> None:
        self.arr = arr
        self.nl = nl
        n = nl.size
        starts = np.concatenate(([0], nl[:-1] + 1)).astype(nl.dtype)
        ends = nl.copy()
        cr = (ends > starts) & (arr[np.maximum(ends - 1, 0)] == 13)
        ends[cr] -= 1
        self.starts, self.ends = starts[lines], ends[lines]
        self.body = np.zeros(n, dtype=bool)
        self.body[lines] = True
        #: the body records as a slice of all lines when they follow one another (no blank line between)
        self.lines: slice | np.ndarray = slice(int(lines[0]), int(lines[-1]) + 1) \
            if lines.size and int(lines[-1]) - int(lines[0]) + 1 == lines.size else lines
        self.ncols = ncols
        wanted = set(columns)
        need = sorted({j - 1 for j in wanted if j > 0} | {j for j in wanted if j < ncols - 1})
        #: position of the k-th comma of every line, for the commas that bound the cells of *columns*
        self.commas: dict[int, np.ndarray] = {k: np.empty(n, dtype=nl.dtype) for k in need}
        if need:
            for a, b, s, e in _line_pieces(nl, arr.size):
                at = np.flatnonzero(arr[s:e] == 44).reshape(b - a, ncols - 1)
                for k in need:
                    self.commas[k][a:b] = at[:, k] + s

    def span(self, j: int) -> tuple[np.ndarray, np.ndarray]:
        """Return (first byte, end byte) of the cells of column *j* in every body record."""
        a = self.starts if j == 0 else self.commas[j - 1][self.lines] + 1
        b = self.ends if j == self.ncols - 1 else self.commas[j][self.lines]
        return a, b

    def blank_or_nr(self, j: int, at: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Return (empty, written NR in any case) for the cells of column *j* in body records *at*."""
        a, b = self.span(j)
        a, b = a[at], b[at]
        two = b - a == 2
        first, second = self.arr[a[two]] | 32, self.arr[a[two] + 1] | 32  # ASCII letters to lower case
        nr = np.zeros(a.size, dtype=bool)
        nr[two] = (first == ord("n")) & (second == ord("r"))
        return a == b, nr

    def formula(self, columns: list[int]) -> bool:
        """Return True when a cell of *columns* begins with =, +, - or @ and a letter (as _formula_hint)."""
        if not columns:
            return False
        cols = np.asarray(sorted(columns), dtype=np.int64)
        arr, last = self.arr, self.arr.size - 1
        for a, b, s, e in _line_pieces(self.nl, arr.size):
            body = self.body[a:b]
            if not body.any():
                continue
            at = np.flatnonzero(arr[s:e] == 44).reshape(b - a, self.ncols - 1)
            if not body.all():
                at = at[body]
            at += s
            firsts, ends = [], []
            for j in cols.tolist():
                if j == 0:
                    line = np.concatenate(([0], self.nl[a:b - 1] + 1)) if a == 0 else self.nl[a - 1:b - 1] + 1
                    firsts.append(line if body.all() else line[body])
                else:
                    firsts.append(at[:, j - 1] + 1)
                ends.append(at[:, j] if j < self.ncols - 1 else
                            (self.nl[a:b] if body.all() else self.nl[a:b][body]))
            first, end = np.concatenate(firsts), np.concatenate(ends)
            first = first[end - first >= 2]  # (after a cell of one byte comes a comma or line end, never a letter)
            c = arr[first]
            lead = first[(c == 61) | (c == 43) | (c == 45) | (c == 64)]
            if lead.size and _letters(arr[np.minimum(lead + 1, last)]):
                return True
        return False

    def fixed(self, j: int, width: int) -> tuple[np.ndarray, np.ndarray] | None:
        """Return (empty, first byte of each other cell) for column *j*; None when a cell that
        is not empty is not *width* bytes long."""
        a, b = self.span(j)
        size = b - a
        blank = size == 0
        if not ((size == width) | blank).all():
            return None
        return blank, a[~blank]


def _month_tables() -> tuple[np.ndarray, np.ndarray]:
    """Return (day number since 1970-01-01 of the first day, number of days) of every month of YEAR_MIN to YEAR_MAX."""
    first = np.arange(np.datetime64(f"{YEAR_MIN}-01", "M"), np.datetime64(f"{YEAR_MAX + 1}-02", "M"))
    days = first.astype("datetime64[D]").astype(np.int64)
    return days[:-1], np.diff(days)


_MONTH_FIRST, _MONTH_DAYS = _month_tables()
#: two ASCII digits read as one native 16-bit number -> the number they write (-1: not two digits)
_DIGIT_PAIRS = np.full(65536, -1, dtype=np.int16)
_DIGIT_PAIRS[np.frombuffer(b"".join(f"{v:02d}".encode() for v in range(100)), dtype=np.uint16)] = np.arange(100)
_NS_PER_S = 1_000_000_000


def _pairs16(arr: np.ndarray) -> np.ndarray:
    """Return a view of *arr* (bytes) as the native 16-bit number at every byte position (no copy)."""
    if arr.size < 2:
        return np.zeros(0, dtype=np.uint16)
    return np.ndarray(shape=(arr.size - 1,), dtype=np.uint16, buffer=arr, offset=0, strides=(1,))


def _iso_cells(fields: _Fields, j: int, with_time: bool) -> np.ndarray | None:
    """Return column *j* written as YYYY-MM-DD (or YYYY-MM-DDTHH:MM:SS) as datetime64[ns], NaT where blank.

    None when a cell is written otherwise, is no calendar date or clock time, or lies outside
    the years YEAR_MIN to YEAR_MAX: such a column is read as text, whose findings quote it.
    Each pair of digits is read as one 16-bit number straight from the bytes and looked up
    in a table; the parts stay small integers until the day and second numbers are joined.
    """
    width = 19 if with_time else 10
    got = fields.fixed(j, width)
    if got is None:
        return None
    blank, at = got
    if not at.size:  # (every cell blank; the bytes may be fewer than one cell's width)
        return np.full(blank.size, np.datetime64("NaT"), dtype="datetime64[ns]")
    arr = fields.arr
    seps = [(4, 45), (7, 45)] + ([(10, 84), (13, 58), (16, 58)] if with_time else [])  # - - T : :
    for k, ch in seps:
        if not (arr[at + k] == ch).all():
            return None
    pairs16 = _pairs16(arr)
    pairs = []
    for k in (0, 2, 5, 8) + ((11, 14, 17) if with_time else ()):
        v = _DIGIT_PAIRS[pairs16[at + k]]
        if v.min() < 0:
            return None
        pairs.append(v)
    year = pairs[0] * np.int16(100) + pairs[1]
    month, day = pairs[2], pairs[3]
    if (year.min() < YEAR_MIN) | (year.max() > YEAR_MAX) | (month.min() < 1) | (month.max() > 12) | (day.min() < 1):
        return None
    ym = (year - np.int16(YEAR_MIN)) * np.int16(12) + (month - np.int16(1))
    if (day > _MONTH_DAYS[ym]).any():
        return None
    ns = _MONTH_FIRST[ym] + (day - 1)
    ns *= 86400
    if with_time:
        hour, minute, second = pairs[4], pairs[5], pairs[6]
        if (hour.max() > 23) | (minute.max() > 59) | (second.max() > 59):
            return None
        ns += (hour.astype(np.int32) * 60 + minute) * 60 + second
    ns *= _NS_PER_S
    out = np.full(blank.size, np.datetime64("NaT"), dtype="datetime64[ns]")
    out[~blank] = ns.view("datetime64[ns]")
    return out


def _csv_read(text: str, raw: bytes, ncols: int, **options: Any) -> pd.DataFrame:
    """Read quote-free CSV with pandas' C reader (every line a record, long lines skipped).

    The reader takes the UTF-8 bytes *raw* (the same cells as *text*) where it can: a text
    buffer would hold four bytes per character while it reads.
    """
    source: io.IOBase = io.StringIO(text) if raw.startswith(b"\xef\xbb\xbf") else io.BytesIO(raw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pd.read_csv(source, header=None, names=list(range(ncols)), skip_blank_lines=False, encoding="utf-8",
                           on_bad_lines="skip", engine="c", quoting=csv.QUOTE_NONE, **options)


#: cells of the undeclared columns turned into text objects at once (the rest are codes)
_CATEGORY_CELLS = 1 << 23


def _csv_categories(text: str, raw: bytes, ncols: int, columns: list[int], skiprows: int = 0
                    ) -> dict[int, pd.Categorical]:
    """Read *columns* of quote-free CSV as categorical text (categories in text order).

    The records are read a few million cells at a time, each block's cells coded against
    the categories met so far, so only one block of cells is ever held as text objects.
    """
    rows = max(1, _CATEGORY_CELLS // max(1, len(columns)))
    words: dict[int, pd.Index] = {j: pd.Index([], dtype=object) for j in columns}
    codes: dict[int, list[np.ndarray]] = {j: [] for j in columns}
    reader: Any = _csv_read(text, raw, ncols, skiprows=skiprows, usecols=columns, dtype=str, keep_default_na=False,
                            na_filter=False, chunksize=rows)
    with reader, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for block in reader:
            for j in columns:
                code, seen = pd.factorize(block[j].to_numpy(dtype=object))
                where = words[j].get_indexer(seen)
                new = where < 0
                if new.any():
                    where[new] = len(words[j]) + np.arange(int(new.sum()))
                    words[j] = words[j].append(pd.Index(np.asarray(seen, dtype=object)[new], dtype=object))
                small = np.min_scalar_type(max(len(words[j]) - 1, 0))
                codes[j].append(where.astype(small)[code] if code.size else code.astype(small))
    out: dict[int, pd.Categorical] = {}
    for j in columns:
        order = np.argsort(np.asarray(words[j], dtype=object), kind="stable")
        rank = np.empty(len(order), dtype=np.int64)
        rank[order] = np.arange(len(order))
        parts = codes.pop(j)
        cells = np.concatenate(parts) if parts else np.zeros(0, dtype=np.int8)
        dtype = np.int8 if len(order) < 127 else np.int16 if len(order) < 32767 else np.int32
        out[j] = pd.Categorical.from_codes(rank.astype(dtype)[cells] if cells.size else cells.astype(dtype),
                                           categories=pd.Index(np.asarray(words[j], dtype=object)[order],
                                                               dtype=object))
    return out


def _csv_numbers(text: str, raw: bytes, ncols: int, typed: dict[int, Column], count: int,
                 drop: np.ndarray, fields: _Fields | None = None, skip: Iterable[int] = (),
                 unknown: Iterable[int] = ()) -> tuple[pd.DataFrame, dict[int, np.ndarray]] | None:
    """Read the body of quote-free CSV with the *typed* columns parsed; None when that fails.

    Numbers arrive as float64. With *fields* (where each cell lies in the bytes), a hearing
    level may be blank or NR (returned as NaN, with a mask of its NR cells by position) and
    dates written YYYY-MM-DD are parsed from the bytes as datetime64[ns]. Columns whose
    values would need a finding are read again as text, so the rest of the reading sees
    exactly the cells the text path would give it. Columns *skip* are not read (the frame has
    no such column), columns *unknown* are read as categorical text.
    """
    skip, unknown = set(skip), set(unknown)
    dates = {i: c for i, c in typed.items() if c.kind == "date"} if fields is not None and count > 0 else {}
    numbers = {i: c for i, c in typed.items() if c.kind != "date"}
    if not numbers and not dates:
        return None
    dtype = {i: ("float64" if i in numbers else str)
             for i in range(ncols) if i not in dates and i not in skip and i not in unknown}
    if not dtype:
        return None
    na = {i: [""] + (_NR_TEXTS if c.kind == "hl" else []) for i, c in numbers.items()}
    try:
        df = _csv_read(text, raw, ncols, skiprows=1, dtype=dtype, keep_default_na=False, na_values=na,
                       float_precision="round_trip", usecols=sorted(dtype) if dates or skip or unknown else None)
        texts = _csv_categories(text, raw, ncols, sorted(unknown), skiprows=1) if unknown else {}
    except (ValueError, TypeError, OverflowError, IndexError, pd.errors.ParserError):
        return None  # a cell that is not a number: every column is read as text
    if len(df) != count or any(len(v) != count for v in texts.values()):
        return None
    for i, v in texts.items():
        df[i] = v
    if drop.any():
        df = df.loc[~drop]
    lower: list[bool] = []

    def blanks_only() -> bool:  # no cell written as 'nan' or 'inf' that the reader would take as a number
        if not lower:
            low = raw.lower()
            lower.append(b"nan" not in low and b"inf" not in low)
        return lower[0]

    marks: dict[int, np.ndarray] = {}
    again: list[int] = []
    for i, c in numbers.items():
        values = df[i].to_numpy(dtype="float64")
        if fields is None:
            if not _clean_numbers(c, values, blanks_only):
                again.append(i)
            continue
        nan = np.isnan(values)
        at = np.flatnonzero(nan)  # a blank cell, and a NR cell of a level, always reads as NaN
        blank, nr = fields.blank_or_nr(i, at)
        if c.kind != "hl":
            nr[:] = False
        if (blank | nr).all() and _clean_values(c, values[~nan]):
            if nr.any():
                marks[i] = np.zeros(len(values), dtype=bool)
                marks[i][at[nr]] = True
        else:
            again.append(i)  # a NaN not written blank (or NR), a value out of range ...
    parsed: dict[int, np.ndarray] = {}
    for i in dates:
        v = _iso_cells(fields, i, with_time=False) if fields is not None else None
        if v is None:
            again.append(i)
        else:
            parsed[i] = v
    if again:
        try:
            cells = _csv_read(text, raw, ncols, skiprows=1, usecols=sorted(again), dtype=str, keep_default_na=False,
                              na_filter=False)
        except (ValueError, pd.errors.ParserError):
            return None
        if len(cells) != count:
            return None
        if drop.any():
            cells = cells.loc[~drop]
        for i in again:
            df[i] = cells[i]
    df = df.reset_index(drop=True)
    if dates or unknown:
        for i, v in parsed.items():
            df[i] = v
        df = df[[i for i in range(ncols) if i not in skip]]
    return df, marks


def _kept_bytes(raw: bytes, nl: np.ndarray, keep: np.ndarray) -> bytes:
    """Return the lines of *raw* where *keep* is True (every line when all are), line ends included."""
    if keep.all() or raw.startswith(b"\xef\xbb\xbf"):  # (a second mark: the reader reads the text)
        return raw
    edges = np.flatnonzero(np.diff(np.concatenate(([False], keep, [False])).astype(np.int8)))
    view = memoryview(raw)
    out = []
    for a, b in zip(edges[0::2].tolist(), edges[1::2].tolist()):  # runs of kept lines a .. b-1
        out.append(view[0 if a == 0 else int(nl[a - 1]) + 1:min(int(nl[b - 1]) + 1, len(raw))])
    return b"".join(out)


def _unread_columns(arr: np.ndarray, nl: np.ndarray, fields: np.ndarray, ncols: int, header: list[str],
                    keep: np.ndarray, spec: FileSpec) -> tuple[list[int], list[int]]:
    """Return (columns whose cells are never used, columns not declared by *spec*) by position.

    Never used (see _named): a blank header cell over no cell written, a repeated name after
    its first column, a name the reader makes. Such columns are not read at all, so a file
    of empty cells under blank headers costs no text object per cell; undeclared columns
    are read as categorical text (one object per distinct cell). Neither for a file that may
    be a wide audiogram table (its columns are named by another declaration).
    """
    labels = [_label(h) for h in header]
    if spec.name == "audiograms" and "ear" not in labels:
        return [], []
    declared, generated = {c.name for c in spec.columns}, _generated(spec)
    skip: list[int] = []
    seen: set[str] = set()
    for j, name in enumerate(labels):
        if name and (name in generated or name in seen):
            skip.append(j)
        seen.add(name)
    blank = _blank_columns(arr, nl, fields, ncols, labels, keep)
    unknown = [j for j, name in enumerate(labels) if j not in skip and j not in blank and name not in declared]
    return sorted(skip + blank), unknown


def _blank_columns(arr: np.ndarray, nl: np.ndarray, fields: np.ndarray, ncols: int, labels: list[str],
                   keep: np.ndarray) -> list[int]:
    """Return the columns with a blank header label and no byte in any cell of the lines read."""
    left = {j for j, h in enumerate(labels) if not h}
    if not left:
        return []
    read = keep.copy()
    read[0] = False  # (the header)
    for a, b, s, e in _line_pieces(nl, arr.size):
        if not read[a:b].any():
            continue
        seg = arr[s:e]
        ends = nl[a:b].astype(np.int64) - s
        content = (seg != 44) & (seg != 10)
        cr = ends[(ends > 0) & (seg[np.maximum(ends - 1, 0)] == 13)] - 1  # (a line's closing CR is no cell byte)
        content[cr] = False
        at = np.flatnonzero(content)
        if not at.size:
            continue
        line = np.searchsorted(ends, at)  # the line of each byte
        on = read[a:b][line]
        at, line = at[on], line[on]
        commas = np.flatnonzero(seg == 44)
        first = np.concatenate(([0], ends[:-1] + 1))[line]
        col = np.searchsorted(commas, at) - np.searchsorted(commas, first)
        left -= set(np.unique(col).tolist())
        if not left:
            return []
    return sorted(left)


def _csv_fast(text: str, raw: bytes, rel: str, findings: Findings, spec: FileSpec | None = None) -> _Grid | None:
    """Parse quote-free CSV with pandas' C reader; None when a consistency check fails.

    With *spec*, its numeric and date columns are parsed at once where every cell allows it,
    and columns with a blank header and no cell written are not read. The bytes are looked
    at in pieces of whole lines (_PIECE): the memory held is per line and per cell read,
    never per comma of the whole file.
    """
    arr = np.frombuffer(raw, dtype=np.uint8)
    nl = _byte_positions(arr, 10)
    if not raw.endswith(b"\n"):
        nl = np.append(nl, nl.dtype.type(arr.size))
    n_lines = nl.size
    fields = _cells_per_line(arr, nl)  # cells on each line
    starts = np.concatenate(([0], nl[:-1] + 1))
    length = nl - starts
    cr = (length > 0) & (arr[np.minimum(nl - 1, arr.size - 1)] == 13)
    # an empty line, or a line of separators only (",,,,", which spreadsheets write), holds no data
    blank = (length - cr) == fields - 1
    del starts, length, cr
    ncols = int(fields[0])
    bad = (fields != ncols) & ~blank
    bad[0] = False
    line_no = np.arange(1, n_lines + 1)
    keep = fields <= ncols
    labels = _first_line(text).split(",")
    skip, unknown = _unread_columns(arr, nl, fields, ncols, labels, keep, spec) if spec is not None else ([], [])
    src = _kept_bytes(raw, nl, keep)  # lines longer than the header are not read: the reader never sees them
    spaces = _hints_by_piece(arr, nl, raw, formula=False)[0]
    typed = _typed_columns(text, spec) if not spaces and not bad.any() and not blank[0] else {}
    if typed:
        where = _Fields(arr, nl, ncols, np.flatnonzero(~blank[1:]) + 1, typed) \
            if bool((fields == ncols).all()) else None
        got = _csv_numbers(text, src, ncols, typed, int(keep.sum()) - 1, blank[keep][1:], where, skip, unknown)
        if got is not None:
            body, marks = got
            rows = line_no[keep][1:]
            # formulas are looked for in text cells only: the typed columns hold numbers and dates
            # (a typed column read again as text is no text column either)
            formula = where.formula([j for j in range(ncols) if j not in typed]) if where is not None \
                else _hints_by_piece(arr, nl)[1]
            return _Grid(labels, body, rows[~blank[keep][1:]], rel, (spaces, formula), marks)
    hints = spaces, _hints_by_piece(arr, nl)[1]
    used = [j for j in range(ncols) if j not in skip]
    if len(unknown) == len(used):
        unknown = []  # (no declared column: every column is read as text)
    df = _csv_read(text, src, ncols, dtype=str, keep_default_na=False, na_filter=False,
                   usecols=[j for j in used if j not in unknown] if skip or unknown else None)
    if len(df) != int(keep.sum()):
        return None  # the C reader saw the lines differently (e.g. lone CR line ends): use the slow path
    if unknown:
        texts = _csv_categories(text, src, ncols, unknown)
        if any(len(v) != len(df) for v in texts.values()):
            return None
        for j, v in texts.items():
            df[j] = v
        df = df[used]
    del src
    if bad.any():
        _ragged(findings, rel, line_no[bad], fields[bad], ncols)
    rows = line_no[keep]
    drop = blank[keep]
    if len(df):
        first = df.iloc[0]
        header = [str(first[j]) if j in first.index else labels[j] for j in range(ncols)] if skip \
            else [str(x) for x in first.tolist()]
    else:
        header = []
    body = df.iloc[1:]
    rows = rows[1:]
    drop = drop[1:]
    if drop.any():
        body = body.loc[~drop]
        rows = rows[~drop]
    return _Grid(header, body.reset_index(drop=True), rows, rel, hints)


def _csv_quoted(text: str, rel: str, findings: Findings) -> _Grid | None:
    """Parse CSV that may hold quoted fields (with commas or line breaks) with the csv module."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        records = list(reader)
    except csv.Error as exc:
        findings.error(rel, reader.line_num or None, None, f"cannot be read as CSV: {exc} "
                       "(unbalanced quotes?)")
        return None
    if not records:
        return _Grid([], pd.DataFrame(), np.zeros(0, dtype=np.int64), rel)
    lens = np.fromiter(map(len, records), dtype=np.int64, count=len(records))
    ncols = int(lens[0])
    if ncols > MAX_COLUMNS:
        _too_wide(findings, rel, ncols)
        return None
    if lens.max() > ncols:  # rows longer than the header are not read: keep no more cells of them
        records = [r[:ncols] for r in records]
    columns = list(itertools.zip_longest(*records, fillvalue=None))
    frame = pd.DataFrame({i: pd.Series(c, dtype=object) for i, c in enumerate(columns)},
                         index=pd.RangeIndex(len(records)))
    breaks = np.zeros(len(records), dtype=np.int64)
    for c in frame.columns:
        breaks += frame[c].fillna("").astype(str).str.count("\n").to_numpy(dtype=np.int64)
    span = 1 + breaks
    start_line = np.concatenate(([1], 1 + np.cumsum(span)[:-1]))
    header = [str(x) for x in records[0]]
    # an empty record, or one whose every cell is empty (",,,,", which spreadsheets write)
    blank = (lens == 0) | frame.fillna("").eq("").all(axis=1).to_numpy(dtype=bool)
    bad = (lens != ncols) & ~blank
    bad[0] = False
    if bad.any():
        _ragged(findings, rel, start_line[bad], lens[bad], ncols)
    keep = ~blank & (lens <= ncols)
    keep[0] = False
    body = frame.loc[keep, list(range(min(ncols, frame.shape[1])))].fillna("")
    body = body.astype(str).reset_index(drop=True)
    return _Grid(header, body, start_line[keep], rel)


def _too_wide(findings: Findings, rel: str, ncols: int) -> None:
    """Record that a file has more columns than are read."""
    findings.error(rel, 1, None, f"the header has {ncols:,} columns, more than the {MAX_COLUMNS:,} a data "
                   "file may have; the file is not read")


def _ragged(findings: Findings, rel: str, lines: np.ndarray, fields: np.ndarray, ncols: int) -> None:
    """Record one error per line whose number of cells differs from the header's."""
    msgs = [f"has {n} field{'s' if n != 1 else ''} but the header has {ncols}"
            + (" (row not read)" if n > ncols else " (missing cells read as blank)")
            for n in fields.tolist()]
    findings.add_rows(rel, lines.tolist(), None, ERROR, msgs, key="ragged row")


def _parse_csv(raw: bytes, rel: str, findings: Findings, spec: FileSpec | None = None) -> _Grid | None:
    """Return the cells of CSV bytes, or None after recording why they cannot be read.

    With *spec*, numeric columns of quote-free CSV may arrive as float64 (see _csv_fast).
    """
    text = _decode(raw, rel, findings)
    if text is None:
        return None
    if not text or text.isspace():
        return _Grid([], pd.DataFrame(), np.zeros(0, dtype=np.int64), rel)
    body_raw = raw[3:] if raw.startswith(b"\xef\xbb\xbf") else raw
    if '"' not in text:
        first = body_raw.find(b"\n")
        ncols = body_raw.count(b",", 0, len(body_raw) if first < 0 else first) + 1
        if ncols > MAX_COLUMNS:
            _too_wide(findings, rel, ncols)
            return None
        try:
            grid = _csv_fast(text, body_raw, rel, findings, spec)
        except (pd.errors.ParserError, ValueError) as exc:
            log.debug("fast CSV path failed for %s: %s", rel, exc)
            grid = None
        if grid is not None:
            return grid
    return _csv_quoted(text, rel, findings)


def _xlsx_cell_text(v: Any, date_only: bool = False) -> str:
    """Return one workbook cell as the text a CSV would hold."""
    if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NaT:
        return ""
    if isinstance(v, (pd.Timestamp, dt.datetime)):
        if date_only or (v.hour, v.minute, v.second, v.microsecond) == (0, 0, 0, 0):
            return v.strftime("%Y-%m-%d")
        return v.isoformat()
    if isinstance(v, dt.date):
        return v.isoformat()
    if isinstance(v, dt.time):
        return v.isoformat()
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    return str(v)


class _Refused(Exception):
    """A workbook that is not read (the reason is already a finding)."""


def _parse_xlsx(raw: bytes, rel: str, findings: Findings, spec: FileSpec, sheet: str | int = 0) -> _Grid | None:
    """Return the cells of one sheet (default the first) of an xlsx workbook, or None with an error."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return _read_sheet(raw, rel, findings, spec, sheet)
    except _Refused:
        return None
    except Exception as exc:  # openpyxl raises many kinds for a damaged workbook
        findings.error(rel, None, None, f"cannot be read as an Excel workbook (.xlsx): "
                       f"{type(exc).__name__}: {str(exc)[:120]}")
        return None


def _read_sheet(raw: bytes, rel: str, findings: Findings, spec: FileSpec, sheet: str | int = 0) -> _Grid:
    """Stream one sheet cell by cell (openpyxl's sheet parser), within the caps.

    Refuses a workbook that unpacks to more than MAX_XLSX_UNPACKED or whose sheet reaches
    beyond column MAX_COLUMNS; reports merged header cells, and formulas without a saved
    value and error values (#DIV/0!, #N/A ...) that are read as blank.
    """
    import zipfile

    import openpyxl
    from openpyxl.utils import get_column_letter
    from openpyxl.utils.cell import range_boundaries
    from openpyxl.worksheet._reader import FORMULA_TAG, VALUE_TAG, WorkSheetParser

    unpacked = sum(i.file_size for i in zipfile.ZipFile(io.BytesIO(raw)).infolist())
    if unpacked > MAX_XLSX_UNPACKED:
        findings.error(rel, None, None, f"unpacks to {size_text(unpacked)}, more than the "
                       f"{size_text(MAX_XLSX_UNPACKED)} a workbook may have; not read (save it as CSV)")
        raise _Refused
    wb = openpyxl.load_workbook(io.BytesIO(raw), read_only=True, data_only=True, keep_links=False)
    ws = wb[sheet] if isinstance(sheet, str) else wb.worksheets[sheet]
    if not hasattr(ws, "_get_source"):
        findings.error(rel, None, None, "the sheet is not a worksheet of cells; not read")
        raise _Refused
    if ws.max_column is not None and ws.max_column > MAX_COLUMNS:
        findings.error(rel, None, None, f"the sheet spans {ws.max_column:,} columns (to column "
                       f"{get_column_letter(ws.max_column)}), more than the {MAX_COLUMNS:,} a data file may "
                       "have; not read (delete the columns beyond the data)")
        raise _Refused

    class Parser(WorkSheetParser):
        """The sheet parser, marking formulas that carry no saved value."""

        def parse_cell(self, element: Any) -> dict:
            cell = super().parse_cell(element)
            saved = element.find(VALUE_TAG)
            # an empty saved value is an empty text result only for a text-typed cell (t="str")
            if element.find(FORMULA_TAG) is not None and (saved is None or (not saved.text and
                                                                             element.get("t") != "str")):
                cell["data_type"] = "formula without value"
                f = element.find(FORMULA_TAG)
                cell["value"] = "=" + (f.text or "")
            return cell

    sparse: dict[int, tuple[list[int], list[Any]]] = {}  # column (0-based) -> (sheet rows, values)
    head: dict[int, Any] = {}  # column (0-based) -> value in row 1
    odd: list[tuple[int, int, str, str]] = []  # (row, column, kind, text)
    with ws._get_source() as src:
        parser = Parser(src, ws._shared_strings, data_only=True, epoch=wb.epoch,
                        date_formats=wb._date_formats, timedelta_formats=wb._timedelta_formats)
        for r, row in parser.parse():
            for cell in row:
                c, v, t = cell["column"], cell["value"], cell["data_type"]
                if v is None or (t == "s" and v == ""):
                    continue
                if c > MAX_COLUMNS:
                    findings.error(rel, r, None, f"cell {get_column_letter(c)}{r} lies beyond column "
                                   f"{get_column_letter(MAX_COLUMNS)}, the last of the {MAX_COLUMNS:,} a data "
                                   "file may have; not read (delete the columns beyond the data)")
                    raise _Refused
                if t in ("formula without value", "e"):
                    odd.append((r, c, t, str(v)))
                    continue
                if isinstance(v, float) and v.is_integer():
                    v = int(v)  # as pandas' reader does: 5.0 is the whole number 5
                if r == 1:
                    head[c - 1] = v
                at = sparse.setdefault(c - 1, ([], []))
                at[0].append(r)
                at[1].append(v)
        merged = [m.coord for m in (parser.merged_cells.mergeCell if parser.merged_cells else [])]
    wb.close()
    row_ids = np.unique(np.asarray([r for rs, _ in sparse.values() for r in rs] + [r for r, _, _, _ in odd] + [1],
                                   dtype=np.int64))
    ncols = max([c + 1 for c in sparse] + [c for _, c, _, _ in odd] + [0])
    if len(row_ids) * ncols > MAX_XLSX_CELLS:
        findings.error(rel, None, None, f"the sheet has {len(row_ids):,} rows by {ncols:,} columns, more "
                       f"than the {MAX_XLSX_CELLS:,} cells a workbook may have; not read (save it as CSV)")
        raise _Refused
    labels = [str(head.get(i, "")).replace("\ufeff", "").strip().lower() for i in range(ncols)]
    dates = {c.name for c in spec.columns if c.kind in ("date", "date_or_year")}
    declared = {c.name for c in spec.columns}
    columns = {}
    for i in range(ncols):
        col = np.full(len(row_ids), "", dtype=object)
        date_only = labels[i] in dates
        if i in sparse:
            rs, vs = sparse[i]
            col[np.searchsorted(row_ids, rs)] = [_xlsx_cell_text(v, date_only) for v in vs]
        columns[i] = col
    if ncols == 0:
        return _Grid([], pd.DataFrame(), np.zeros(0, dtype=np.int64), rel)
    cells = pd.DataFrame(columns, index=pd.RangeIndex(len(row_ids)))
    header = [str(x) for x in cells.iloc[0].tolist()]  # row_ids starts with sheet row 1
    body = cells.iloc[1:]
    rows = row_ids[1:]

    def label(c: int) -> str | None:  # 1-based column
        return (labels[c - 1] or None) if c - 1 < len(labels) else None

    for r, c, t, text in sorted(odd):
        where = f"{get_column_letter(c)}{r}"
        if t == "e":
            findings.warning(rel, r, label(c), f"cell {where} holds the spreadsheet error {_short(text)}; read as blank",
                             key="xlsx: error value")
        else:
            level = ERROR if label(c) in declared else WARNING
            findings.add(rel, r, label(c), level, f"cell {where} holds the formula '{_short(text)}' without a "
                         "saved value (open and save the workbook in a spreadsheet program); read as blank",
                         key="xlsx: formula without value")
    for coord in sorted(merged):
        c1, r1, c2, r2 = range_boundaries(coord)
        if r1 == 1 and c2 > c1:
            lost = [get_column_letter(c) for c in range(c1 + 1, c2 + 1)
                    if c - 1 in sparse and any(rr != 1 for rr in sparse[c - 1][0])]
            level = ERROR if lost else WARNING
            more = (f"; column{'s' if len(lost) > 1 else ''} {', '.join(lost)} under it "
                    f"{'have' if len(lost) > 1 else 'has'} no label of its own and {'are' if len(lost) > 1 else 'is'} "
                    "not read as that column") if lost else ""
            findings.add(rel, 1, label(c1), level, f"header cells {coord} are merged: only column "
                         f"{get_column_letter(c1)} is named{more}; unmerge them and give every column its own label",
                         key="xlsx: merged header")
        elif r2 > max(r1, 1) or c2 > c1:
            findings.warning(rel, r1, label(c1), f"cells {coord} are merged: only {get_column_letter(c1)}{r1} holds "
                             "the value, the other "
                             "cells are read as blank", key="xlsx: merged cells")
    blank = body.eq("").all(axis=1).to_numpy() if body.shape[1] else np.zeros(len(body), dtype=bool)
    body = body.loc[~blank].reset_index(drop=True)
    body.columns = range(body.shape[1])
    return _Grid(header, body, rows[~blank], rel)


# ---------------------------------------------------------------------------------------
# columns and values


def _generated(spec: FileSpec) -> set[str]:
    """Return the column names the reader adds to a table of *spec*."""
    out = {"_row"}
    for c in spec.columns:
        if c.kind == "hl":
            out.add("nr_" + c.name[3:])
        if c.kind == "date_or_year":
            out.add(c.name.replace("_date", "_year"))
    return out


def _label(header: Any) -> str:
    """Return the column name a header cell gives."""
    return str(header).replace("\ufeff", "").strip().lower()


def _named(grid: _Grid, spec: FileSpec, findings: Findings) -> tuple[pd.DataFrame, list[str], set[str]]:
    """Name the cells by their (normalised) header; return (frame, unknown columns, missing)."""
    path = grid.path if isinstance(grid.path, str) else str(grid.path[0])
    declared = {c.name for c in spec.columns}
    generated = _generated(spec)
    names: dict[int, str] = {}
    seen: dict[str, int] = {}
    unknown: list[str] = []
    for i, label in enumerate(grid.header):
        name = str(label).replace("\ufeff", "").strip().lower()
        if not name:
            if i not in grid.cells.columns or not grid.cells[i].str.strip().ne("").any():
                continue
            name = f"column_{i + 1}"
        if name in seen:
            findings.error(path, 1, name, f"column '{name}' appears more than once (columns {seen[name] + 1} "
                           f"and {i + 1}); the later one is ignored", key="duplicate column")
            continue
        if name in generated:
            findings.warning(path, 1, name, f"column '{name}' is made by the reader; the file's column is "
                             "ignored", key="generated column")
            continue
        seen[name] = i
        names[i] = name
        if name not in declared:
            unknown.append(name)
    n = len(grid.cells)
    frame = pd.DataFrame({name: grid.cells[i] if i in grid.cells.columns else
                          pd.Series([""] * n, dtype=str) for i, name in names.items()},
                         index=pd.RangeIndex(n), copy=False)
    if unknown:
        findings.warning(path, 1, None, f"unknown column{'s' if len(unknown) > 1 else ''} "
                         f"{', '.join(repr(u) for u in unknown)} kept but not used (known: "
                         f"{', '.join(c.name for c in spec.columns)})", key="unknown columns")
    missing = {c.name for c in spec.columns if c.required and c.name not in seen}
    for name in [c.name for c in spec.columns if c.name in missing]:
        findings.error(path, 1, name, f"required column '{name}' is missing", key="missing column")
    return frame, unknown, missing


def _as_text(s: pd.Series, strip: bool = True) -> pd.Series:
    """Return the cells as str, stripped of surrounding spaces when some may have them."""
    s = s.astype(str)
    return s.str.strip() if strip else s


def _as_category(s: pd.Series, strip: bool = True) -> pd.Series:
    """Return the cells as categorical text (stripped as _as_text): one object per distinct cell.

    The kept, unused columns of a file (those no declaration names) take this form, so a
    file of many such columns holds a small code per cell, not a text object.
    """
    if not isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(str).astype("category")
    words = pd.Index(s.cat.categories.astype(str), dtype=object)
    if strip:
        words = words.str.strip()
    codes, uniques = pd.factorize(np.asarray(words, dtype=object))
    cells = s.cat.codes.to_numpy()
    new = codes[cells].astype(cells.dtype) if len(codes) else cells
    # categories in text order, as the reader gives them for any file
    order = np.argsort(np.asarray(uniques, dtype=object), kind="stable")
    rank = np.empty(len(order), dtype=cells.dtype)
    rank[order] = np.arange(len(order), dtype=cells.dtype)
    new = rank[new] if len(order) else new
    cat = pd.Categorical.from_codes(new, categories=pd.Index(np.asarray(uniques, dtype=object)[order], dtype=object))
    return pd.Series(cat, index=s.index)


def _to_float(s: pd.Series, blank: np.ndarray) -> np.ndarray:
    """Convert stripped text to float64 (NaN where blank or not a number).

    Each distinct text is converted once: levels, hours and counts repeat a few hundred
    values over many rows. *blank* must depend on the text only (as it does: '' or NR).
    """
    arr = s.to_numpy(dtype=object)
    if len(arr) > 64:
        codes, uniques = pd.factorize(arr)
        if len(uniques) * 4 <= len(arr) and (codes >= 0).all():
            u_blank = np.zeros(len(uniques), dtype=bool)
            u_blank[codes[np.asarray(blank, dtype=bool)]] = True
            return _to_float_each(np.asarray(uniques, dtype=object), u_blank)[codes]
    return _to_float_each(arr, blank)


def _to_float_each(values: np.ndarray, blank: np.ndarray) -> np.ndarray:
    """Convert every text of *values* to float64 (NaN where blank or not a number)."""
    arr = values.copy()
    arr[blank] = "nan"
    try:
        return arr.astype("float64")
    except (ValueError, TypeError, OverflowError):
        arr[blank] = ""
        out = pd.to_numeric(pd.Series(arr, dtype=object), errors="coerce").to_numpy(dtype="float64")
        # a text pandas did not take (not a number, or out of range for pandas 2): Python's float decides,
        # as it does for the texts converted above (an out-of-range exponent is then inf in every pandas)
        for i in np.flatnonzero(np.isnan(out) & ~np.asarray(blank, dtype=bool)).tolist():
            try:
                out[i] = float(arr[i])
            except (ValueError, TypeError, OverflowError):
                pass
        return out


def _to_date(s: pd.Series) -> pd.Series:
    """Parse ISO calendar dates; anything else becomes NaT."""
    return pd.to_datetime(s, format="%Y-%m-%d", errors="coerce")


def _in_year_range(values: pd.Series) -> np.ndarray:
    """Return True where a parsed date lies in the accepted years."""
    years = values.dt.year
    return ((years >= YEAR_MIN) & (years <= YEAR_MAX)).fillna(False).to_numpy(dtype=bool)


def _as_ns(values: pd.Series, ok: np.ndarray) -> pd.Series:
    """Return datetime64[ns] values, NaT where not *ok*."""
    return values.where(pd.Series(ok, index=values.index)).astype("datetime64[ns]")


def choice_dtype(c: Column) -> pd.CategoricalDtype:
    """Return the dtype of choice column *c* as loaded (the same whatever the file holds)."""
    return pd.CategoricalDtype(pd.Index(list(c.categories), dtype=object))


def choice_column(c: Column, values: Any, index: pd.Index | None = None) -> pd.Series:
    """Return *values* (each one of *c*'s categories) as a choice column of the loaded dtype."""
    return pd.Series(pd.Categorical(np.asarray(values, dtype=object), dtype=choice_dtype(c)), index=index)


class _Converter:
    """Convert the text cells of one table to the declared kinds, recording problems."""

    def __init__(self, spec: FileSpec, sink: _Sink, today: dt.date,
                 hints: tuple[bool, bool] = (True, True), nr: dict[str, np.ndarray] | None = None) -> None:
        self.spec = spec
        self.sink = sink
        self.today = pd.Timestamp(today)
        self.strip, self.formulas = hints
        #: NR cells of hearing-level columns the parser read as numbers, by column name
        self.nr = nr or {}

    def column(self, c: Column, raw: pd.Series | None) -> dict[str, pd.Series]:
        """Return the converted column(s) for declared column *c* (None: column absent)."""
        n = len(self.sink.rows)
        present = raw is not None
        if raw is not None and raw.dtype.kind == "f":
            return self._read_numbers(c, raw.to_numpy(dtype="float64"))
        if raw is not None and raw.dtype.kind == "M":
            return {c.name: self._read_dates(c, raw)}
        s = _as_text(raw, self.strip) if present else pd.Series([""] * n, dtype=str)
        if present and c.kind in ("id", "text", "choice") and c.default is not None:
            s = s.where(s.to_numpy(dtype=object) != "", str(c.default))
        bl = s.to_numpy(dtype=object) == ""
        if present and c.required:
            self.sink.add(bl, c.name, ERROR, "required value is blank", key=f"{c.name}: blank")
        kind = c.kind
        if kind in _TEXT_KINDS:
            if present:
                self._formula(c.name, s)
            return {c.name: s}
        if kind == "choice":
            return {c.name: self._choice(c, s, bl)}
        if kind in ("date", "date_or_year"):
            return self._date(c, s, bl)
        if kind == "datetime":
            return {c.name: self._datetime(c, s, bl)}
        if kind in _NUMERIC_KINDS:
            return {c.name: self._number(c, s, bl)}
        if kind == "hl":
            return self._hl(c, s, bl)
        raise ValueError(f"column {c.name}: unknown kind {kind!r} in spec")

    def _read_numbers(self, c: Column, values: np.ndarray) -> dict[str, pd.Series]:
        """Return a column the parser read as numbers: every number is clean, NaN is a blank (or NR) cell."""
        nr = self.nr.get(c.name) if c.kind == "hl" else None
        bl = np.isnan(values) if nr is None else np.isnan(values) & ~nr
        if c.required:
            self.sink.add(bl, c.name, ERROR, "required value is blank", key=f"{c.name}: blank")
        index = pd.RangeIndex(len(values))
        if c.kind == "hl":
            return {c.name: pd.Series(values, index=index, dtype="float64"),
                    "nr_" + c.name[3:]: pd.Series(np.zeros(len(values), dtype=bool) if nr is None else nr,
                                                  index=index, dtype=bool)}
        if c.default is not None and isinstance(c.default, (int, float)):
            values = np.where(bl, float(c.default), values)
        return {c.name: pd.Series(values, index=index, dtype="float64")}

    def _read_dates(self, c: Column, values: pd.Series) -> pd.Series:
        """Return a date (or date-time) column the parser read from ISO cells: YYYY-MM-DD (or
        YYYY-MM-DDTHH:MM:SS), years in range, NaT for a blank cell."""
        if c.required:
            self.sink.add(values.isna().to_numpy(), c.name, ERROR, "required value is blank", key=f"{c.name}: blank")
        if c.past_only:
            limit = self.today + pd.Timedelta(days=1) if c.kind == "datetime" else self.today
            future = (values > limit).to_numpy(dtype=bool)
            if future.any():  # each cell was written as the ISO form of its value
                self._past(c, values, values.dt.strftime("%Y-%m-%dT%H:%M:%S" if c.kind == "datetime" else "%Y-%m-%d"),
                           limit)
        return values

    def _formula(self, name: str, s: pd.Series) -> None:
        """Warn about text cells that a spreadsheet would run as a formula."""
        if not self.formulas:
            return
        hit = s.str.match(_FORMULA).fillna(False).to_numpy(dtype=bool)
        self.sink.add(hit, name, WARNING, _each("'{v}' looks like a spreadsheet formula; kept as text", v=s),
                      key=f"{name}: formula")

    def _choice(self, c: Column, s: pd.Series, bl: np.ndarray) -> pd.Series:
        """Normalise choices case-insensitively to their declared spelling, as a categorical.

        The text is factorised once; each distinct cell is matched to its declared spelling and
        the column is made from the codes (categories: ``c.categories``), so no Python
        runs per row. A cell that is not a choice is reported and becomes ``""``.
        """
        canon = {ch.lower(): ch for ch in c.choices}
        cats = c.categories
        at = {w: i for i, w in enumerate(cats)}
        codes, uniques = pd.factorize(s)
        known = [canon.get(str(u).lower()) for u in uniques]
        u_code = np.asarray([-1 if w is None else at[w] for w in known] + [-1], dtype=np.int8)
        cell = u_code[codes]
        ok = (cell >= 0) | bl
        self.sink.add(~ok, c.name, ERROR,
                      _each("'{v}' is not one of: " + ", ".join(ch for ch in c.choices if ch), v=s),
                      key=f"{c.name}: choice")
        cell[~ok | bl] = at[""]
        return pd.Series(pd.Categorical.from_codes(cell, dtype=choice_dtype(c)), index=s.index)

    def _past(self, c: Column, values: pd.Series, s: pd.Series, limit: pd.Timestamp) -> None:
        """Report dates after the build date."""
        if not c.past_only:
            return
        future = (values > limit).fillna(False).to_numpy(dtype=bool)
        self.sink.add(future, c.name, ERROR,
                      _each("date {v} is in the future (after " + self.today.date().isoformat() + ")", v=s),
                      key=f"{c.name}: future")

    def _date(self, c: Column, s: pd.Series, bl: np.ndarray) -> dict[str, pd.Series]:
        """Convert a date (or date-or-year) column."""
        out: dict[str, pd.Series] = {}
        if c.kind == "date_or_year":
            year_only = s.str.match(_YEAR_ONLY).fillna(False)
            s_date = s.where(~year_only, s + "-07-01")
        else:
            year_only = None
            s_date = s
        values = _to_date(s_date)
        parsed = values.notna().to_numpy()
        in_range = _in_year_range(values)
        bad_format = ~bl & ~parsed
        wanted = "a date (YYYY-MM-DD) or a year" if c.kind == "date_or_year" else "a date (YYYY-MM-DD)"
        self.sink.add(bad_format, c.name, ERROR, _each("'{v}' is not " + wanted, v=s),
                      key=f"{c.name}: not a date")
        self.sink.add(parsed & ~in_range, c.name, ERROR,
                      _each(f"'{{v}}' is outside the years {YEAR_MIN} to {YEAR_MAX}", v=s),
                      key=f"{c.name}: year range")
        values = _as_ns(values, in_range)
        self._past(c, values, s, self.today)
        out[c.name] = values
        if c.kind == "date_or_year":
            out[c.name.replace("_date", "_year")] = values.dt.year.astype("float64")
        return out

    def _datetime(self, c: Column, s: pd.Series, bl: np.ndarray) -> pd.Series:
        """Convert an ISO 8601 date-time column (offsets dropped with a warning)."""
        try:
            values = pd.to_datetime(s, format="ISO8601", errors="coerce")
            aware = getattr(values.dt, "tz", None) is not None
        except (ValueError, TypeError):
            aware = True
        if aware:
            tz = s.str.contains(_TZ_SUFFIX, regex=True).fillna(False)
            self.sink.add(tz.to_numpy(dtype=bool), c.name, WARNING,
                          "time-zone offset ignored; the clock time is kept as written",
                          key=f"{c.name}: time zone")
            s = s.where(~tz, s.str.replace(r"\s*(?:Z|[+-]\d{2}:?\d{2})$", "", regex=True))
            try:
                values = pd.to_datetime(s, format="ISO8601", errors="coerce")
                if getattr(values.dt, "tz", None) is not None:
                    values = values.dt.tz_localize(None)
            except (ValueError, TypeError):
                values = pd.Series(pd.NaT, index=s.index, dtype="datetime64[ns]")
        parsed = values.notna().to_numpy()
        self.sink.add(~bl & ~parsed, c.name, ERROR,
                      _each("'{v}' is not a date-time (ISO 8601, e.g. 2025-03-04T08:00:00)", v=s),
                      key=f"{c.name}: not a date-time")
        in_range = _in_year_range(values)
        self.sink.add(parsed & ~in_range, c.name, ERROR,
                      _each(f"'{{v}}' is outside the years {YEAR_MIN} to {YEAR_MAX}", v=s),
                      key=f"{c.name}: year range")
        values = _as_ns(values, in_range)
        self._past(c, values, s, self.today + pd.Timedelta(days=1))
        return values

    def _number(self, c: Column, s: pd.Series, bl: np.ndarray) -> pd.Series:
        """Convert a numeric column, rejecting text, non-finite and out-of-range values."""
        values = _to_float(s, bl)
        finite = np.isfinite(values)
        bad = ~bl & ~finite
        if bad.any():
            # 'inf', '1e999' and 'nan' are numbers to the parser but not measurements
            nan_text = s.isin(["nan", "NaN", "NAN", "Nan", "-nan", "+nan", "-NaN", "+NaN"]).to_numpy()
            special = ~np.isnan(values) | nan_text
            self.sink.add(bad & ~special, c.name, ERROR, _each("'{v}' is not a number", v=s),
                          key=f"{c.name}: not a number")
            self.sink.add(bad & special, c.name, ERROR, _each("'{v}' is not a finite number", v=s),
                          key=f"{c.name}: not finite")
        values = np.where(finite, values, np.nan)
        if c.kind == "int":
            frac = finite & (np.mod(np.where(finite, values, 0.0), 1.0) != 0)
            self.sink.add(frac, c.name, ERROR, _each("'{v}' is not a whole number", v=s),
                          key=f"{c.name}: not whole")
            values = np.where(frac, np.nan, values)
        values = self._bounded(c, values, s)
        if c.default is not None and isinstance(c.default, (int, float)):
            values = np.where(bl, float(c.default), values)
        return pd.Series(values, index=s.index, dtype="float64")

    def _bounded(self, c: Column, values: np.ndarray, s: pd.Series) -> np.ndarray:
        """Report values outside the declared range and blank them."""
        finite = np.isfinite(values)
        out = np.zeros(values.shape, dtype=bool)
        if c.lo is not None:
            out |= finite & ((values <= c.lo) if c.lo_open else (values < c.lo))
        if c.hi is not None:
            out |= finite & (values > c.hi)
        self.sink.add(out, c.name, ERROR, _each("{v} is outside the allowed range (" + _range_text(c) + ")", v=s),
                      key=f"{c.name}: range")
        return np.where(out, np.nan, values)

    def _hl(self, c: Column, s: pd.Series, bl: np.ndarray) -> dict[str, pd.Series]:
        """Convert a hearing-level column and its NR companion."""
        nr = s.isin(["NR", "nr", "Nr", "nR"]).to_numpy()
        values = _to_float(s, bl | nr)
        finite = np.isfinite(values)
        self.sink.add(~bl & ~nr & ~finite, c.name, ERROR,
                      _each("'{v}' is not a hearing level (a number of dB HL, or NR for no response)", v=s),
                      key=f"{c.name}: not a level")
        values = self._bounded(c, np.where(finite, values, np.nan), s)
        return {c.name: pd.Series(values, index=s.index, dtype="float64"),
                "nr_" + c.name[3:]: pd.Series(nr, index=s.index, dtype=bool)}


def _typed(spec: FileSpec, frame: pd.DataFrame, unknown: list[str], rows: np.ndarray, sink: _Sink,
           today: dt.date, hints: tuple[bool, bool] = (True, True),
           nr: dict[str, np.ndarray] | None = None) -> pd.DataFrame:
    """Return the table with every declared column converted, unknown ones kept as text.

    *nr* holds the NR cells of hearing-level columns that arrive as numbers, by column name.
    """
    conv = _Converter(spec, sink, today, hints, nr)
    out: dict[str, pd.Series] = {}
    for c in spec.columns:
        out.update(conv.column(c, frame[c.name] if c.name in frame.columns else None))
    for name in unknown:
        s = _as_category(frame[name], conv.strip)
        conv._formula(name, s)
        out[name] = s
    result = pd.DataFrame(out, index=pd.RangeIndex(len(rows)), copy=False)  # (no copy into blocks by dtype)
    result["_row"] = np.asarray(rows, dtype=np.int64)
    return result


def empty_table(spec: FileSpec) -> pd.DataFrame:
    """Return an empty DataFrame with the declared (and generated) columns of *spec*."""
    key = (spec.name, spec.columns)
    if key not in _EMPTY:
        _EMPTY[key] = _make_empty(spec)
    return _EMPTY[key].copy()


_EMPTY: dict[tuple, pd.DataFrame] = {}


def _make_empty(spec: FileSpec) -> pd.DataFrame:
    """Build the empty table of *spec* (cached by empty_table)."""
    cols: dict[str, pd.Series] = {}
    for c in spec.columns:
        if c.kind == "choice":
            cols[c.name] = choice_column(c, [])
        elif c.kind in ("id", "text"):
            cols[c.name] = pd.Series([], dtype=str)
        elif c.kind in ("date", "datetime", "date_or_year"):
            cols[c.name] = pd.Series([], dtype="datetime64[ns]")
            if c.kind == "date_or_year":
                cols[c.name.replace("_date", "_year")] = pd.Series([], dtype="float64")
        elif c.kind == "hl":
            cols[c.name] = pd.Series([], dtype="float64")
            cols["nr_" + c.name[3:]] = pd.Series([], dtype=bool)
        else:
            cols[c.name] = pd.Series([], dtype="float64")
    cols["_row"] = pd.Series([], dtype=np.int64)
    return pd.DataFrame(cols)


# ---------------------------------------------------------------------------------------
# whole-table checks


class _Codes:
    """Integer codes of the cells of table columns, each column factorised once per load.

    ``codes(table, column)`` returns (code of each row, distinct values) with a missing
    value kept as a value of its own, so that key and reference checks compare integers.
    """

    def __init__(self, tables: dict[str, pd.DataFrame], persons: PersonIndex | None = None) -> None:
        self.tables = tables
        self.persons = persons
        self._done: dict[tuple[str, str], tuple[np.ndarray, pd.Series]] = {}

    def codes(self, table: str, column: str) -> tuple[np.ndarray, pd.Series]:
        """Return (codes, distinct values as a Series of the column's dtype) of tables[table][column].

        Person ids take their codes from *persons* (every table's ids coded together), whose
        distinct values then hold the ids of every table."""
        got = self._done.get((table, column))
        if got is None:
            s = self.tables[table][column]
            persons = self.persons if column == "person_id" else None
            shared = persons.codes.get(table) if persons is not None else None
            if persons is not None and shared is not None and len(shared) == len(s) and not (shared < 0).any():
                got = shared, pd.Series(persons.ids, dtype=s.dtype)
            else:
                codes, uniques = pd.factorize(s, use_na_sentinel=False)
                got = np.asarray(codes, dtype=np.int64), pd.Series(uniques, dtype=s.dtype)
            self._done[(table, column)] = got
        return got

    def forget(self, table: str, column: str) -> None:
        """Drop the codes of a column whose cells changed."""
        self._done.pop((table, column), None)


def _share_ids(tables: dict[str, pd.DataFrame], persons: PersonIndex) -> None:
    """Make every table's person_id cells the one text object of their id (values unchanged).

    Equal ids are then one object, so the later stages' lookups on ids compare them by
    identity and find their hashes cached. (Text stored by pyarrow is left as it is.)"""
    for name, c in persons.codes.items():
        s = tables[name]["person_id"]
        if (s.dtype != object and getattr(s.dtype, "storage", None) != "python") or (c < 0).any():
            continue
        tables[name]["person_id"] = pd.Series(persons.ids.take(c), index=s.index, dtype=s.dtype)


def _filled(values: pd.Series) -> np.ndarray:
    """Return which of *values* (the distinct cells of a key column) are filled in."""
    if values.dtype == "datetime64[ns]" or values.dtype == "float64":
        return values.notna().to_numpy(dtype=bool)
    return values.ne("").to_numpy(dtype=bool)


def _check_key(df: pd.DataFrame, spec: FileSpec, sink: _Sink, codes: _Codes | None = None) -> None:
    """Report rows repeating the key of an earlier row, naming that row's line."""
    key = [k for k in spec.key if k in df.columns]
    if not key or len(key) != len(spec.key) or df.empty:
        return
    codes = codes or _Codes({spec.name: df})
    filled = np.ones(len(df), dtype=bool)
    combined = np.zeros(len(df), dtype=np.int64)
    size = 1
    for k in key:
        c, values = codes.codes(spec.name, k)
        filled &= _filled(values)[c]
        size *= max(len(values), 1)
        if size >= 2 ** 62:  # (more distinct keys than one integer holds: number the keys themselves)
            combined = pd.factorize(pd.MultiIndex.from_arrays([combined, c]))[0].astype(np.int64)
            size = int(combined.max()) + 1
        else:
            combined = combined * len(values) + c
    at = np.flatnonzero(filled)
    if not at.size:
        return
    order = np.argsort(combined[at], kind="stable")  # rows of one key together, in file order
    sorted_keys = combined[at][order]
    repeat = np.concatenate(([False], sorted_keys[1:] == sorted_keys[:-1]))
    if not repeat.any():
        return
    run = np.cumsum(~repeat) - 1  # the run (key) of each sorted row
    rows = df["_row"].to_numpy(dtype=np.int64)[at]
    first_row = rows[order][~repeat][run]  # line of the first row of each row's key
    mask = np.zeros(len(df), dtype=bool)
    mask[at[order[repeat]]] = True
    firsts = np.zeros(len(df), dtype=np.int64)
    firsts[at[order]] = first_row

    def build(idx: np.ndarray) -> list[str]:
        parts = []
        for k in key:
            v = df[k].iloc[idx]
            txt = v.dt.strftime("%Y-%m-%d") if v.dtype == "datetime64[ns]" else v.astype(str)
            parts.append([f"{k} {_short(t)}" for t in txt.tolist()])
        return [f"duplicate {', '.join(p)} (first on line {n})" for p, n in zip(zip(*parts), firsts[idx].tolist())]

    sink.add(mask, "+".join(key), ERROR, build, key="duplicate key")


def _check_refs(df: pd.DataFrame, spec: FileSpec, sink: _Sink, tables: dict[str, pd.DataFrame],
                present: dict[str, str], derived_groups: bool, codes: _Codes | None = None) -> None:
    """Report identifiers that the referenced file does not hold (each distinct identifier looked up once)."""
    codes = codes or _Codes({**tables, spec.name: df})
    for c in spec.columns:
        if c.ref is None or c.name not in df.columns:
            continue
        target, tcol = c.ref
        if target not in tables or (target not in present and not (target == "groups" and derived_groups)):
            continue  # the referenced file is absent: nothing to check against
        known = tables[target][tcol]
        at, values = codes.codes(spec.name, c.name)
        unknown = (values.ne("") & ~values.isin(known)).to_numpy(dtype=bool)[at]
        if not unknown.any():
            continue
        where = (f"(not in {present[target]})" if target in present else
                 "(no person in data/people.csv is in this group, and data/groups.csv is absent)")
        sink.add(unknown, c.name, ERROR, _each(f"unknown {tcol} '{{v}}' {where}", v=df[c.name]),
                 key=f"{c.name}: unknown reference")


def _per_person(keys: pd.Series, people: pd.DataFrame, column: str) -> pd.Series:
    """Return people[column] for every person id in *keys* (NaN/NaT where the id is unknown)."""
    p = people.loc[people["person_id"].ne(""), ["person_id", column]].drop_duplicates("person_id")
    lookup = pd.Series(p[column].to_numpy(), index=pd.Index(p["person_id"].to_numpy(dtype=object), dtype=object),
                       dtype=people[column].dtype)
    return pd.Series(lookup.reindex(keys.to_numpy(dtype=object)).to_numpy(), index=keys.index)


def _per_person_dates(keys: pd.Series, people: pd.DataFrame, columns: list[str]) -> list[pd.Series]:
    """Return the date columns people[c] for every person id in *keys* (NaT where the id is unknown),
    as _per_person does for each, with the ids looked up once."""
    p = people.loc[people["person_id"].ne(""), ["person_id", *columns]].drop_duplicates("person_id")
    at = pd.Index(p["person_id"].to_numpy(dtype=object), dtype=object).get_indexer(keys.to_numpy(dtype=object))
    unknown = at < 0
    out = []
    for c in columns:
        values = p[c].to_numpy(dtype="datetime64[ns]")[np.maximum(at, 0)] if len(p) else \
            np.full(len(at), np.datetime64("NaT"), dtype="datetime64[ns]")
        values[unknown] = np.datetime64("NaT")
        out.append(pd.Series(values, index=keys.index))
    return out


def _cross_checks(tables: dict[str, pd.DataFrame], present: dict[str, str], findings: Findings,
                  codes: _Codes | None = None) -> None:
    """Warn about records that contradict each other (and fill noise groups from people).

    With *codes*, each distinct person id of the audiograms is looked up once."""
    people = tables["people"]
    if "people" in present and not people.empty:
        p_sink = _Sink(findings, present["people"], people["_row"].to_numpy())
        age = (people["hire_date"] - people["birth_date"]).dt.days / 365.25
        odd = ((age < HIRE_AGE_MIN) | (age > HIRE_AGE_MAX)).fillna(False).to_numpy(dtype=bool)
        p_sink.add(odd, "birth_date", WARNING,
                   _each("age at hire would be {v} years (outside " f"{HIRE_AGE_MIN:g} to {HIRE_AGE_MAX:g}); "
                         "check birth_date and hire_date", v=age.round(1)),
                   key="birth_date: age at hire")
        back = (people["leave_date"] < people["hire_date"]).fillna(False).to_numpy(dtype=bool)
        p_sink.add(back, "leave_date", WARNING, "leave_date is before hire_date", key="leave_date: before hire")
    noise = tables["noise"]
    if "noise" in present and not noise.empty:
        n_sink = _Sink(findings, present["noise"], noise["_row"].to_numpy())
        lonely = (noise["kind"].eq("personal") & noise["person_id"].eq("")).to_numpy(dtype=bool)
        n_sink.add(lonely, "person_id", WARNING, "personal measurement without person_id",
                   key="person_id: personal without person")
        blank_group = noise["group"].eq("")
        if blank_group.any():
            looked = _per_person(noise["person_id"], people, "group")
            filled = pd.Series(np.where(looked.isna().to_numpy(), "", looked.to_numpy(dtype=object)),
                               index=noise.index, dtype=str)
            noise["group"] = noise["group"].where(~blank_group, filled)
            if codes is not None:
                codes.forget("noise", "group")
    aud = tables["audiograms"]
    if "audiograms" in present and not aud.empty:
        a_sink = _Sink(findings, present["audiograms"], aud["_row"].to_numpy())
        at, ids = codes.codes("audiograms", "person_id") if codes is not None else \
            (np.arange(len(aud)), aud["person_id"])
        birth, leave = (pd.Series(v.to_numpy(dtype="datetime64[ns]")[at], index=aud.index)
                        for v in _per_person_dates(ids, people, ["birth_date", "leave_date"]))
        before = (aud["date"] < birth).fillna(False).to_numpy(dtype=bool)
        a_sink.add(before, "date", WARNING, "audiogram dated before the person's birth_date",
                   key="date: before birth")
        after = (aud["date"] > leave + pd.Timedelta(days=1)).fillna(False).to_numpy(dtype=bool)
        a_sink.add(after, "date", WARNING, "audiogram dated more than 1 day after the person's leave_date",
                   key="date: after leave")


def _derive_groups(people: pd.DataFrame, spec: FileSpec) -> pd.DataFrame:
    """Return a groups table made of the distinct groups of people.csv (defaults filled)."""
    names = sorted(set(people["group"].tolist()) - {""})
    out = empty_table(spec).iloc[:0]
    data: dict[str, Any] = {}
    for c in spec.columns:
        if c.name == "group":
            data[c.name] = pd.Series(names, dtype=str)
        elif c.kind == "choice":
            data[c.name] = choice_column(c, [""] * len(names))
        elif c.kind in ("id", "text"):
            data[c.name] = pd.Series([""] * len(names), dtype=str)
        else:
            default = float(c.default) if isinstance(c.default, (int, float)) else np.nan
            data[c.name] = pd.Series([default] * len(names), dtype="float64")
    data["_row"] = pd.Series([0] * len(names), dtype=np.int64)
    return pd.DataFrame(data, columns=out.columns)


# ---------------------------------------------------------------------------------------
# data files


def _source(root: Path, spec: FileSpec, findings: Findings) -> tuple[Path | None, str]:
    """Return the file to read for *spec* (csv or xlsx) and its kind, reporting both present."""
    csv_path = root / spec.path
    xlsx_path = csv_path.with_suffix(".xlsx")
    has_csv = os.path.lexists(csv_path)
    has_xlsx = os.path.lexists(xlsx_path)
    if has_csv and has_xlsx:
        findings.error(spec.path, None, None, f"both {spec.path} and {_rel(root, xlsx_path)} are present; "
                       "keep one (the CSV is read)", key="both csv and xlsx")
    if has_csv:
        return csv_path, "csv"
    if has_xlsx:
        return xlsx_path, "xlsx"
    return None, ""


def _read_table(spec: FileSpec, root: Path, inputs: _Inputs, findings: Findings,
                today: dt.date, dresser: Dresser | None = None) -> tuple[pd.DataFrame, str | None]:
    """Read one data file; return (typed table, relative path read or None).

    The *dresser* applies the file's ``files:`` settings (other path, encoding, delimiter,
    decimal mark, date pattern, column names, wide audiograms) around the standard reading.
    """
    dresser = dresser or Dresser(root, None, findings)
    path, kind, named = dresser.source(spec, _source)
    if path is None:
        if spec.required and not named:
            findings.error(spec.path, None, None, f"{spec.path} is missing; this file is required",
                           key="required file missing")
        return empty_table(spec), None
    rel = _rel(root, path)
    if path.is_dir():
        findings.error(rel, None, None, "is a folder, not a file")
        return empty_table(spec), None
    raw = inputs.get(path)
    if raw is None:
        return empty_table(spec), None
    raw = dresser.standard_bytes(spec, raw, rel, kind)
    sheet = dresser.sheet(spec, raw) if raw is not None and kind == "xlsx" else 0
    if raw is None or sheet is None:
        return empty_table(spec), rel
    plain = dresser.plain(spec, rel)
    grid = (_parse_xlsx(raw, rel, findings, spec, sheet) if kind == "xlsx"
            else _parse_csv(raw, rel, findings, spec if plain else None))
    if grid is None:
        return empty_table(spec), rel
    if not grid.header:
        _no_rows(spec, rel, findings, "no rows (the file is empty)")
        return empty_table(spec), rel
    grid, read = dresser.standard_grid(spec, grid, kind)
    frame, unknown, _missing = _named(grid, read, findings)
    if frame.empty:
        _no_rows(spec, rel, findings, "no rows (header only)")
    sink = _Sink(findings, rel, grid.rows)
    nr = {_label(grid.header[i]): mask for i, mask in grid.nr.items()}
    table = _typed(read, frame, unknown, grid.rows, sink, today, grid.hints, nr)
    return dresser.standard_table(spec, read, table, rel), rel


def _no_rows(spec: FileSpec, rel: str, findings: Findings, what: str) -> None:
    """Report a file without rows: an error when required, else a warning."""
    if spec.required:
        findings.error(rel, None, None, f"{what}; this file is required and needs at least one row",
                       key="no rows")
    else:
        findings.warning(rel, None, None, f"{what}; its pages are left out", key="no rows")


def _unknown_data_files(root: Path, findings: Findings, named: set[str] | frozenset[str] = frozenset()) -> None:
    """Warn about data/*.csv|xlsx files that no spec declares (they are not read).

    *named* holds the folder-relative paths that ``files:`` names (they are read).
    """
    data = root / DATA_DIR
    if not data.is_dir():
        return
    known = {Path(f.path).stem for f in FILES}
    for p in sorted(data.iterdir()):
        if p.suffix.lower() not in (".csv", ".xlsx") or (p.stem in known and p.suffix in (".csv", ".xlsx")):
            continue
        if _rel(root, p) in named:
            continue
        if p.stem.lower() in known:
            hint = f"file names are lower-case: rename it to {p.stem.lower()}{p.suffix.lower()}"
        else:
            hint = f"known: {', '.join(sorted(known))}"
        findings.warning(_rel(root, p), None, None, f"not a known data file; ignored ({hint})",
                         key="unknown data file")


# ---------------------------------------------------------------------------------------
# noise logs


def _load_logs(root: Path, inputs: _Inputs, findings: Findings, noise: pd.DataFrame,
               today: dt.date) -> tuple[NoiseLogs | dict[str, pd.DataFrame], dict[str, float]]:
    """Read data/noise_logs/ID.csv for every logged measurement (one batch parse where possible)."""
    folder = root / LOG_DIR
    if not folder.is_dir():
        return {}, {}
    if _inside(root, folder) is None:
        findings.error(LOG_DIR, None, None, "resolves outside the programme folder; not read")
        return {}, {}
    ids = set(noise["measurement_id"].tolist()) - {""}
    batch: dict[tuple[str, ...], list[tuple[int, str, bytes | memoryview]]] = {}
    frames: list[pd.DataFrame] = []
    names: list[str] = []
    paths: list[str] = []
    for entry in sorted(os.listdir(folder)):
        p = folder / entry
        rel = f"{LOG_DIR}/{entry}"
        stem, dot, suffix = entry.rpartition(".")
        if not dot or suffix.lower() != "csv" or os.path.isdir(p):
            findings.warning(rel, None, None, "not a .csv log file; ignored", key="log: not csv")
            continue
        if stem not in ids:
            findings.warning(rel, None, None, f"no measurement_id '{stem}' in data/noise.csv; log ignored",
                             key="log: unknown measurement")
            continue
        raw = inputs.get(p, rel, folder_inside=True)
        if raw is None:
            continue
        inputs.settle(rel, through=True)  # (logs are read in the order of their names)
        if raw.isascii() and len(raw) <= MAX_LINE_BYTES and b"\x00" not in raw:
            end = raw.find(b"\n")  # (what _decode accepts without a look at each line)
            head = raw if end < 0 else raw[:end]
            body: bytes | memoryview = memoryview(raw)[len(raw) if end < 0 else end + 1:]  # (not copied)
            cols = tuple(h.strip().lower() for h in head.decode("ascii").rstrip("\r").split(","))
            quoted = b'"' in raw
            empty = end < 0 or not raw[end + 1:].strip(_ASCII_SPACE)
        else:
            text = _decode(raw, rel, findings)
            if text is None:
                continue
            head_text, _, body_text = text.partition("\n")
            cols = tuple(h.strip().lower() for h in head_text.rstrip("\r").split(","))
            quoted, empty, body = '"' in text, not body_text.strip(), body_text.encode("utf-8")
        idx = len(names)
        names.append(stem)
        paths.append(rel)
        if not quoted and sorted(cols) == ["laeq", "start"] and not empty:
            batch.setdefault(cols, []).append((idx, rel, body if raw.endswith(b"\n") else bytes(body) + b"\n"))
            continue
        frames.append(_log_single(raw, rel, idx, findings, today))
    for cols, members in batch.items():
        frames.extend(_log_batch(cols, members, findings, today))
    batch.clear()  # (lets go of the files' bytes: the digest holds none of them)
    frames = [f for f in frames if f is not None and len(f)]
    if not frames:
        return {}, {}
    allf = pd.concat(frames, ignore_index=True)
    return _log_tidy(allf, names, np.asarray(paths, dtype=object), findings)


def _log_single(raw: bytes, rel: str, idx: int, findings: Findings, today: dt.date) -> pd.DataFrame | None:
    """Read one log file on the general path (quotes, odd headers, blank lines)."""
    grid = _parse_csv(raw, rel, findings)
    if grid is None:
        return None
    if not grid.header:
        findings.warning(rel, None, None, "the log is empty; ignored", key="log: empty")
        return None
    frame, unknown, missing = _named(grid, NOISE_LOG, findings)
    if missing:
        return None
    if frame.empty:
        findings.warning(rel, None, None, "no rows (header only); log ignored", key="log: empty")
        return None
    table = _typed(NOISE_LOG, frame, [], grid.rows, _Sink(findings, rel, grid.rows), today, grid.hints)
    table["_file"] = idx
    return table[["start", "laeq", "_row", "_file"]]


def _log_cells(raw: bytes, cols: tuple[str, ...], count: int) -> pd.DataFrame | None:
    """Read joined log bodies: the levels as numbers where each is clean, else every cell as text."""
    levels = {i: c for i, c in enumerate(cols) for d in NOISE_LOG.columns
              if d.name == c and (d.kind in _NUMERIC_KINDS or d.kind == "hl")}
    options: dict[str, Any] = dict(header=None, names=list(cols), engine="c", quoting=csv.QUOTE_NONE,
                                   encoding="utf-8", keep_default_na=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if levels:
            try:
                df = pd.read_csv(io.BytesIO(raw), dtype={c: ("float64" if i in levels else str)
                                                         for i, c in enumerate(cols)},
                                 na_values={c: [""] for c in levels.values()}, float_precision="round_trip",
                                 **options)
            except (ValueError, TypeError, OverflowError, pd.errors.ParserError):
                df = None
            if df is not None and len(df) == count:
                spec = {c.name: c for c in NOISE_LOG.columns}
                clean = [_clean_numbers(spec[c], df[c].to_numpy(dtype="float64"),
                                        lambda: b"nan" not in raw.lower() and b"inf" not in raw.lower())
                         for c in levels.values()]
                if all(clean):
                    return df
        try:
            return pd.read_csv(io.BytesIO(raw), dtype=str, na_filter=False, **options)
        except (ValueError, pd.errors.ParserError):
            return None


def _log_batch(cols: tuple[str, ...], members: list[tuple[int, str, bytes | memoryview]], findings: Findings,
               today: dt.date) -> list[pd.DataFrame | None]:
    """Parse many quote-free logs with the same header in one pass.

    Start times written YYYY-MM-DDTHH:MM:SS are parsed from the bytes and the levels by
    the C reader; logs with anything else in them are read as text, as one log would be.
    """
    raw = b"".join(b for _, _, b in members)
    arr = np.frombuffer(raw, dtype=np.uint8)
    nl = _byte_positions(arr, 10)
    sizes = np.fromiter((len(b) for _, _, b in members), dtype=np.int64, count=len(members))
    # lines of each log: every body ends with a line end, so the line ends up to each body's end
    counts = np.diff(np.searchsorted(nl, np.cumsum(sizes), side="left"), prepend=0)
    fields = _cells_per_line(arr, nl)
    starts = np.concatenate(([0], nl[:-1] + 1))
    length = nl - starts
    cr = (length > 0) & (arr[np.maximum(nl - 1, 0)] == 13)
    blank = (length - cr) == fields - 1  # empty, or separators only
    del starts, length, cr
    header = (",".join(cols) + "\n").encode("utf-8")
    if (fields != len(cols)).any() or blank.any() or nl.size != counts.sum():
        # something unusual: read these logs one by one to report exact lines (the joined bytes let go first)
        del arr, raw
        return [_log_single(header + m[2], m[1], m[0], findings, today) for m in members]
    hints = _hints_by_piece(arr, nl, raw, formula=False)[0], True  # (a log has no text column to look for formulas in)
    df = None if hints[0] else _log_typed(raw, cols, _Fields(arr, nl, len(cols), np.arange(nl.size),
                                                              [cols.index("start")]))
    del fields
    if df is None:
        df = _log_cells(raw, cols, nl.size)
    if df is None or len(df) != nl.size:
        return [_log_single(header + bytes(m[2]), m[1], m[0], findings, today) for m in members]
    file_idx = np.repeat(np.arange(len(members)), counts)
    first = np.concatenate(([0], np.cumsum(counts)[:-1]))
    rows = np.arange(nl.size) - np.repeat(first, counts) + 2
    paths = np.repeat(np.asarray([m[1] for m in members], dtype=object), counts)
    table = _typed(NOISE_LOG, df, [], rows, _Sink(findings, paths, rows), today, hints)
    table["_file"] = np.asarray([m[0] for m in members], dtype=np.int64)[file_idx]
    return [table[["start", "laeq", "_row", "_file"]]]


def _log_typed(raw: bytes, cols: tuple[str, ...], fields: _Fields) -> pd.DataFrame | None:
    """Return joined log bodies as (start: datetime64[ns], laeq: float64) when no cell needs a finding, else None."""
    start = _iso_cells(fields, cols.index("start"), with_time=True)
    if start is None or np.isnat(start).any():
        return None
    j = cols.index("laeq")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            level = pd.read_csv(io.BytesIO(raw), header=None, names=list(range(len(cols))), usecols=[j],
                                dtype={j: "float64"}, na_values={j: [""]}, keep_default_na=False, engine="c",
                                quoting=csv.QUOTE_NONE, encoding="utf-8", float_precision="round_trip")[j]
    except (ValueError, TypeError, OverflowError, pd.errors.ParserError):
        return None
    values = level.to_numpy(dtype="float64")
    if len(values) != len(start):
        return None
    nan = np.isnan(values)
    if nan.any() or not _clean_values(NOISE_LOG.column("laeq"), values):
        return None  # a blank or written NaN, a value out of range ...
    index = pd.RangeIndex(len(values))
    return pd.DataFrame({"start": pd.Series(start, index=index), "laeq": pd.Series(values, index=index)},
                        index=index, copy=False)


def _increasing(f: np.ndarray, r: np.ndarray) -> bool:
    """True when the pairs (f, r) increase from each row to the next."""
    return bool(((f[1:] > f[:-1]) | ((f[1:] == f[:-1]) & (r[1:] > r[:-1]))).all())


def _log_tidy(allf: pd.DataFrame, names: list[str], paths: np.ndarray,
              findings: Findings) -> tuple[NoiseLogs | dict[str, pd.DataFrame], dict[str, float]]:
    """Check order and interval of every log, sort by start and split per measurement."""
    if not _increasing(allf["_file"].to_numpy(), allf["_row"].to_numpy()):
        allf = allf.sort_values(["_file", "_row"], kind="stable").reset_index(drop=True)
    f = allf["_file"].to_numpy()
    start = allf["start"]
    t = start.to_numpy(dtype="datetime64[ns]").astype(np.int64).astype("float64")
    t[start.isna().to_numpy()] = np.nan
    same = np.concatenate(([False], f[1:] == f[:-1]))
    prev = np.concatenate(([np.nan], t[:-1]))
    back = same & np.isfinite(t) & np.isfinite(prev) & (t <= prev)
    if back.any():
        _Sink(findings, paths[f], allf["_row"].to_numpy()).add(
            back, "start", ERROR, "start is not later than the row before (timestamps must increase)",
            key="start: not increasing")
    del t, prev, same  # (one number per row each: let go before the next copies)
    if back.any() or start.isna().any():
        allf = allf.loc[start.notna()].sort_values(["_file", "start", "_row"], kind="stable").reset_index(drop=True)
    # (else every log's start times increase: the rows are in that order already)
    if allf.empty:
        return {}, {}
    f = allf["_file"].to_numpy()
    t = allf["start"].to_numpy(dtype="datetime64[ns]").astype(np.int64) / 1e9
    same = np.concatenate(([False], f[1:] == f[:-1]))
    diff = np.where(same, t - np.concatenate(([np.nan], t[:-1])), np.nan)
    dser = pd.Series(diff)
    med = dser.groupby(f).median()
    med_row = med.to_numpy(dtype="float64")[np.searchsorted(med.index.to_numpy(), f)]  # (every f is in med's sorted index)
    off = same & np.isfinite(diff) & np.isfinite(med_row) & (np.abs(diff - med_row) > LOG_INTERVAL_TOLERANCE_S) \
        & (diff > 0)
    at = np.flatnonzero(off)  # (the few rows flagged: a message is made for each of them only)
    _Sink(findings, paths[f[at]], allf["_row"].to_numpy()[at]).add(
        np.ones(at.size, dtype=bool), "start", WARNING,
        _each("interval of {d:g} s differs from the log's usual {m:g} s", d=np.round(diff[at], 1),
              m=np.round(med_row[at], 1)),
        key="start: irregular interval")
    del t, diff, dser, med_row, off, same
    runs: dict[str, tuple[int, int]] = {}
    intervals: dict[str, float] = {}
    bounds = np.flatnonzero(np.concatenate(([True], f[1:] != f[:-1], [True])))
    allf = allf[["start", "laeq", "_row"]]
    med_of = dict(zip(med.index.tolist(), med.to_numpy().tolist()))
    for a, b in zip(bounds[:-1].tolist(), bounds[1:].tolist()):
        k = int(f[a])
        runs[names[k]] = (a, b)  # (each log a run of rows of the one frame)
        m = med_of.get(k, np.nan)
        if np.isfinite(m) and m > 0:
            intervals[names[k]] = float(m)
        else:
            findings.warning(str(paths[k]), None, "start", "fewer than two increasing timestamps: the "
                             "interval is unknown", key="log: no interval")
    ids = sorted(runs)
    logs = NoiseLogs(allf, ids, np.asarray([runs[m][0] for m in ids], dtype=np.int64),
                     np.asarray([runs[m][1] for m in ids], dtype=np.int64))
    return logs, dict(sorted(intervals.items()))


# ---------------------------------------------------------------------------------------
# narrative pages and templates


def page_slug(stem: str) -> str:
    """Return the page slug for a markdown file name (lower-case, [a-z0-9-], not a site page)."""
    slug = _SLUG_BAD.sub("-", stem.lower()).strip("-")
    slug = re.sub(r"-{2,}", "-", slug) or "page"
    return f"page-{slug}" if slug in RESERVED_SLUGS else slug


def _front_matter(text: str, rel: str, findings: Findings) -> tuple[dict[str, Any], str]:
    """Split '---' front matter from markdown; return (metadata, markdown)."""
    lines = text.splitlines(keepends=True)
    if not lines or lines[0].strip() != "---":
        return {}, text
    end = next((i for i in range(1, len(lines)) if lines[i].strip() in ("---", "...")), None)
    if end is None:
        findings.error(rel, 1, None, "front matter starts with '---' but has no closing '---' line")
        return {}, text
    block = "".join(lines[1:end])
    body = "".join(lines[end + 1:])
    try:
        _node, meta = load_yaml(block)
    except YamlError as exc:
        for p in exc.problems:
            findings.error(rel, 1 if p.line is None else p.line + 1, None if p.column is None else str(p.column),
                           f"front matter {p.message}")
        return {}, body
    if meta is None:
        return {}, body
    if not isinstance(meta, dict):
        findings.error(rel, 2, None, "front matter must be a mapping such as 'title: About the programme'")
        return {}, body
    return meta, body


def _load_pages(root: Path, inputs: _Inputs, findings: Findings) -> list[NarrativePage]:
    """Read pages/*.md with their front matter, sorted by (order, slug)."""
    folder = root / PAGES_DIR
    if not folder.is_dir():
        return []
    if _inside(root, folder) is None:
        findings.error(PAGES_DIR, None, None, "resolves outside the programme folder; not read")
        return []
    pages: list[NarrativePage] = []
    taken: dict[str, str] = {}
    for p in sorted(folder.glob("*.md")):
        rel = _rel(root, p)
        raw = inputs.get(p, limit=MAX_PAGE_BYTES)
        if raw is None:
            continue
        text = _decode(raw, rel, findings)
        if text is None:
            continue
        meta, body = _front_matter(text, rel, findings)
        unknown = sorted(set(map(str, meta)) - set(PAGE_KEYS))
        for k in unknown[:UNKNOWN_SHOWN]:
            findings.warning(rel, None, k, f"unknown front-matter key '{_short(k)}' is ignored (known: "
                             f"{', '.join(PAGE_KEYS)})", key="page: unknown key")
        if len(unknown) > UNKNOWN_SHOWN:
            findings.warning(rel, None, None, f"{len(unknown) - UNKNOWN_SHOWN:,} more unknown front-matter keys "
                             "are ignored (not listed)", key="page: unknown keys counted")
        title = meta.get("title")
        if title is None:
            heading = next((ln[2:].strip() for ln in body.splitlines() if ln.startswith("# ")), "")
            title = heading or p.stem.replace("-", " ").replace("_", " ").strip().capitalize() or "Page"
        elif not isinstance(title, (str, int, float)) or isinstance(title, bool):
            findings.error(rel, None, "title", "title must be text")
            title = p.stem
        order = meta.get("order", DEFAULT_PAGE_ORDER)
        if isinstance(order, bool) or not isinstance(order, int):
            findings.error(rel, None, "order", f"order must be a whole number, not '{_short(order)}'")
            order = DEFAULT_PAGE_ORDER
        slug = page_slug(p.stem)
        if slug in taken:
            findings.error(rel, None, None, f"page slug '{slug}' is also the slug of {taken[slug]}; "
                           "rename one of the files")
            continue
        taken[slug] = rel
        pages.append(NarrativePage(slug=slug, title=str(title), order=int(order), markdown=body, source=rel))
    return sorted(pages, key=lambda pg: (pg.order, pg.slug))


def _template_dir(root: Path, inputs: _Inputs, findings: Findings) -> Path | None:
    """Return the programme's templates/ folder, its files recorded for the digest."""
    folder = root / TEMPLATES_DIR
    if not folder.is_dir():
        return None
    real = _inside(root, folder)
    if real is None:
        findings.error(TEMPLATES_DIR, None, None, "resolves outside the programme folder; not used")
        return None
    ok = True
    for p in sorted(folder.rglob("*")):
        if p.is_dir() and not p.is_symlink():
            continue
        if _inside(root, p) is None:
            findings.error(_rel(root, p), None, None, "resolves outside the programme folder; not used")
            ok = False
            continue
        if not p.is_dir():  # a named pipe here would block the template loader: refused by get()
            raw = inputs.get(p, limit=MAX_PAGE_BYTES)
            if raw is None or (p.suffix.lower() in TEMPLATE_SUFFIXES
                               and _decode(raw, _rel(root, p), findings, max_line=None) is None):
                ok = False  # the reason is a finding; templates are read as UTF-8 text
    return real if ok else None


# ---------------------------------------------------------------------------------------
# the whole folder


def load_programme(root: Path, *, today: dt.date | None = None) -> Programme:
    """Read and validate a programme folder; every problem goes into ``programme.findings``."""
    t0 = time.perf_counter()
    root = Path(root).resolve()
    findings = Findings()
    inputs = _Inputs(root, findings)
    today = today or build_date()
    cfg_path = root / CONFIG_FILE
    if os.path.lexists(cfg_path) and _inside(root, cfg_path) is None:
        findings.error(CONFIG_FILE, None, None, "resolves outside the programme folder (symbolic link?); "
                       "not read")
        config = Config()
    else:
        if cfg_path.is_file() and cfg_path.stat().st_size <= MAX_CONFIG_BYTES:
            inputs.get(cfg_path)  # for the digest; load_config reports a file it cannot read
        config = load_config(root, findings)
    if not (root / DATA_DIR).is_dir():
        findings.error(DATA_DIR, None, None, "the data/ folder is missing (run 'hcpsite new DIR' for a starter)")
    elif _inside(root, root / DATA_DIR) is None:
        findings.error(DATA_DIR, None, None, "resolves outside the programme folder; not read")
    tables: dict[str, pd.DataFrame] = {}
    present: dict[str, str] = {}
    dresser = Dresser(root, config, findings)
    for spec in FILES:
        try:
            table, rel = _read_table(spec, root, inputs, findings, today, dresser)
        except Exception as exc:  # a last line of defence: report, never crash on a user's file
            log.exception("unexpected failure reading %s", spec.path)
            findings.error(spec.path, None, None, f"could not be read ({type(exc).__name__}: {exc})")
            table, rel = empty_table(spec), None
        tables[spec.name] = table
        if rel is not None:
            present[spec.name] = rel
    derived = "groups" not in present
    if derived:
        tables["groups"] = _derive_groups(tables["people"], GROUPS)
    persons = PersonIndex.of(tables)  # every table's person ids coded once, for the checks and the stages
    _share_ids(tables, persons)
    codes = _Codes(tables, persons)
    _cross_checks(tables, present, findings, codes)
    for spec in FILES:
        df = tables[spec.name]
        if spec.name not in present or df.empty:
            continue
        sink = _Sink(findings, present[spec.name], df["_row"].to_numpy())
        _check_key(df, spec, sink, codes)
        _check_refs(df, spec, sink, tables, present, derived, codes)
    _unknown_data_files(root, findings, dresser.paths())
    inputs.settle(LOG_DIR + "/")  # (the files still to read are logs, pages and templates)
    try:
        logs, intervals = _load_logs(root, inputs, findings, tables["noise"], today)
    except Exception as exc:
        log.exception("unexpected failure reading noise logs")
        findings.error(LOG_DIR, None, None, f"could not be read ({type(exc).__name__}: {exc})")
        logs, intervals = {}, {}
    inputs.settle(PAGES_DIR + "/")
    pages = _load_pages(root, inputs, findings)
    template_dir = _template_dir(root, inputs, findings)
    findings = dresser.finish(findings)
    prog = Programme(root=root, config=config, tables=tables, present=present, noise_logs=logs,
                     log_interval_s=intervals, pages=pages, findings=findings, digest=inputs.digest(),
                     template_dir=template_dir, person_index=persons)
    prog.extra["groups_derived"] = derived
    prog.extra["today"] = today
    log.info("loaded %s in %.2f s (%s)", root, time.perf_counter() - t0, findings.summary())
    return prog


__all__ = ["load_programme", "build_date", "empty_table", "page_slug", "RESERVED_SLUGS"]
