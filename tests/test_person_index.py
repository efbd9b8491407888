"""The person key coded once at load (model.PersonIndex), against pandas as the oracle.

Oracle: ``pandas.factorize(ids, sort=True)`` over each table's person ids as text, the form
every stage used before the key existed; and the reader's per-table coding for the key and
reference checks (``reader._Codes`` without the shared key).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from generator.findings import Findings
from generator.frames import person_codes
from generator.inputs import reader
from generator.inputs.spec import FILES
from generator.model import PersonIndex

from .progkit import make_programme

SPECS = {f.name: f for f in FILES}


def _tables(rng: np.random.Generator) -> dict[str, pd.DataFrame]:
    pool = np.array(["E001", "E002", "E010", "E1", "", "e001", "Zz 9", "É3", "E001 "], dtype=object)
    return {
        "people": pd.DataFrame({"person_id": pd.Series(rng.choice(pool, 40), dtype=str)}),
        "audiograms": pd.DataFrame({"person_id": pd.Series(rng.choice(pool, 500), dtype=str),
                                    "ear": pd.Series(rng.choice(["L", "R"], 500), dtype=str)}),
        "training": pd.DataFrame({"person_id": rng.choice(pool[:4], 30).astype(object)}),
        "groups": pd.DataFrame({"group": ["G1"]}),
    }


@pytest.mark.parametrize("seed", range(12))
def test_codes_of_any_rows_are_pandas_sorted_factorisation(seed):
    """For random tables and random row selections (masks and positions), PersonIndex.factorize
    returns what pd.factorize(ids, sort=True) returns: the same codes and the same distinct ids."""
    rng = np.random.default_rng(seed)
    tables = _tables(rng)
    persons = PersonIndex.of(tables)
    assert set(persons.codes) == {"people", "audiograms", "training"}
    assert list(persons.ids) == sorted(set().union(*(t["person_id"].astype(str).tolist()
                                                     for n, t in tables.items() if n != "groups")))
    for name in persons.codes:
        ids = tables[name]["person_id"].astype(str)
        for rows in (None, rng.random(len(ids)) < 0.4, np.sort(rng.choice(len(ids), len(ids) // 3)),
                     np.zeros(len(ids), dtype=bool)):
            got_codes, got_ids = persons.factorize(name, rows)
            want_codes, want_ids = pd.factorize(ids if rows is None else ids.to_numpy(dtype=object)[rows],
                                                sort=True)
            assert got_codes.tolist() == list(want_codes)
            assert got_ids.tolist() == list(want_ids)


def test_missing_cell_keeps_the_missing_code():
    """A missing id (NaN in a frame made in code) gets -1, as pandas' factorize gives it."""
    tables = {"people": pd.DataFrame({"person_id": pd.Series(["B", np.nan, "A", "B"], dtype=object)})}
    got_codes, got_ids = PersonIndex.of(tables).factorize("people")
    want_codes, want_ids = pd.factorize(tables["people"]["person_id"].to_numpy(dtype=object), sort=True)
    assert got_codes.tolist() == want_codes.tolist() == [1, -1, 0, 1]
    assert got_ids.tolist() == list(want_ids) == ["A", "B"]


def test_frames_helper_falls_back_to_pandas_without_a_key():
    """A table the key does not cover (a frame built after load) is factorised by pandas itself."""

    class Bare:
        tables = {"audiograms": pd.DataFrame({"person_id": ["b", "a", "b"]})}
    codes, ids = person_codes(Bare(), "audiograms", np.array([True, False, True]))
    assert codes.tolist() == [0, 0] and ids.tolist() == ["b"]


def test_key_and_reference_checks_give_the_same_findings_with_the_shared_key():
    """Duplicate keys and unknown person ids are reported alike whether each table codes its own
    ids (the checks' plain form) or reads the key shared by every table."""
    rng = np.random.default_rng(3)
    n = 400
    people = pd.DataFrame({"person_id": pd.Series([f"E{i:03d}" for i in range(30)], dtype=str),
                           "_row": np.arange(2, 32, dtype=np.int64)})
    aud = pd.DataFrame({
        "person_id": pd.Series(rng.choice([f"E{i:03d}" for i in range(35)] + [""], n), dtype=str),
        "date": pd.to_datetime(rng.choice(["2024-01-02", "2024-06-03", "2025-01-04"], n)).to_numpy("datetime64[ns]"),
        "ear": pd.Series(rng.choice(["L", "R"], n), dtype=str),
        "_row": np.arange(2, n + 2, dtype=np.int64)})
    tables = {"people": people, "audiograms": aud}
    present = {"people": "data/people.csv", "audiograms": "data/audiograms.csv"}

    def lines(codes: reader._Codes | None) -> list[str]:
        findings = Findings()
        sink = reader._Sink(findings, present["audiograms"], aud["_row"].to_numpy())
        reader._check_key(aud, SPECS["audiograms"], sink, codes)
        reader._check_refs(aud, SPECS["audiograms"], sink, tables, present, False, codes)
        return sorted(findings.lines(shown=100_000))

    plain = lines(None)
    shared = lines(reader._Codes(tables, PersonIndex.of(tables)))
    assert any("unknown person_id" in x for x in plain) and any("duplicate" in x for x in plain)
    assert shared == plain


def test_loaded_ids_keep_their_text_and_share_one_object(tmp_path):
    """After load every person_id cell still reads as in the file, and equal ids of all tables
    are one text object (where pandas keeps text as Python objects)."""
    root = make_programme(tmp_path / "p", {
        "people.csv": [{"person_id": "E1", "group": "G1", "hire_date": "2020-01-01"},
                       {"person_id": "E2", "group": "G1", "hire_date": "2020-01-01"}],
        "audiograms.csv": [{"person_id": pid, "date": d, "ear": ear, "hl_1000": 10}
                           for pid in ("E2", "E1") for d in ("2024-01-05", "2025-01-06") for ear in "LR"],
    })
    prog = reader.load_programme(root)
    aud = prog.table("audiograms")["person_id"]
    assert aud.tolist() == ["E2"] * 4 + ["E1"] * 4
    assert prog.persons.ids.tolist() == ["E1", "E2"]
    assert prog.persons.codes["audiograms"].tolist() == [1] * 4 + [0] * 4
    cells = aud.to_numpy(dtype=object)
    if aud.dtype == object or getattr(aud.dtype, "storage", None) == "python":
        people = prog.table("people")["person_id"].to_numpy(dtype=object)
        assert cells[0] is cells[3] and cells[4] is people[0]
