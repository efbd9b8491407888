"""A person's name and raw id typed into any free-text field never reach a public page, chart or export.

The demo programme gets one person's name and raw id written into every text column of
every input file (task names, protector names and ids, locations, notes, topics, ...);
the public build and export are scanned for both. Withholding direct identifiers
(names, staff numbers, birth dates) from published material is common practice.
"""
from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
import pytest

from generator.demo import write_demo
from generator.inputs.spec import FILES
from tests.conftest import FIXED_EPOCH, TEST_KEY, build_fixed, env
from tests.progkit import export_texts


def _inject(root: Path, name: str, pid: str) -> list[tuple[str, str]]:
    """Write "<name> <pid>" into every text column of every data file; the raw id as a protector id."""
    done = []
    for spec in FILES:
        path = root / spec.path
        if not path.is_file():
            continue
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
        cols = [c.name for c in spec.columns if c.kind == "text" and c.name in df.columns and not c.private]
        for col in cols:
            rows = df.index % 2 == 0
            df.loc[rows, col] = f"{name} {pid} " + df.loc[rows, col]
            done.append((spec.name, col))
        if spec.name in ("protectors", "protector_fits") and "protector_id" in df.columns:
            first = sorted(pd.unique(df["protector_id"]))[0]
            df["protector_id"] = df["protector_id"].replace(first, pid)
            done.append((spec.name, "protector_id"))
        df.to_csv(path, index=False, lineterminator="\n")
    return done


def test_names_and_ids_in_every_text_field_are_withheld(tmp_path: Path) -> None:
    root = tmp_path / "prog"
    write_demo(root, people=40, years=2, seed=7)
    people = pd.read_csv(root / "data" / "people.csv", dtype=str, keep_default_na=False)
    person = people[people["name"].ne("")].iloc[0]
    name, pid = person["name"], person["person_id"]
    done = _inject(root, name, pid)
    assert {("tasks", "task"), ("protectors", "name"), ("protectors", "protector_id"), ("noise", "location"),
            ("groups", "description"), ("training", "topic")} <= set(done)
    out = tmp_path / "site"
    report = build_fixed(root, out)
    id_re = re.compile(r"(?<![\w-])" + re.escape(pid) + r"(?![\w-])")
    texts = {p.relative_to(out).as_posix(): p.read_text(encoding="utf-8")
             for p in sorted(out.rglob("*")) if p.is_file() and "assets" not in p.parts}
    from generator.build import prepare
    from generator.export import export_files
    with env(SOURCE_DATE_EPOCH=FIXED_EPOCH, HCPSITE_ID_KEY=TEST_KEY):
        texts.update({f"export/{k}": v for k, v in export_texts(export_files(prepare(root))).items()})
    assert len(texts) > 15
    for rel, text in texts.items():
        assert name not in text, f"{rel} shows the name {name!r}"
        hit = id_re.search(text)
        assert hit is None, f"{rel} shows the raw id: {text[max(0, hit.start() - 80):hit.end() + 40]!r}"
    # the texts around them are still shown, with the code or the withheld marker in their place
    code = report.context.code(pid)
    every = "\n".join(texts.values())
    assert "[name withheld]" in every and code in every


def test_restricted_build_keeps_the_texts(tmp_path: Path) -> None:
    root = tmp_path / "prog"
    write_demo(root, people=40, years=2, seed=7)
    people = pd.read_csv(root / "data" / "people.csv", dtype=str, keep_default_na=False)
    person = people[people["name"].ne("")].iloc[0]
    _inject(root, person["name"], person["person_id"])
    out = tmp_path / "site"
    build_fixed(root, out, restricted=True)
    exposure = "\n".join(p.read_text(encoding="utf-8") for p in sorted(out.rglob("exposure*.html")))
    assert f"{person['name']} {person['person_id']}" in exposure


# ---------------------------------------------------------------------------------------
# the redactor against an independent oracle: one regular expression over every key

def _oracle(subs: dict[str, str]):
    """Return the reference redaction: a regex alternation of every key, longest first, whole words only.

    Python's ``re`` is the oracle: at each position not preceded by a word character or a hyphen
    the longest key followed by no word character or hyphen is replaced, else the whole run of
    word characters and hyphens there is replaced when it is a key (read left to right, a
    replaced text not read again).
    """
    keys = sorted(subs, key=lambda k: (-len(k), k))
    alt = "|".join(re.escape(k) for k in keys)
    pattern = re.compile(r"(?<![\w-])(?:(?:" + alt + r")(?![\w-])|[\w-]+(?![\w-]))")
    return lambda text: pattern.sub(lambda m: subs.get(m.group(0), m.group(0)), text)


