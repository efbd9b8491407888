"""The dress layer: read data files exported by other systems into hcpsite's standard frame.

A file's *dress* is how it is written down: where it lies, its encoding, the character
between cells, the decimal mark, how dates are written, the names of its columns, and for
audiograms whether both ears share one row. ``files:`` in programme.yaml
(:class:`generator.config.FileDress`) describes a dress; this module turns a file in that
dress into what the reader expects (UTF-8 comma-separated text, ISO dates, decimal points,
hcpsite's column names, one audiogram row per ear), in four steps the reader calls:

* :meth:`Dresser.source` - which file to read (``path``, ``sheet``), confined to the folder;
* :meth:`Dresser.standard_bytes` - a CSV decoded and re-separated as UTF-8 with commas,
  line for line (so line numbers stay the file's own);
* :meth:`Dresser.standard_grid` - columns renamed, decimal commas and other date patterns
  rewritten in the declared number and date columns, wide audiograms recognised;
* :meth:`Dresser.standard_table` - a wide audiogram table turned into one row per ear.

:meth:`Dresser.finish` then names each finding's column as the file names it and adds
hints to missing and unknown columns. When a file looks like another dress that nothing
describes (a header separated by ';', decimal commas, day-first dates, bytes that are not
UTF-8), the finding says what was seen and which ``files:`` setting would read it.
"""
from __future__ import annotations

import csv
import dataclasses
import difflib
import io
import os
import re
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from ..config import CONFIG_FILE, UTF8_NAMES, Config, FileDress
from ..findings import ERROR, WARNING, Finding, Findings
from .spec import AUDIO_FREQS, WIDE_EARS, WIDE_HL_COLUMNS, FileSpec, wide_audiograms

#: Kinds of declared columns whose cells are numbers (the decimal mark applies).
NUMBER_KINDS = ("float", "int", "level", "hours", "hl")
#: Kinds of declared columns whose cells are dates (date_format applies).
DATE_KINDS = ("date", "date_or_year")
#: Most file columns listed in a message about a missing column.
LISTED_COLUMNS = 12
#: Encodings suggested for bytes that are not UTF-8 (Windows Western European, ISO 8859-1).
SUGGESTED_ENCODINGS = ("cp1252", "latin-1")
#: Generic words that name a column under another name (token of the file's name -> ours).
SYNONYMS = {
    "employee": "person_id", "staff": "person_id", "worker": "person_id", "personnel": "person_id",
    "side": "ear", "gender": "sex", "dob": "birth_date", "born": "birth_date", "leq": "laeq",
    "peak": "lcpeak", "duration": "duration_h", "seg": "group",
}

_WIDE_NAME = re.compile(r"^hl_(\d+)_([lr])$")
_ISO_DATE = r"^\d{4}-\d{2}-\d{2}"
_YEAR = r"^\d{4}$"
_DAY_FIRST = re.compile(r"^(\d{1,2})([./-])(\d{1,2})\2(\d{4}|\d{2})$")
#: a cell that may be a date in another pattern (searched in a column's joined text)
_OTHER_DATE = re.compile(r"(?m)^\s*\d{1,2}[./-]\d{1,2}[./-]\d{2,4}\s*$")
_COMMA_NUMBER = r"^[+-]?(?:\d+,\d*|,\d+)$"
_THOUSANDS = r"^[+-]?\d{1,3}(?:\.\d{3})+(?:,\d*)?$"
_BOM16 = (b"\xff\xfe", b"\xfe\xff")


def _norm(label: Any) -> str:
    """Return a header label as the reader names it (stripped, lower case, BOM removed)."""
    return str(label).replace("\ufeff", "").strip().lower()


def _squash(label: str) -> str:
    """Return a label with everything but letters and digits removed, for likeness."""
    return re.sub(r"[^a-z0-9]+", "", label.lower())


def _tokens(label: str) -> list[str]:
    """Return the words of a label (split at non-alphanumerics, case changes, letters and digits)."""
    spaced = re.sub(r"([a-z])([A-Z])", r"\1 \2", str(label))
    spaced = re.sub(r"(\d)([A-Za-z])", r"\1 \2", re.sub(r"([A-Za-z])(\d)", r"\1 \2", spaced))
    return [t for t in re.split(r"[^a-z0-9]+", spaced.lower()) if t]


#: words for an ear in a column name of a wide audiogram export
EAR_WORDS = {"l": "l", "left": "l", "r": "r", "right": "r"}


