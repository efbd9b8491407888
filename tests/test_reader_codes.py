"""The load's whole-table checks and input digest, computed in their faster forms, against plain oracles.

Oracles: hashlib.sha256 over the files in the order of their relative paths (the digest's
definition), and pandas' DataFrame.duplicated for repeated keys.
"""
from __future__ import annotations

import datetime as dt
import hashlib
from pathlib import Path

import numpy as np
import pandas as pd

from generator.findings import Findings
from generator.inputs import reader
from generator.inputs.spec import FILES

AUDIOGRAMS = next(f for f in FILES if f.name == "audiograms")


def _oracle_digest(root: Path, rels: list[str]) -> str:
    h = hashlib.sha256()
    for rel in sorted(rels):
        data = (root / rel).read_bytes()
        name = rel.encode("utf-8")
        h.update(len(name).to_bytes(8, "big") + name + len(data).to_bytes(8, "big") + data)
    return h.hexdigest()


def test_digest_settled_early_equals_digest_over_sorted_files(tmp_path):
    """Files hashed as soon as nothing sorting before them is read give the digest of all files in path order."""
    files = {"data/people.csv": b"person_id\nP1\n", "data/audiograms.csv": b"a\n1\n", "data/zz.csv": b"z\n",
             "data/noise_logs/B.csv": b"start,laeq\n", "data/noise_logs/A.csv": b"x" * 5000,
             "pages/a.md": b"# A\n", "programme.yaml": b"title: x\n"}
    for rel, data in files.items():
        (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / rel).write_bytes(data)
    findings = Findings()
    inputs = reader._Inputs(tmp_path, findings)
    for rel in ("programme.yaml", "data/people.csv", "data/zz.csv", "data/audiograms.csv"):
        inputs.get(tmp_path / rel)
    inputs.settle("data/noise_logs/")
    assert "data/audiograms.csv" not in inputs.read and "data/people.csv" in inputs.read
    for rel in ("data/noise_logs/A.csv", "data/noise_logs/B.csv"):
        inputs.get(tmp_path / rel, rel, folder_inside=True)
        inputs.settle(rel, through=True)
    inputs.settle("pages/")
    inputs.get(tmp_path / "pages/a.md")
    assert set(inputs.read) == {"programme.yaml", "pages/a.md"}
    assert inputs.digest() == _oracle_digest(tmp_path, list(files))


def test_digest_with_a_file_read_out_of_order(tmp_path):
    """A file sorting before an earlier bound, read after it, still gives the digest over sorted files."""
    files = {"b.csv": b"b\n", "a.csv": b"a\n", "c.csv": b"c\n"}
    for rel, data in files.items():
        (tmp_path / rel).write_bytes(data)
    inputs = reader._Inputs(tmp_path, Findings())
    inputs.get(tmp_path / "b.csv")
    inputs.settle("c")
    inputs.get(tmp_path / "a.csv")
    inputs.get(tmp_path / "c.csv")
    assert inputs.digest() == _oracle_digest(tmp_path, list(files))


def test_load_digest_equals_sorted_files(tmp_path):
    """A whole load (data files, logs, a page) gives the digest over every file read, in path order."""
    (tmp_path / "data" / "noise_logs").mkdir(parents=True)
    (tmp_path / "pages").mkdir()
    files = {
        "data/people.csv": "person_id,group,sex,birth_date,hire_date\nP1,G,F,1980-01-01,2005-01-01\n",
        "data/noise.csv": "measurement_id,date,kind,group,laeq,duration_h\nM1,2020-01-02,area,G,85,8\n",
        "data/training.csv": "person_id,date,topic\nP1,2020-01-01,x\n",
        "data/noise_logs/M1.csv": "start,laeq\n2020-01-02T08:00:00,85.0\n2020-01-02T08:01:00,86.0\n",
        "pages/about.md": "# About\n",
    }
    for rel, text in files.items():
        (tmp_path / rel).write_text(text)
    prog = reader.load_programme(tmp_path, today=dt.date(2026, 1, 1))
    assert prog.digest == _oracle_digest(tmp_path, list(files))


def _oracle_duplicates(df: pd.DataFrame, key: list[str]) -> dict[int, int]:
    """Return {line of a repeated key: line of its first row} with pandas' duplicated."""
    filled = np.ones(len(df), dtype=bool)
    for k in key:
        filled &= (df[k].notna() if df[k].dtype == "datetime64[ns]" else df[k].ne("")).to_numpy()
    sub = df.loc[filled]
    dup = sub.duplicated(key, keep="first").to_numpy()
    first = sub.groupby(key, sort=False)["_row"].transform("first").to_numpy()
    return dict(zip(sub["_row"].to_numpy()[dup].tolist(), first[dup].tolist()))


def test_repeated_keys_found_on_codes_match_duplicated():
    """Repeated (person_id, date, ear) keys found on integer codes are those pandas' duplicated finds."""
    rng = np.random.default_rng(7)
    n = 3000
    df = pd.DataFrame({
        "person_id": pd.Series(rng.choice(["P1", "P2", "P10", "", "p1"], n), dtype=str),
        "date": pd.to_datetime(rng.choice(["2020-01-01", "2021-05-06", "2022-02-02"], n)).to_numpy("datetime64[ns]"),
        "ear": pd.Series(rng.choice(["L", "R", ""], n), dtype=str),
        "_row": np.arange(2, n + 2, dtype=np.int64)})
    df.loc[rng.choice(n, 50), "date"] = pd.NaT
    findings = Findings()
    reader._check_key(df, AUDIOGRAMS, reader._Sink(findings, "data/audiograms.csv", df["_row"].to_numpy()))
    got = {}
    for line in findings.lines(shown=100_000):
        if "duplicate" in line:
            row = int(line.split(":")[1])
            got[row] = int(line.rsplit("first on line ", 1)[1].rstrip(")"))
    expected = _oracle_duplicates(df, ["person_id", "date", "ear"])
    assert expected and got == expected


def test_log_shorter_than_one_time_stamp_is_reported_not_failed(tmp_path):
    """A log whose only row has a blank start (fewer bytes than one time stamp) gets a finding on its row."""
    (tmp_path / "data" / "noise_logs").mkdir(parents=True)
    (tmp_path / "data" / "noise_logs" / "M1.csv").write_bytes(b"start,laeq\n,0")
    findings = Findings()
    noise = pd.DataFrame({"measurement_id": ["M1"]})
    reader._load_logs(tmp_path, reader._Inputs(tmp_path, findings), findings, noise, dt.date(2026, 1, 1))
    lines = list(findings.lines(shown=100))
    assert lines and all("could not be read" not in ln for ln in lines)
    assert any(ln.startswith("data/noise_logs/M1.csv:2:start: error: ") for ln in lines), lines
