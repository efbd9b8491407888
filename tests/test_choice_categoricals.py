"""Choice columns are loaded as categoricals: declared spelling, "" for blank or rejected cells.

The declared choices below are copied from the data-format reference (docs/data-format.md,
the doc strings of generator/inputs/spec.py), not read from the spec, so a changed
declaration fails here until this table is updated too.
"""
from __future__ import annotations

import datetime as dt
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from generator.findings import ERROR
from generator.inputs.reader import load_programme
from generator.inputs.spec import FILES

from .progkit import make_programme

TODAY = dt.date(2026, 1, 1)

#: (table, column) -> the declared choices, as the data-format reference lists them
DECLARED = {
    ("people", "sex"): ("M", "F", ""),
    ("noise", "kind"): ("personal", "area"),
    ("audiograms", "ear"): ("L", "R"),
    ("audiograms", "kind"): ("baseline", "periodic", "retest", "exit"),
    ("reviews", "ear"): ("L", "R"),
    ("reviews", "decision"): ("revise_baseline", "confirm_shift", "cancel_shift", "not_work_related", "refer"),
    ("protectors", "type"): ("earmuff", "foam_plug", "premolded_plug", "canal_cap", "custom_plug", "other"),
    ("audiometers", "check"): ("functional", "acoustic", "exhaustive", "booth"),
    ("audiometers", "result"): ("pass", "fail", ""),
}

#: the categories each loaded choice column must have: the choices and "", in text order
CATEGORIES = {
    ("people", "sex"): ["", "F", "M"],
    ("noise", "kind"): ["", "area", "personal"],
    ("audiograms", "ear"): ["", "L", "R"],
    ("audiograms", "kind"): ["", "baseline", "exit", "periodic", "retest"],
    ("reviews", "ear"): ["", "L", "R"],
    ("reviews", "decision"): ["", "cancel_shift", "confirm_shift", "not_work_related", "refer", "revise_baseline"],
    ("protectors", "type"): ["", "canal_cap", "custom_plug", "earmuff", "foam_plug", "other", "premolded_plug"],
    ("audiometers", "check"): ["", "acoustic", "booth", "exhaustive", "functional"],
    ("audiometers", "result"): ["", "fail", "pass"],
}


def canonical(table: str, column: str, cell: str) -> str:
    """The loaded text of *cell*: the declared spelling matched without regard to case, else ""."""
    for choice in DECLARED[(table, column)]:
        if choice.lower() == cell.strip().lower():
            return choice
    return ""


def test_every_choice_column_is_listed():
    declared = {(f.name, c.name): c.choices for f in FILES for c in f.columns if c.kind == "choice"}
    assert {k: set(v) for k, v in declared.items()} == {k: set(v) for k, v in DECLARED.items()}


def _mixed_programme(root: Path) -> Path:
    people = [
        {"person_id": "E001", "group": "G1", "sex": "m", "birth_date": "1980"},
        {"person_id": "E002", "group": "G1", "sex": "", "birth_date": "1985"},
        {"person_id": "E003", "group": "G1", "sex": "X", "birth_date": "1990"},
        {"person_id": "E004", "group": "G1", "sex": "F", "birth_date": "1991"},
    ]
    aud = [
        {"person_id": "E001", "date": "2025-02-01", "ear": "l", "kind": "BASELINE", "hl_500": 10},
        {"person_id": "E001", "date": "2025-02-01", "ear": "R", "kind": "", "hl_500": 10},
        {"person_id": "E002", "date": "2025-02-01", "ear": "left", "kind": "Exit", "hl_500": 10},
        {"person_id": "E002", "date": "2025-03-01", "ear": "r", "kind": "yearly", "hl_500": 10},
    ]
    noise = [
        {"measurement_id": "M1", "date": "2025-01-10", "kind": "Personal", "person_id": "E001",
         "duration_h": 8, "laeq": 85},
        {"measurement_id": "M2", "date": "2025-01-10", "kind": "AREA", "group": "G1", "duration_h": 1, "laeq": 80},
        {"measurement_id": "M3", "date": "2025-01-10", "kind": "rest", "group": "G1", "duration_h": 1, "laeq": 80},
    ]
    reviews = [
        {"person_id": "E001", "ear": "L", "date": "2025-04-01", "decision": "Refer"},
        {"person_id": "E001", "ear": "R", "date": "2025-04-01", "decision": "approve"},
    ]
    protectors = [{"protector_id": "P1", "type": "EarMuff", "nrr": 25},
                  {"protector_id": "P2", "type": "plug", "nrr": 20}]
    meters = [{"audiometer_id": "A1", "date": "2025-01-05", "check": "Functional", "result": "PASS"},
              {"audiometer_id": "A1", "date": "2025-01-06", "check": "booth", "result": ""},
              {"audiometer_id": "A1", "date": "2025-01-07", "check": "daily", "result": "ok"}]
    return make_programme(root, {"people.csv": people, "audiograms.csv": aud, "noise.csv": noise,
                                 "reviews.csv": reviews, "protectors.csv": protectors, "audiometers.csv": meters})