def _ear_frequency(label: str) -> str | None:
    """Return hl_<f>_<ear> for a label such as 'Left 500 Hz', 'R4k' or 'L_1000', or None."""
    toks = _tokens(label)
    ears = {EAR_WORDS[t] for t in toks if t in EAR_WORDS}
    freqs = set()
    for i, t in enumerate(toks):
        if t.isdigit():
            f = int(t) * (1000 if i + 1 < len(toks) and toks[i + 1] in ("k", "khz") else 1)
            if f in AUDIO_FREQS:
                freqs.add(f)
    if len(ears) == 1 and len(freqs) == 1:
        return f"hl_{freqs.pop()}_{ears.pop()}"
    return None


def _flow(value: Any) -> str:
    """Return a YAML flow value for a suggestion (quoted where YAML needs it)."""
    text = str(value)
    if text == "\t":
        return '"\\t"'
    if re.fullmatch(r"[A-Za-z0-9_-]+", text) and text.lower() not in ("yes", "no", "true", "false", "null"):
        return text
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def suggestion(name: str, setting: str | dict[str, Any], value: Any = None) -> str:
    """Return 'add files: {NAME: {SETTING: VALUE}} to programme.yaml' in YAML flow style.

    *setting* may be a mapping of several settings (then *value* is not given).
    """
    def flow(v: Any) -> str:
        if isinstance(v, dict):
            return "{" + ", ".join(f"{_flow(k)}: {_flow(x)}" for k, x in v.items()) + "}"
        return _flow(v)

    pairs = setting if isinstance(setting, dict) else {setting: value}
    inner = ", ".join(f"{k}: {flow(v)}" for k, v in pairs.items())
    return f"add files: {{{name}: {{{inner}}}}} to {CONFIG_FILE}"


def _not_utf8(raw: bytes) -> tuple[int, int, str] | None:
    """Return (byte, line, where) of the first byte that is not UTF-8, or None; *where* says the
    byte's place in its line and in the file and what it is in cp1252."""
    if raw.isascii():
        return None
    try:
        raw.decode("utf-8")
        return None
    except UnicodeDecodeError as exc:
        line = raw[:exc.start].count(b"\n") + 1
        col = exc.start - (raw.rfind(b"\n", 0, exc.start) + 1) + 1
        char = raw[exc.start:exc.start + 1].decode("cp1252", errors="replace")
        return raw[exc.start], line, f"byte {col} of the line, {exc.start + 1} of the file; in cp1252 it is '{char}'"


def _header_delimiter(head: str, delimiter: str) -> tuple[str, str] | None:
    """Return (character, word) when the header is one cell of names split by another character."""
    first = head.split("\n", 1)[0].lstrip("\ufeff").rstrip("\r")
    if delimiter in first or '"' in first:
        return None  # more than one cell, or quoted names: read as it is
    for seen, word in ((";", "';'"), ("\t", "tab"), ("|", "'|'"), (",", "','")):
        if seen != delimiter and seen in first and len([n for n in first.split(seen) if n.strip()]) >= 2:
            return seen, word
    return None


#: lines of a refused file looked at for decimal commas and date patterns
SNIFFED_LINES = 2000


def _sniff_cells(head: str, delimiter: str) -> list[tuple[str, str, str]]:
    """Return (setting, value, what was seen) for decimal commas and other date patterns in cells."""
    reader = csv.reader(io.StringIO(head, newline=""), delimiter=delimiter)
    comma: tuple[str, int] | None = None
    dates: list[str] = []
    first_date: tuple[str, int] | None = None
    try:
        next(reader, None)
        for record in reader:
            if reader.line_num > SNIFFED_LINES:
                break
            for cell in record:
                v = cell.strip()
                if comma is None and delimiter != "," and re.match(_COMMA_NUMBER, v):
                    comma = (v, reader.line_num)
                if _DAY_FIRST.match(v):
                    dates.append(v)
                    first_date = first_date or (v, reader.line_num)
    except csv.Error:
        pass
    out: list[tuple[str, str, str]] = []
    if comma is not None:
        out.append(("decimal", ",", f"numbers have decimal commas ('{comma[0]}' on line {comma[1]})"))
    fmt = sniff_date_format(dates) if dates else None
    if fmt is not None and first_date is not None:
        order = "day first" if fmt.startswith("%d") else "month first"
        out.append(("date_format", fmt, f"dates are written {order} ('{first_date[0]}' on line {first_date[1]})"))
    return out


