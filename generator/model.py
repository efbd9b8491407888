"""The loaded programme: plain typed objects every later stage reads (never writes)."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator, Mapping

import numpy as np
import pandas as pd

from .config import Config
from .findings import Findings


@dataclass
class NarrativePage:
    """One markdown page of the programme's pages/ folder (front matter parsed)."""

    slug: str
    title: str
    order: int
    markdown: str
    source: str  # path relative to the programme folder


@dataclass(frozen=True)
class PersonIndex:
    """Every person id of the loaded tables, coded once: the integer key of the later stages.

    ``ids`` holds the distinct ids (as text) in sorted order and ``codes[name]`` the position in
    ``ids`` of each row's person_id in table *name* (-1 for a missing cell). A code sorts as its
    id does, so the distinct codes of any rows, in order, are those rows' ids factorised in
    sorted order.
    """

    ids: np.ndarray
    codes: Mapping[str, np.ndarray]

    @staticmethod
    def of(tables: Mapping[str, pd.DataFrame]) -> "PersonIndex":
        """Code the person_id column of every table that has one, in one pass."""
        names = [n for n, df in tables.items() if "person_id" in df.columns]
        cells = [_id_texts(tables[n]["person_id"]) for n in names]
        joined = np.concatenate(cells) if cells else np.array([], dtype=object)
        codes, ids = pd.factorize(joined, sort=True)
        ends = np.cumsum([len(c) for c in cells]).tolist()
        parts = np.split(np.asarray(codes, dtype=np.int64), ends[:-1]) if cells else []
        return PersonIndex(np.asarray(ids, dtype=object), dict(zip(names, parts)))

    def factorize(self, name: str, rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Return (code of each row, distinct ids in sorted order) of table *name*'s person ids,
        of the rows selected by *rows* (a mask or positions) when given: what
        ``pd.factorize(ids, sort=True)`` returns, without hashing any text."""
        c = self.codes[name] if rows is None else self.codes[name][rows]
        seen = np.zeros(len(self.ids) + 1, dtype=bool)
        seen[c + 1] = True
        seen[0] = False  # (a missing cell keeps the code -1)
        new = np.cumsum(seen) - 1
        return new[c + 1].astype(np.int64), self.ids[seen[1:]]


def _id_texts(ids: pd.Series) -> np.ndarray:
    """Return the ids as text objects, a missing cell as NaN (pandas 2 would turn it into 'nan')."""
    missing = ids.isna().to_numpy(dtype=bool)
    if not missing.any():
        return ids.astype(str).to_numpy(dtype=object)
    out = np.full(len(ids), np.nan, dtype=object)
    out[~missing] = ids[~missing].astype(str).to_numpy(dtype=object)
    return out


class LazyFrames(Mapping[str, pd.DataFrame]):
    """A mapping of ids (in the order given) to frames, each made when it is first asked for
    (``_make(i)`` for the id at position i) and kept."""

    def __init__(self, ids: list[str]) -> None:
        self._pos = {m: i for i, m in enumerate(ids)}
        self._made: dict[str, pd.DataFrame] = {}

    def _make(self, i: int) -> pd.DataFrame:
        raise NotImplementedError

    def __getitem__(self, mid: str) -> pd.DataFrame:
        made = self._made.get(mid)
        if made is None:
            made = self._made[mid] = self._make(self._pos[mid])
        return made

    def __iter__(self) -> Iterator[str]:
        return iter(self._pos)

    def __len__(self) -> int:
        return len(self._pos)

    def __contains__(self, mid: object) -> bool:
        return mid in self._pos


class NoiseLogs(LazyFrames):
    """The noise logs by measurement id (in id order), read into one frame.

    *frame* holds the rows of every log (start, laeq, _row), each log one run of rows from
    *first* to *end* (aligned with the sorted *ids*). A log's own frame (a 0..n-1 index) is
    made when it is first asked for; :meth:`arrays` gives the rows of many logs at once,
    without making a frame for each.
    """

    def __init__(self, frame: pd.DataFrame, ids: list[str], first: np.ndarray, end: np.ndarray) -> None:
        super().__init__(ids)
        self._frame = frame
        self._first = np.asarray(first, dtype=np.int64)
        self._end = np.asarray(end, dtype=np.int64)

    def _make(self, i: int) -> pd.DataFrame:
        made = self._frame.iloc[self._first[i]:self._end[i]]
        made.index = pd.RangeIndex(len(made))
        return made

    def arrays(self, ids: list[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (rows of each log, start in ns as int64, laeq) of the logs *ids*, one after another."""
        at = np.asarray([self._pos[m] for m in ids], dtype=np.int64)
        first, sizes = self._first[at], self._end[at] - self._first[at]
        # the rows of each log in turn: its first row, then one more row at a time
        rows = np.repeat(first - np.concatenate(([0], np.cumsum(sizes)[:-1])), sizes) + np.arange(int(sizes.sum()))
        start = self._frame["start"].to_numpy("datetime64[ns]").view(np.int64)[rows]
        return sizes, start, self._frame["laeq"].to_numpy(float)[rows]


@dataclass
class Programme:
    """Everything read from one programme folder, validated."""

    root: Path
    config: Config
    #: file name (spec name, e.g. "audiograms") -> DataFrame following inputs/spec.py conventions;
    #: an absent optional file is an empty DataFrame with the declared columns.
    tables: dict[str, pd.DataFrame]
    #: file name -> path read, relative to root (absent files are missing here)
    present: dict[str, str]
    #: measurement_id -> DataFrame(start: datetime64, laeq: float64, _row: int), sorted by start
    #: (the reader gives a NoiseLogs: every log in one frame)
    noise_logs: Mapping[str, pd.DataFrame]
    #: measurement_id -> interval length in seconds (fixed per log)
    log_interval_s: dict[str, float]
    pages: list[NarrativePage]
    findings: Findings
    #: sha256 over every input file's path and bytes, in sorted order
    digest: str
    #: templates/ override folder of the programme, if any
    template_dir: Path | None = None
    extra: dict = field(default_factory=dict)
    #: every table's person ids coded once (built from the tables when not given)
    person_index: PersonIndex | None = field(default=None, repr=False)

    @property
    def persons(self) -> PersonIndex:
        """Return the integer person key of every table (PersonIndex)."""
        if self.person_index is None:
            self.person_index = PersonIndex.of(self.tables)
        return self.person_index

    def table(self, name: str) -> pd.DataFrame:
        """Return the DataFrame of data file *name* (empty when the file is absent)."""
        return self.tables[name]

    def has(self, name: str) -> bool:
        """True when data file *name* was present (even if it has no rows)."""
        return name in self.present
