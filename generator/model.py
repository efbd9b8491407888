"""The loaded programme: plain typed objects every later stage reads (never writes)."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

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
    noise_logs: dict[str, pd.DataFrame]
    #: measurement_id -> interval length in seconds (fixed per log)
    log_interval_s: dict[str, float]
    pages: list[NarrativePage]
    findings: Findings
    #: sha256 over every input file's path and bytes, in sorted order
    digest: str
    #: templates/ override folder of the programme, if any
    template_dir: Path | None = None
    extra: dict = field(default_factory=dict)

    def table(self, name: str) -> pd.DataFrame:
        """Return the DataFrame of data file *name* (empty when the file is absent)."""
        return self.tables[name]

    def has(self, name: str) -> bool:
        """True when data file *name* was present (even if it has no rows)."""
        return name in self.present
