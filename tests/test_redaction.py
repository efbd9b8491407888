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
