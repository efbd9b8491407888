"""Small pandas helpers shared by the compute stages (no HTML, no rules)."""
from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .model import Programme


def add_months(dates: pd.Series, months: float | None) -> pd.Series:
    """Return *dates* plus whole calendar months (NaT stays NaT; None gives all NaT)."""
    dates = pd.to_datetime(pd.Series(dates), errors="coerce")
    if months is None:
        return pd.Series(pd.NaT, index=dates.index, dtype="datetime64[ns]")
    return (dates + pd.DateOffset(months=int(round(float(months))))).astype("datetime64[ns]")


def as_dates(values: Any) -> pd.Series:
    """Return *values* as a datetime64[ns] Series (all-NaN float columns included)."""
    return pd.to_datetime(pd.Series(values), errors="coerce").astype("datetime64[ns]")


def lookup(keys: pd.Series, values: pd.Series) -> pd.Series:
    """Return values[key] for each key (NaN/NaT where absent), keeping the index of *keys*."""
    values = values[~values.index.duplicated(keep="first")]
    return pd.Series(values.reindex(keys.to_numpy()).to_numpy(), index=keys.index, dtype=values.dtype
                     if values.dtype.kind == "M" else None)


def ts(value: Any) -> pd.Timestamp:
    return pd.Timestamp(value).normalize()


def empty(columns: list[str]) -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype="object") for c in columns})


def col(df: pd.DataFrame | None, name: str, default: Any = np.nan) -> pd.Series:
    """Return column *name* of *df* or a column of *default* of matching length."""
    if df is None:
        return pd.Series(dtype="object")
    if name in df.columns:
        return df[name]
    return pd.Series([default] * len(df), index=df.index)


def text_codes(s: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Return (code of each row, words) with ``words[codes]`` the text ``s.astype(str)`` gives.

    A categorical column (the reader's choice columns) gives its own codes and categories, so
    no row is turned into text; any other column is factorised once.
    """
    if isinstance(s.dtype, pd.CategoricalDtype):
        codes = s.cat.codes.to_numpy().astype(np.int64)
        words = np.asarray(s.cat.categories.astype(str), dtype=object)
        if (codes < 0).any():  # a missing value: the text astype(str) gives it
            codes = np.where(codes < 0, len(words), codes)
            words = np.append(words, np.asarray(pd.Series([np.nan], dtype=s.dtype).astype(str), dtype=object))
        return codes, words
    codes, uniques = pd.factorize(s.astype(str).to_numpy(dtype=object), use_na_sentinel=False)
    return np.asarray(codes, dtype=np.int64), np.asarray(uniques, dtype=object)


def text_at(codes: np.ndarray, words: np.ndarray) -> pd.Series:
    """Return ``words[codes]`` as a text column of the dtype ``astype(str)`` gives (object, or
    pandas 3's ``str``), each word made once."""
    return pd.Series(pd.Index(np.asarray(words, dtype=object), dtype=object).astype(str)
                     .take(np.asarray(codes, dtype=np.int64)))


def dates(df: pd.DataFrame, name: str = "date") -> pd.Series:
    return pd.to_datetime(col(df, name, pd.NaT), errors="coerce").astype("datetime64[ns]")


def table(programme: Programme, name: str) -> pd.DataFrame:
    """Return the programme's table *name* itself, not a copy: the caller must not modify it."""
    tables = getattr(programme, "tables", {}) or {}
    df = tables.get(name)
    return df if df is not None else pd.DataFrame()


def share(num: float, den: float) -> float | None:
    return None if not den else round(float(num) / float(den), 4)


def as_bool(s: pd.Series) -> pd.Series:
    return s.astype("boolean").fillna(False).astype(bool)


def person_codes(programme: Programme, name: str, rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Return (code of each row, distinct person ids in sorted order) of table *name*'s person
    ids, of the rows selected by *rows* (a mask) when given: ``pd.factorize(ids, sort=True)``,
    read from the person key coded once at load (model.PersonIndex) instead of hashing text."""
    df = table(programme, name)
    persons = getattr(programme, "persons", None)
    if persons is not None and len(persons.codes.get(name, ())) == len(df) and "person_id" in df.columns:
        return persons.factorize(name, rows)
    ids = col(df, "person_id", "").astype(str).to_numpy(dtype=object)
    codes, uniques = pd.factorize(ids if rows is None else ids[rows], sort=True)
    return np.asarray(codes, dtype=np.int64), np.asarray(uniques, dtype=object)


def shared_codes(*columns: Any) -> list[np.ndarray]:
    """Return the code of each value of every column in *columns*, in one code space: the
    values of all of them factorised together in sorted order (equal text, equal code; codes
    sort as the text does). Missing cells count as ``""``."""
    cells = []
    for c in columns:  # (text, categorical or object cells alike)
        v = pd.Series(c).to_numpy(dtype=object, copy=True)
        v[pd.isna(v)] = ""
        cells.append(pd.Series(v, dtype=object).astype(str).to_numpy(dtype=object))
    joined = np.concatenate(cells) if cells else np.array([], dtype=object)
    codes = np.asarray(pd.factorize(joined, sort=True)[0], dtype=np.int64)
    return np.split(codes, np.cumsum([len(c) for c in cells])[:-1].tolist()) if cells else []


def person_keys(programme: Programme, *names: str) -> list[np.ndarray]:
    """Return the person code of every row of each table in *names*, in one code space in which
    codes sort as the ids do (equal id, equal code): the person key coded at load
    (model.PersonIndex) when it covers these tables, else their ids factorised together."""
    got = loaded_person_codes(programme, *names)
    return got if got is not None else shared_codes(*[col(table(programme, n), "person_id", "") for n in names])


def loaded_person_codes(programme: Programme, *names: str) -> list[np.ndarray] | None:
    """Return the person code (model.PersonIndex) of every row of each table in *names*, or None
    when the person key coded at load does not cover them all (or has a missing cell)."""
    persons = getattr(programme, "persons", None)
    if persons is None:
        return None
    got = []
    for n in names:
        df = table(programme, n)
        c = persons.codes.get(n)
        if "person_id" not in df.columns or c is None or len(c) != len(df) or (len(c) and c.min() < 0):
            return None
        got.append(np.asarray(c, dtype=np.int64))
    return got