def test_redactor_matches_a_regex_over_every_key() -> None:
    import random

    from generator.privacy import redactor

    rng = random.Random(12)
    alphabet = ["a", "b", "n", "A", "é", "1", "2", "-", "_", " ", " ", ".", ",", "'", "/", "(", ")", "\n"]
    for case in range(60):
        ids = sorted({"".join(rng.choice("ab12-_") for _ in range(rng.randint(1, 4))) for _ in range(8)})
        ids = [i for i in ids if i.strip("-_")] or ["a1"]
        names = {"".join(rng.choice(alphabet) for _ in range(rng.randint(1, 7))) for _ in range(10)}
        names |= {"Ann", "Ann B", "Ann B.", "Ann Bn", " Ann", "'a", ".n", "b-a n", "A, 1"}
        names = sorted(n for n in names if n.strip() and n not in ids)
        births = ["1980-05-01", "1980-05-10", "2000-01-02"]
        n = max(len(ids), len(names))
        people = pd.DataFrame({"person_id": ids + [""] * (n - len(ids)), "name": names + [""] * (n - len(names))})
        people["birth_date"] = pd.to_datetime([births[i % 3] if i % 2 else None for i in range(n)])
        code = {p: f"P-{i:04d}" for i, p in enumerate(ids)}.get
        clean = redactor(people, lambda p: code(p) or "P-????")
        subs = {p: code(p) for p in ids if p}
        subs.update((n, "[name withheld]") for n in names if n not in subs)
        for b in sorted(set(people["birth_date"].dropna().dt.strftime("%Y-%m-%d"))):
            subs.setdefault(b, "[date withheld]")
        expected = _oracle(subs)
        pieces = sorted(subs) + alphabet + ["E", "x", "ab", "-a", "1980-05-01x", "1980-05-1"]
        for _ in range(150):
            text = "".join(rng.choice(pieces) for _ in range(rng.randint(0, 12)))
            assert clean(text) == expected(text), (case, text)


def test_walk_redacts_text_inside_lists_of_numbers_and_skips_number_runs() -> None:
    # the walk skips a list made only of numbers (chart coordinates) and reads every other list
    # element by element; the oracle is the redactor applied to each text directly
    from generator.privacy import redact_value

    subs = {"E0001": "P-AAAA", "Ann Bo": "[name withheld]"}
    redact = _oracle(subs)
    value = {"x": [1.5, 2, None, True], "text": [0.5, "E0001 at 85 dB", "Ann Bo"],
             "nested": [[1, 2.5], ["E0001", 3], [4, "E0001"]], "cells": ("E0001", 1.0),
             "n": [float("nan"), 12], "empty": [], "words": ["", "E0001", "", "E0002"]}
    got = redact_value(value, redact)
    assert got == {"x": [1.5, 2, None, True], "text": [0.5, "P-AAAA at 85 dB", "[name withheld]"],
                   "nested": [[1, 2.5], ["P-AAAA", 3], [4, "P-AAAA"]], "cells": ("P-AAAA", 1.0),
                   "n": got["n"], "empty": [], "words": ["", "P-AAAA", "", "E0002"]}
    assert got["n"][1] == 12 and got["n"][0] != got["n"][0]  # NaN kept
    assert got["x"] is not value["x"]  # a copy: the page model's list is not shared with the output
    import numpy as np
    # numpy scalars are not plain numbers: they take the general path and come back unchanged
    mixed = [np.float64(1.0), "E0001"]
    assert redact_value(mixed, redact) == [1.0, "P-AAAA"]


@pytest.mark.parametrize("storage", ["object", "str", "string", "category", "arrow"])
def test_export_redacts_text_columns_whatever_their_dtype(storage: str) -> None:
    # pandas 2 keeps text as Python objects, pandas 3 as its string dtype (Arrow-backed with pyarrow),
    # and choice columns load as categoricals: every one of them is free text to redact on public exports
    from generator.export import PERSON_COLUMNS, redact_texts

    if storage == "arrow":
        pytest.importorskip("pyarrow")
        dtype: object = pd.StringDtype("pyarrow")
    else:
        dtype = {"object": object, "str": pd.StringDtype(), "string": "string", "category": "category"}[storage]
    subs = {"E0001": "P-AAAA", "Ann Bo": "[name withheld]"}
    redact = _oracle(subs)
    person = sorted(PERSON_COLUMNS)[0]
    table = pd.DataFrame({"detail": pd.Series(["retest of E0001", None, "Ann Bo asked", "nothing"], dtype=dtype),
                          person: ["E0001"] * 4, "level": [85.0, 86.0, None, 90.0]})
    before = table.copy()
    out = redact_texts(table, redact)
    assert out["detail"].tolist() == ["retest of P-AAAA", "", "[name withheld]" + " asked", "nothing"]
    assert out[person].tolist() == ["E0001"] * 4  # person columns are coded elsewhere, not here
    assert out["level"].equals(table["level"])
    pd.testing.assert_frame_equal(table, before)  # the input is left as it was