def likely_columns(label: str, candidates: tuple[str, ...] | list[str]) -> list[str]:
    """Return hcpsite column names that the file's column *label* may be, best first."""
    sq = _squash(label)
    toks = _tokens(label)
    out: list[str] = []
    for c in candidates:
        if _squash(c) == sq:
            out.append(c)
    for c in candidates:
        parts = c.split("_")
        if c not in out and len(sq) >= 3 and all(p in toks for p in parts) and parts != ["id"]:
            out.append(c)
    for t in toks:
        syn = SYNONYMS.get(t)
        if syn and syn in candidates and syn not in out:
            out.append(syn)
    wide = _ear_frequency(label)
    if wide and wide in candidates and wide not in out:
        out.insert(0, wide)
    squashed = {_squash(c): c for c in candidates}
    for hit in difflib.get_close_matches(sq, list(squashed), n=2, cutoff=0.75):
        if squashed[hit] not in out:
            out.append(squashed[hit])
    return out


@dataclasses.dataclass
class _Seen:
    """What the dress layer learnt about one file it read, for the messages of :meth:`Dresser.finish`."""

    name: str
    rel: str
    header: list[str]
    #: hcpsite column (as read, e.g. hl_500_l) -> the file's own label, for renamed columns
    own: dict[str, str]
    dress: FileDress | None
    wide: bool = False
    #: hcpsite column names the file could have been read with (for closeness)
    known: tuple[str, ...] = ()