@pytest.fixture(scope="module")
def mixed(tmp_path_factory):
    return load_programme(_mixed_programme(tmp_path_factory.mktemp("mixed")), today=TODAY)


def _values(prog, table: str, column: str) -> list[str]:
    return prog.tables[table][column].astype(object).tolist()


@pytest.mark.parametrize("key", sorted(CATEGORIES))
def test_loaded_dtype_and_categories(mixed, key):
    s = mixed.tables[key[0]][key[1]]
    assert isinstance(s.dtype, pd.CategoricalDtype), s.dtype
    assert s.cat.categories.tolist() == CATEGORIES[key]
    assert s.cat.categories.dtype == object
    assert not s.cat.ordered
    assert s.notna().all()


def test_loaded_values(mixed):
    assert _values(mixed, "people", "sex") == ["M", "", "", "F"]
    assert _values(mixed, "audiograms", "ear") == ["L", "R", "", "R"]
    # a blank kind takes the declared default (periodic); an unknown kind is rejected
    assert _values(mixed, "audiograms", "kind") == ["baseline", "periodic", "exit", ""]
    assert _values(mixed, "noise", "kind") == ["personal", "area", ""]
    assert _values(mixed, "reviews", "decision") == ["refer", ""]
    assert _values(mixed, "protectors", "type") == ["earmuff", ""]
    assert _values(mixed, "audiometers", "check") == ["functional", "booth", ""]
    assert _values(mixed, "audiometers", "result") == ["pass", "", ""]


def test_rejected_cells_keep_their_findings(mixed):
    lines = {f.format() for f in mixed.findings if f.level == ERROR}
    for line in (
        "data/people.csv:4:sex: error: 'X' is not one of: M, F",
        "data/audiograms.csv:4:ear: error: 'left' is not one of: L, R",
        "data/audiograms.csv:5:kind: error: 'yearly' is not one of: baseline, periodic, retest, exit",
        "data/noise.csv:4:kind: error: 'rest' is not one of: personal, area",
        "data/reviews.csv:3:decision: error: 'approve' is not one of: revise_baseline, confirm_shift, "
        "cancel_shift, not_work_related, refer",
        "data/protectors.csv:3:type: error: 'plug' is not one of: earmuff, foam_plug, premolded_plug, "
        "canal_cap, custom_plug, other",
        "data/audiometers.csv:4:check: error: 'daily' is not one of: functional, acoustic, exhaustive, booth",
        "data/audiometers.csv:4:result: error: 'ok' is not one of: pass, fail",
    ):
        assert line in lines, "\n".join(sorted(lines))
    # a blank optional choice is no finding; mixed case is accepted silently
    assert not [f for f in mixed.findings if f.column in ("sex", "result") and f.row in (2, 3)
                and f.path in ("data/people.csv", "data/audiometers.csv") and "'X'" not in f.message]


