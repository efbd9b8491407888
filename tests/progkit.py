"""Test helpers: write tiny programme folders from Python data."""
from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any, Mapping

import yaml

BASE_CONFIG: dict[str, Any] = {
    "title": "Test review",
    "organisation": "Invented Test Works",
    "period": {"start": "2025-01-01", "end": "2025-12-31"},
    "rules": "osha-1910.95",
    "compare_rules": ["niosh-rel", "eu-2003-10"],
    "privacy": {"min_group_size": 1},
}

MINIMAL_PEOPLE = [
    {"person_id": "E001", "group": "G1", "sex": "M", "birth_date": "1980-05-01", "hire_date": "2010-01-01"},
    {"person_id": "E002", "group": "G1", "sex": "F", "birth_date": "1990", "hire_date": "2015-03-01"},
]


def _csv_text(rows: list[Mapping[str, Any]] | str) -> str:
    if isinstance(rows, str):
        return rows
    if not rows:
        return ""
    cols: list[str] = []
    for r in rows:
        for k in r:
            if k not in cols:
                cols.append(k)
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=cols, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: ("" if r.get(k) is None else r.get(k)) for k in cols})
    return buf.getvalue()


def make_programme(root: Path, files: Mapping[str, list[Mapping[str, Any]] | str | bytes] | None = None,
                   config: Mapping[str, Any] | str | None = None, pages: Mapping[str, str] | None = None,
                   people: bool = True) -> Path:
    """Write a programme folder at *root* and return it.

    *files* maps a path relative to ``data/`` (``"noise.csv"``, ``"noise_logs/M1.csv"``) to
    a list of row dicts, raw CSV text or raw bytes. ``people.csv`` with two people in
    group G1 is written unless given or ``people=False``. *config* updates BASE_CONFIG
    (or is raw YAML text). *pages* maps ``name.md`` to markdown text.
    """
    root = Path(root)
    (root / "data").mkdir(parents=True, exist_ok=True)
    files = dict(files or {})
    if people and "people.csv" not in files:
        files["people.csv"] = MINIMAL_PEOPLE
    for rel, content in files.items():
        p = root / "data" / rel
        p.parent.mkdir(parents=True, exist_ok=True)
        if isinstance(content, bytes):
            p.write_bytes(content)
        else:
            p.write_text(_csv_text(content), encoding="utf-8")
    if isinstance(config, str):
        (root / "programme.yaml").write_text(config, encoding="utf-8")
    else:
        cfg = _merge(BASE_CONFIG, dict(config or {}))
        (root / "programme.yaml").write_text(yaml.safe_dump(cfg, sort_keys=False), encoding="utf-8")
    for name, text in (pages or {}).items():
        (root / "pages").mkdir(exist_ok=True)
        (root / "pages" / name).write_text(text, encoding="utf-8")
    return root


def _merge(base: dict, over: dict) -> dict:
    out = dict(base)
    for k, v in over.items():
        if isinstance(v, dict) and isinstance(out.get(k), dict):
            out[k] = _merge(out[k], v)
        else:
            out[k] = v
    return out


def export_texts(files: Mapping[str, bytes]) -> dict[str, str]:
    """Return the text of every export file; a workbook as the tab-separated text of its cells."""
    import zipfile
    out: dict[str, str] = {}
    for name, data in files.items():
        if name.endswith(".xlsx"):
            from openpyxl import load_workbook
            wb = load_workbook(io.BytesIO(data), read_only=True)
            lines = []
            for ws in wb.worksheets:
                for row in ws.iter_rows(values_only=True):
                    lines.append("\t".join("" if v is None else str(v) for v in row))
            # the package parts too (properties, shared strings): every byte is checked
            with zipfile.ZipFile(io.BytesIO(data)) as z:
                lines.extend(z.read(n).decode("utf-8") for n in z.namelist())
            out[name] = "\n".join(lines)
        else:
            out[name] = data.decode("utf-8")
    return out


def random_lines(rng: Any, alphabet: bytes, max_len: int) -> tuple[Any, Any, Any]:
    """Return (bytes as uint8, line ends, comma positions) of a random file over *alphabet*,
    1 to *max_len* - 1 bytes long; a file without a final newline ends its last line at its end."""
    import numpy as np
    letters = np.frombuffer(alphabet, dtype=np.uint8)
    arr = letters[rng.integers(0, letters.size, rng.integers(1, max_len))]
    nl = np.flatnonzero(arr == 10)
    if arr[-1] != 10:
        nl = np.append(nl, arr.size)
    return arr, nl, np.flatnonzero(arr == 44)