class Dresser:
    """Apply the ``files:`` settings of one programme to its data files (see the module doc)."""

    def __init__(self, root: Path, config: Config | None, findings: Findings) -> None:
        self.root = Path(root)
        self.files: dict[str, FileDress] = dict(getattr(config, "files", None) or {})
        self.findings = findings
        self.seen: dict[str, _Seen] = {}
        #: files whose in-cell commas wait as _COMMA_MARK
        self.marked: set[str] = set()

    # -- where ---------------------------------------------------------------------------

    def _at(self, name: str, key: str) -> tuple[int | None, str]:
        """Return (line, option) of a files: setting for a located message."""
        d = self.files[name]
        line = d.where.get(key, d.where.get("", (None, None)))[0]
        return line, f"files.{name}.{key}" if key else f"files.{name}"

    def source(self, spec: FileSpec, default: Callable[[Path, FileSpec, Findings], tuple[Path | None, str]]
               ) -> tuple[Path | None, str, bool]:
        """Return (file to read or None, 'csv' or 'xlsx', whether files: named it).

        Without ``path`` the *default* lookup (data/NAME.csv or .xlsx) is used.
        """
        d = self.files.get(spec.name)
        if d is None or d.path is None:
            path, kind = default(self.root, spec, self.findings)
            if d is not None and d.sheet is not None and kind == "csv":
                line, opt = self._at(spec.name, "sheet")
                self.findings.warning(CONFIG_FILE, line, opt, f"sheet is for workbooks; {spec.path} is a "
                                      "CSV, the setting is ignored")
            return path, kind, False
        line, opt = self._at(spec.name, "path")
        path = self.root / d.path
        if not os.path.lexists(path):
            self.findings.error(CONFIG_FILE, line, opt, f"'{d.path}' does not exist in the programme folder")
            return None, "", True
        real = os.path.realpath(path)
        if os.path.commonpath([real, os.path.realpath(self.root)]) != os.path.realpath(self.root):
            self.findings.error(CONFIG_FILE, line, opt, f"'{d.path}' resolves outside the programme folder "
                                "(symbolic link?); not read")
            return None, "", True
        if os.path.isdir(path):
            self.findings.error(CONFIG_FILE, line, opt, f"'{d.path}' is a folder, not a file")
            return None, "", True
        for other in (spec.path, spec.path[:-4] + ".xlsx"):
            if os.path.lexists(self.root / other) and Path(other) != Path(d.path):
                self.findings.warning(other, None, None, f"not read: {opt} names '{d.path}' instead",
                                      key="replaced data file")
        kind = "xlsx" if d.path.lower().endswith(".xlsx") else "csv"
        for key in ("encoding", "delimiter"):
            if kind == "xlsx" and key in d.where:
                kl, kopt = self._at(spec.name, key)
                self.findings.warning(CONFIG_FILE, kl, kopt, f"{key} is for CSV files; '{d.path}' is a workbook, "
                                      "the setting is ignored")
        if d.sheet is not None and kind == "csv":
            sl, sopt = self._at(spec.name, "sheet")
            self.findings.warning(CONFIG_FILE, sl, sopt, f"sheet is for workbooks; '{d.path}' is read as a "
                                  "CSV, the setting is ignored")
        return path, kind, True

    def paths(self) -> set[str]:
        """Return the folder-relative paths that files: names (not 'unknown data files')."""
        return {Path(d.path).as_posix() for d in self.files.values() if d.path is not None}

    def sheet(self, spec: FileSpec, raw: bytes) -> str | int | None:
        """Return the sheet to read of a workbook (0 = the first), or None with a located error."""
        d = self.files.get(spec.name)
        if d is None or d.sheet is None:
            return 0
        try:
            import openpyxl
            book = openpyxl.load_workbook(io.BytesIO(raw), read_only=True)
            names = list(book.sheetnames)
            book.close()
        except Exception:  # a damaged workbook is reported by the reader itself
            return d.sheet
        if d.sheet in names:
            return d.sheet
        folded = {n.strip().lower(): n for n in names}
        if d.sheet.strip().lower() in folded:
            return folded[d.sheet.strip().lower()]
        line, opt = self._at(spec.name, "sheet")
        self.findings.error(CONFIG_FILE, line, opt, f"the workbook has no sheet '{d.sheet}'; its sheets: "
                            + ", ".join(f"'{n}'" for n in names))
        return None

    # -- bytes ---------------------------------------------------------------------------

    def standard_bytes(self, spec: FileSpec, raw: bytes, rel: str, kind: str) -> bytes | None:
        """Return CSV bytes as UTF-8 with ',' between cells, line for line; None after an error.

        Workbooks pass unchanged. A CSV in hcpsite's own dress passes unchanged too, after a
        look at whether it is in another dress (then an error names the setting).
        """
        if kind != "csv":
            return raw
        d = self.files.get(spec.name)
        encoding = d.encoding if d is not None else "utf-8"
        delimiter = d.delimiter if d is not None else ","
        utf8 = encoding.lower() in UTF8_NAMES
        if utf8 and delimiter == ",":
            if raw.startswith(_BOM16):
                return raw  # the reader reports UTF-16
            bad = _not_utf8(raw)
            head = raw[:65536].decode("cp1252" if bad else "utf-8", errors="replace")
            if self._refuse(spec, rel, head, ",", bad):
                return None
            return raw
        try:
            text = raw.decode("utf-8-sig" if utf8 else encoding)
        except UnicodeDecodeError as exc:
            line = raw[:exc.start].count(b"\n") + 1
            where = f"files.{spec.name}.encoding is {encoding}" if d is not None and "encoding" in d.where \
                else "the file should be UTF-8"
            self.findings.error(rel, line, None, f"byte 0x{raw[exc.start]:02x} on line {line} cannot be "
                                f"decoded ({where}); check the file's encoding")
            return None
        if "\x00" in text:
            line = text[:text.index("\x00")].count("\n") + 1
            self.findings.error(rel, line, None, "contains NUL bytes: not a text file")
            return None
        if delimiter == ",":
            return text.encode("utf-8")
        if self._refuse(spec, rel, text[:65536], delimiter, None):
            return None
        if '"' not in text and _COMMA_MARK not in text:
            # no quoted cells: every ',' is inside a cell; it waits as a mark (restored by
            # standard_grid) so that the reader's quote-free path splits the lines
            data = text.replace(",", _COMMA_MARK).replace(delimiter, ",").encode("utf-8")
            self.marked.add(rel)
            return data
        reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, strict=True)
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\n")
        try:
            for record in reader:
                writer.writerow(record)
        except csv.Error as exc:
            self.findings.error(rel, reader.line_num or None, None, f"cannot be read as CSV: {exc} "
                                "(unbalanced quotes?)")
            return None
        return out.getvalue().encode("utf-8")

    def _refuse(self, spec: FileSpec, rel: str, head: str, delimiter: str,
                bad_byte: tuple[int, int, str] | None) -> bool:
        """Return True after one error when the start of a CSV shows another dress.

        *bad_byte* is (byte, line, character in cp1252) of the first byte that is not UTF-8.
        A header that is one cell of names split by another character, or bytes that are not
        UTF-8, refuse the file; the cells are then looked at for decimal commas and other
        date patterns too, so that one finding names every setting the file needs.
        """
        settings: dict[str, str] = {}
        seen: list[str] = []
        line = 1
        if bad_byte is not None:
            byte, line, where = bad_byte
            settings["encoding"] = SUGGESTED_ENCODINGS[0]
            seen.append(f"byte 0x{byte:02x} on line {line} ({where}) is not UTF-8")
        split = delimiter
        other = _header_delimiter(head, delimiter)
        if other is not None:
            split, word = other
            settings["delimiter"] = split
            have = f" (files.{spec.name}.delimiter is {_flow(delimiter)})" if delimiter != "," else ""
            seen.append(f"the header holds {word} separated names{have}")
        if not settings:
            return False
        for setting, value, what in _sniff_cells(head, split):
            if setting not in settings:
                settings[setting] = value
                seen.append(what)
        text = ", ".join(seen[:-1]) + " and " + seen[-1] if len(seen) > 1 else seen[0]
        hint = f"{suggestion(spec.name, settings)}"
        if "encoding" in settings:
            hint += f" (or encoding: {SUGGESTED_ENCODINGS[1]}), or save the file as UTF-8"
        self.findings.error(rel, line, None, f"{text}; {hint}", key="other dress")
        return True

    # -- cells ---------------------------------------------------------------------------

    def plain(self, spec: FileSpec, rel: str) -> bool:
        """Return True when no ``files:`` setting changes how the cells of *spec*'s file read."""
        return self.files.get(spec.name) is None and rel not in self.marked

    def standard_grid(self, spec: FileSpec, grid: Any, kind: str = "csv") -> tuple[Any, FileSpec]:
        """Return (grid with standard header and cells, the declaration to read it with)."""
        d = self.files.get(spec.name)
        header = [str(h) for h in grid.header]
        mapping = {_norm(k): v for k, v in (d.columns if d is not None else {}).items()}
        names: list[str] = []
        own: dict[str, str] = {}
        for label in header:
            target = mapping.get(_norm(label))
            names.append(target if target else label)
            if target:
                own[target] = str(label).replace("\ufeff", "").strip()
        if d is not None and mapping:
            found = {_norm(h) for h in header}
            missing = [k for k in (d.columns or {}) if _norm(k) not in found]
            if missing:
                line, opt = self._at(spec.name, "columns")
                listed = ", ".join(f"'{h}'" for h in header[:LISTED_COLUMNS])
                for k in missing:
                    near = difflib.get_close_matches(_norm(k), [_norm(h) for h in header], n=1, cutoff=0.6)
                    hint = f" (closest: '{header[[_norm(h) for h in header].index(near[0])]}')" if near else ""
                    self.findings.warning(CONFIG_FILE, line, opt, f"'{k}' is not a column of {grid_path(grid)}"
                                          f"{hint}; its columns: {listed}")
        lowered = [_norm(n) for n in names]
        wide = spec.name == "audiograms" and "ear" not in lowered and any(_WIDE_NAME.match(n) for n in lowered)
        read = wide_audiograms() if wide else spec
        known = tuple(c.name for c in spec.columns) + (WIDE_HL_COLUMNS if spec.name == "audiograms" else ())
        if wide:
            for n, label in zip(lowered, header):
                if _WIDE_NAME.match(n) and n not in own:
                    own[n] = str(label).replace("\ufeff", "").strip()
        self.seen[grid_path(grid)] = _Seen(spec.name, grid_path(grid), header, own, d, wide, known)
        kinds = {c.name: c.kind for c in read.columns}
        cells = grid.cells
        changed: dict[int, pd.Series] = {}
        if grid_path(grid) in self.marked:
            cells = cells.copy()
            for i in cells.columns:
                joined = _joined(cells[i])
                if _COMMA_MARK in joined:
                    cells[i] = pd.Series(joined.replace(_COMMA_MARK, ",").split("\n"), index=cells.index,
                                         dtype=object)
        comma_cols: list[tuple[str, str, int]] = []
        date_cols: list[tuple[str, str, int, str]] = []
        workbook = kind == "xlsx"
        for i, n in enumerate(lowered):
            col_kind = kinds.get(n)
            if col_kind is None or i not in cells.columns or cells[i].dtype.kind in "fM":
                continue  # (a column the parser read as numbers or ISO dates holds neither commas nor other dates)
            label = own.get(n, header[i])
            if col_kind in NUMBER_KINDS:
                s = self._numbers(spec, cells[i], d, label, grid, comma_cols, workbook)
            elif col_kind in DATE_KINDS:
                s = self._dates(spec, cells[i], d, label, grid, date_cols, workbook)
            else:
                continue
            if s is not None:
                changed[i] = s
        self._report_sniffed(spec, grid, comma_cols, date_cols)
        if changed:
            cells = cells.copy()
            for i, s in changed.items():
                cells[i] = s
        return dataclasses.replace(grid, header=names, cells=cells), read

    def _numbers(self, spec: FileSpec, col: pd.Series, d: FileDress | None, label: str, grid: Any,
                 comma_cols: list[tuple[str, str, int]], workbook: bool = False) -> pd.Series | None:
        """Rewrite decimal commas as points in one number column (None: nothing to change).

        In a workbook only text cells can hold a decimal comma: a number cell arrives
        written with a point and is kept as it is.
        """
        joined = _joined(col)
        if workbook and d is not None and d.decimal == ",":
            if "," not in joined:
                return None
            s = col.astype(str).str.strip()
            commas = s.str.match(_COMMA_NUMBER).to_numpy(dtype=bool)
            return s.where(~commas, s.str.replace(",", ".", regex=False))
        if "," not in joined and (d is None or d.decimal != "," or "." not in joined):
            return None  # the usual case, found without a look at each cell
        if d is not None and d.decimal == "," and "." not in joined:
            lines = joined.replace(",", ".").split("\n")
            if len(lines) == len(col):
                return pd.Series(lines, index=col.index, dtype=object)
        s = col.astype(str).str.strip()
        if d is not None and d.decimal == ",":
            thousands = s.str.match(_THOUSANDS).to_numpy(dtype=bool)
            dotted = s.str.contains(".", regex=False).to_numpy(dtype=bool) & ~thousands
            if dotted.any():
                rows = grid.rows[dotted]
                line, _ = self._at(spec.name, "decimal")
                self.findings.add_rows(grid_path(grid), rows.tolist(), label, ERROR,
                                       [f"'{v}' holds a '.', but files.{spec.name}.decimal is ',' "
                                        f"({CONFIG_FILE} line {line})" for v in s[dotted].tolist()],
                                       key=f"{label}: decimal point")
            out = s.where(~thousands, s.str.replace(".", "", regex=False))
            return out.str.replace(",", ".", regex=False).where(~dotted, s)
        commas = s.str.match(_COMMA_NUMBER).to_numpy(dtype=bool)
        if not commas.any():
            return None
        first = int(np.flatnonzero(commas)[0])
        comma_cols.append((label, str(s.iloc[first]), int(grid.rows[first])))
        return None  # the cells stay unread ("not a number"); the finding names the setting

    def _dates(self, spec: FileSpec, col: pd.Series, d: FileDress | None, label: str, grid: Any,
               date_cols: list[tuple[str, str, int, str]], workbook: bool = False) -> pd.Series | None:
        """Rewrite dates written in another pattern as ISO in one date column (None: nothing to change)."""
        fmt = d.date_format if d is not None else None
        if fmt is None and not workbook and not _OTHER_DATE.search(_joined(col)):
            return None  # the usual case, found without a look at each cell
        if fmt is not None and not workbook:
            quick = _reorder_dates(col, fmt)
            if quick is not None:
                return quick
        s = col.astype(str).str.strip()
        if workbook:
            # a workbook date cell under another column name arrives as an ISO date-time
            s = s.str.replace(r"^(\d{4}-\d{2}-\d{2})T[\d:.]+$", r"\1", regex=True)
        unchanged = s if workbook else None
        other = (s.ne("") & ~s.str.match(_ISO_DATE) & ~s.str.match(_YEAR)).to_numpy(dtype=bool)
        if not other.any():
            return unchanged
        if fmt is None:
            fmt = sniff_date_format(s[other].tolist())
            if fmt is None:
                return unchanged
            first = int(np.flatnonzero(other)[0])
            date_cols.append((label, str(s.iloc[first]), int(grid.rows[first]), fmt))
            return unchanged  # the cells stay unread ("not a date"); the finding names the setting
        parsed = pd.to_datetime(s.where(other, ""), format=fmt, errors="coerce")
        ok = parsed.notna().to_numpy() & other
        if not ok.any():
            return unchanged
        iso = parsed.dt.strftime("%Y-%m-%d")
        return s.where(~ok, iso)

    def _report_sniffed(self, spec: FileSpec, grid: Any, comma_cols: list[tuple[str, str, int]],
                        date_cols: list[tuple[str, str, int, str]]) -> None:
        """Record one error per dress trait seen in cells that no setting describes."""
        rel = grid_path(grid)
        if comma_cols:
            label, value, row = comma_cols[0]
            more = f" and {len(comma_cols) - 1} more column{'s' if len(comma_cols) > 2 else ''}" \
                if len(comma_cols) > 1 else ""
            self.findings.error(rel, row, label, f"numbers are written with a decimal comma ('{value}' in "
                                f"'{label}'{more}); {suggestion(spec.name, 'decimal', ',')}",
                                key="decimal comma")
        if date_cols:
            label, value, row, fmt = date_cols[0]
            formats = sorted({c[3] for c in date_cols})
            order = "day first" if fmt.startswith("%d") else "month first" if fmt.startswith("%m") else "in " + fmt
            more = f" and {len(date_cols) - 1} more column{'s' if len(date_cols) > 2 else ''}" \
                if len(date_cols) > 1 else ""
            also = f" (other columns look like {', '.join(f for f in formats if f != fmt)})" \
                if len(formats) > 1 else ""
            self.findings.error(rel, row, label, f"dates are written {order} ('{value}' in '{label}'{more}), "
                                f"not as YYYY-MM-DD; {suggestion(spec.name, 'date_format', fmt)}{also}",
                                key="other date format")

    # -- rows ----------------------------------------------------------------------------

    def standard_table(self, spec: FileSpec, read: FileSpec, table: pd.DataFrame, rel: str) -> pd.DataFrame:
        """Return the table in *spec*'s shape: a wide audiogram table becomes one row per ear."""
        if read is spec:
            return table
        return wide_to_long(spec, table, self.findings, rel)

    # -- messages ------------------------------------------------------------------------

    def finish(self, findings: Findings) -> Findings:
        """Return *findings* with columns named as the files name them and hints to missing columns."""
        if not self.seen:
            return findings
        out = Findings()
        items: list[Finding] = []
        for f in findings:
            seen = self.seen.get(f.path)
            if seen is None:
                items.append(f)
                continue
            column = f.column
            if column and (seen.own or seen.wide):
                column = "+".join(seen.own.get(part, part) for part in column.split("+"))
            message = f.message
            if f.key == "missing column" and f.column:
                message += self._missing_hint(seen, f.column)
            elif f.key == "unknown columns":
                message += self._unknown_hint(seen)
            elif f.column and f.key == f"{f.column}: not a date" and seen.dress is not None \
                    and seen.dress.date_format is not None:
                message = message.replace("(YYYY-MM-DD)", f"({seen.dress.date_format} as files.{seen.name}."
                                          "date_format says, or YYYY-MM-DD)")
            items.append(Finding(f.path, f.row, column, f.level, message, f.key))
        out.extend(items)
        return out

    def _missing_hint(self, seen: _Seen, column: str) -> str:
        """Return the file's columns and the closest ones, for a missing required column."""
        labels = [h.replace("\ufeff", "").strip() for h in seen.header if str(h).strip()]
        listed = ", ".join(f"'{h}'" for h in labels[:LISTED_COLUMNS])
        if len(labels) > LISTED_COLUMNS:
            listed += f" and {len(labels) - LISTED_COLUMNS} more"
        mapped = {_norm(k) for k in (seen.dress.columns if seen.dress else {})}
        near = [h for h in labels if _norm(h) not in mapped and column in likely_columns(h, (column,))]
        if not near:
            squashed = {_squash(h): h for h in labels if _norm(h) not in mapped}
            near = [squashed[m] for m in difflib.get_close_matches(_squash(column), list(squashed), n=2,
                                                                   cutoff=0.5)]
        text = f"; the file's columns: {listed}"
        if near:
            text += f"; closest: {', '.join(repr(h) for h in near[:2])} ({suggestion(seen.name, 'columns', {near[0]: column})})"
        elif seen.name == "audiograms" and column == "ear":
            text += "; a file with both ears on one row names its levels hl_<f>_l and hl_<f>_r"
            pairs = {h: _ear_frequency(h) for h in labels if _norm(h) not in mapped and _ear_frequency(h)}
            if len(set(pairs.values())) == len(pairs) >= 2:
                text += f" ({suggestion(seen.name, 'columns', pairs)})"
        return text

    def _unknown_hint(self, seen: _Seen) -> str:
        """Return likely names for the file's unknown columns (those no setting maps)."""
        known = set(seen.known)
        present = {_norm(n) for n in seen.header} | set(seen.own)
        pairs: dict[str, str] = {}
        for h in seen.header:
            label = str(h).replace("\ufeff", "").strip()
            if not label or _norm(label) in known or label in seen.own.values():
                continue
            hits = [c for c in likely_columns(label, tuple(sorted(known))) if c not in present]
            if hits:
                pairs[label] = hits[0]
        if not pairs:
            return ""
        return f"; some may be known columns under other names: {suggestion(seen.name, 'columns', pairs)}"