def test_absent_tables_have_the_same_dtype(tmp_path):
    prog = load_programme(make_programme(tmp_path), today=TODAY)
    for (table, column), cats in CATEGORIES.items():
        s = prog.tables[table][column]
        assert isinstance(s.dtype, pd.CategoricalDtype) and s.cat.categories.tolist() == cats, (table, column)


def test_tables_concatenate_as_one_dtype(mixed, tmp_path):
    other = load_programme(make_programme(tmp_path, {"audiograms.csv": [
        {"person_id": "E001", "date": "2025-05-01", "ear": "L", "kind": "retest"}]}), today=TODAY)
    both = pd.concat([mixed.tables["audiograms"], other.tables["audiograms"]], ignore_index=True)
    assert isinstance(both["kind"].dtype, pd.CategoricalDtype)
    assert both["kind"].astype(object).tolist() == ["baseline", "periodic", "exit", "", "retest"]


def test_sorting_by_a_choice_sorts_as_text(mixed):
    s = mixed.tables["audiometers"]["check"]
    assert s.sort_values(kind="mergesort").astype(object).tolist() == sorted(s.astype(object).tolist())


def test_wide_audiograms_ear_is_the_same_categorical(tmp_path):
    text = "person_id,date,kind,hl_500_l,hl_500_r\nE001,2025-02-01,periodic,10,15\nE002,2025-02-01,Exit,,20\n"
    prog = load_programme(make_programme(tmp_path, {"audiograms.csv": text}), today=TODAY)
    a = prog.tables["audiograms"]
    assert [f.format() for f in prog.findings.errors] == []
    assert a["ear"].cat.categories.tolist() == CATEGORIES[("audiograms", "ear")]
    assert a["ear"].astype(object).tolist() == ["L", "R", "R"]
    assert a["kind"].astype(object).tolist() == ["periodic", "periodic", "exit"]


# ---------------------------------------------------------------------------------------
# property: any cells, the loaded text is the canonical spelling worked out here

def _cells(table: str, column: str):
    choices = [c for c in DECLARED[(table, column)] if c]
    cased = st.sampled_from(choices).flatmap(
        lambda c: st.lists(st.booleans(), min_size=len(c), max_size=len(c)).map(
            lambda up: "".join(ch.upper() if u else ch.lower() for ch, u in zip(c, up))))
    junk = st.text(alphabet="abcdefLRMFxyz_", min_size=1, max_size=8)
    return st.one_of(cased, junk, st.just(""))


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(sex=st.lists(_cells("people", "sex"), min_size=1, max_size=12),
       ptype=st.lists(_cells("protectors", "type"), min_size=1, max_size=12),
       ear=st.lists(_cells("audiograms", "ear"), min_size=1, max_size=12))
def test_loaded_text_is_the_canonical_spelling(sex, ptype, ear):
    people = [{"person_id": f"E{i:03d}", "group": "G1", "sex": v} for i, v in enumerate(sex)]
    prots = [{"protector_id": f"P{i}", "type": v} for i, v in enumerate(ptype)]
    aud = [{"person_id": "E000", "date": f"2025-01-{i + 1:02d}", "ear": v} for i, v in enumerate(ear)]
    with tempfile.TemporaryDirectory() as tmp:
        prog = load_programme(make_programme(Path(tmp), {"people.csv": people, "protectors.csv": prots,
                                                         "audiograms.csv": aud}), today=TODAY)
    for table, column, cells in (("people", "sex", sex), ("protectors", "type", ptype), ("audiograms", "ear", ear)):
        s = prog.tables[table][column]
        assert s.cat.categories.tolist() == CATEGORIES[(table, column)]
        assert s.astype(object).tolist() == [canonical(table, column, v) for v in cells]
        # every non-blank cell that is no choice is reported on its line, once
        bad = [i + 2 for i, v in enumerate(cells) if v.strip() and not canonical(table, column, v)]
        rows = sorted(f.row for f in prog.findings if f.path == f"data/{table}.csv" and f.column == column
                      and "is not one of" in f.message)
        assert rows == bad
        codes = s.cat.codes.to_numpy()
        assert codes.dtype == np.int8 and (codes >= 0).all()