#: stands for a comma inside a cell while a re-separated CSV passes the reader's splitting
_COMMA_MARK = "\x1f"
_SIMPLE_FORMAT = re.compile(r"^%([dmY])([^%\w])%([dmY])\2%([dmY])$")
_NOT_ISO_LINE = re.compile(r"(?m)^(?![ \t]*$)(?![ \t]*\d{4}-\d{2}-\d{2}[ \t]*$)(?![ \t]*\d{4}[ \t]*$).+$")


def _reorder_dates(col: pd.Series, fmt: str) -> pd.Series | None:
    """Return a date column in a fixed-width pattern such as %d.%m.%Y rewritten as ISO, or None.

    One regular-expression pass over the column's text; a rewritten date that is not a
    calendar date keeps the file's text (so its finding quotes it); None when some cell
    needs the general path.
    """
    m = _SIMPLE_FORMAT.match(fmt)
    if not m or sorted((m.group(1), m.group(3), m.group(4))) != ["Y", "d", "m"]:
        return None
    order = (m.group(1), m.group(3), m.group(4))
    sep = re.escape(m.group(2))
    width = {"d": r"(\d{2})", "m": r"(\d{2})", "Y": r"(\d{4})"}
    pattern = re.compile(r"(?m)^[ \t]*" + sep.join(width[p] for p in order) + r"[ \t]*$")
    group = {p: i + 1 for i, p in enumerate(order)}
    joined = _joined(col)
    new = pattern.sub(rf"\{group['Y']}-\{group['m']}-\{group['d']}", joined)
    if _NOT_ISO_LINE.search(new):
        return None
    lines = new.split("\n")
    if len(lines) != len(col):
        return None
    out = pd.Series(lines, index=col.index, dtype=object)
    changed = (out != col).to_numpy(dtype=bool)
    if changed.any():
        bad = changed & pd.to_datetime(out.where(changed, ""), format="%Y-%m-%d", errors="coerce").isna().to_numpy()
        if bad.any():
            out = out.where(~bad, col)
    return out


def _joined(col: pd.Series) -> str:
    """Return the cells of a column joined by line breaks (one C-speed text to search)."""
    try:
        return "\n".join(col.tolist())
    except TypeError:
        return "\n".join(map(str, col.tolist()))


def grid_path(grid: Any) -> str:
    """Return the (single) file path of a parsed grid."""
    return grid.path if isinstance(grid.path, str) else str(grid.path[0])


def sniff_date_format(values: list[str]) -> str | None:
    """Return the strftime pattern of dates such as 31.12.2025 or 12/31/2025, or None.

    Day first unless a middle part exceeds 12 (month first); a '/' pattern where no part
    exceeds 12 is still read day first, and the message shows the pattern to check.
    """
    firsts: list[int] = []
    seconds: list[int] = []
    seps: set[str] = set()
    years: set[int] = set()
    for v in values[:5000]:
        m = _DAY_FIRST.match(v)
        if not m:
            continue
        firsts.append(int(m.group(1)))
        seconds.append(int(m.group(3)))
        seps.add(m.group(2))
        years.add(len(m.group(4)))
    if not firsts or len(seps) != 1 or len(years) != 1:
        return None
    sep = seps.pop()
    y = "%Y" if years.pop() == 4 else "%y"
    if max(seconds) > 12 and max(firsts) <= 12:
        return f"%m{sep}%d{sep}{y}"
    return f"%d{sep}%m{sep}{y}"


def wide_to_long(spec: FileSpec, table: pd.DataFrame, findings: Findings, rel: str) -> pd.DataFrame:
    """Return one audiogram row per ear from a wide table (``hl_<f>_l``/``hl_<f>_r``).

    Every other column applies to both ears; an ear without any level (or NR) is not a test
    and is left out; rows keep the file's line in ``_row``, left ear before right.
    """
    wide_cols = {f"{p}_{f}_{e}" for f in AUDIO_FREQS for e, _ in WIDE_EARS for p in ("hl", "nr")}
    common = [c for c in table.columns if c not in wide_cols]
    cats = spec.column("ear").categories  # the loaded choice column's categories (reader._choice)
    parts = []
    for e, ear in WIDE_EARS:
        part = table[common].copy()
        part["ear"] = pd.Series(pd.Categorical.from_codes(np.full(len(table), cats.index(ear), dtype=np.int8),
                                                          categories=pd.Index(list(cats), dtype=object)),
                                index=table.index)
        tested = np.zeros(len(table), dtype=bool)
        for f in AUDIO_FREQS:
            hl = table[f"hl_{f}_{e}"]
            nr = table[f"nr_{f}_{e}"]
            part[f"hl_{f}"] = hl
            part[f"nr_{f}"] = nr
            tested |= hl.notna().to_numpy() | nr.to_numpy(dtype=bool)
        part["_ear"] = 0 if ear == "L" else 1
        parts.append(part.loc[tested])
        if e == WIDE_EARS[0][0]:
            none = tested.copy()
        else:
            none = ~(none | tested)
    if none.any() and rel:
        findings.add_rows(rel, table["_row"].to_numpy()[none].tolist(), None, WARNING,
                          "no hearing level for either ear; the row is not a test and is not read",
                          key="wide row without levels")
    long = pd.concat(parts, ignore_index=True).sort_values(["_row", "_ear"], kind="stable")
    long = long.drop(columns=["_ear"]).reset_index(drop=True)
    order: list[str] = []
    for c in spec.columns:
        order.append(c.name)
        if c.kind == "hl":
            order.append("nr_" + c.name[3:])
    rest = [c for c in long.columns if c not in order and c != "_row"]
    return long[order + rest + ["_row"]]
