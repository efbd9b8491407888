"""The README documents every command, option and data column, and stays generated."""
from __future__ import annotations

import re
from pathlib import Path

import pytest

from generator import docs_gen
from generator.config import iter_options
from generator.inputs.spec import FILES, NOISE_LOG

ROOT = Path(__file__).resolve().parent.parent
README = ROOT / "README.md"
CI = ROOT / ".ci" / "run"

#: The command contract of the tool (every one must be documented with its options).
COMMANDS = {
    "new": [],
    "check": ["--strict"],
    "build": ["--out", "--strict", "--restricted"],
    "export": ["--to"],
    "serve": ["--port"],
    "demo": ["--people", "--years", "--seed"],
}


@pytest.fixture(scope="module")
def readme() -> str:
    """Return the README text."""
    return README.read_text(encoding="utf-8")


def _code_blocks(text: str) -> list[str]:
    return re.findall(r"```[a-z]*\n(.*?)```", text, re.S)


def test_readme_documents_every_command(readme: str) -> None:
    missing = [c for c in COMMANDS if f"`hcpsite {c} DIR" not in readme]
    assert not missing, f"README lacks usage of commands: {missing}"
    missing_opts = [f"{c} {o}" for c, opts in COMMANDS.items() for o in opts if f"`{o}" not in readme]
    assert not missing_opts, f"README lacks options: {missing_opts}"


def test_readme_documents_every_cli_subcommand(readme: str) -> None:
    """Every subcommand the real parser accepts is in the README (catches additions)."""
    import argparse

    from generator.cli import make_parser

    parser = make_parser()
    subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    assert subs, "the CLI parser has no subcommands"
    names = sorted(subs[0].choices)
    assert set(COMMANDS) <= set(names), f"CLI lacks contract commands: {sorted(set(COMMANDS) - set(names))}"
    missing = [n for n in names if f"`hcpsite {n}" not in readme]
    assert not missing, f"README lacks CLI subcommands: {missing}"
    undocumented = []
    for n in names:
        for action in subs[0].choices[n]._actions:
            for flag in action.option_strings:
                if flag.startswith("--") and flag != "--help" and f"`{flag}" not in readme:
                    undocumented.append(f"{n} {flag}")
    for action in parser._actions:
        for flag in action.option_strings:
            if flag.startswith("--") and flag != "--help" and f"`{flag}" not in readme:
                undocumented.append(flag)
    assert not undocumented, f"README lacks CLI options: {undocumented}"


def test_readme_documents_every_option(readme: str) -> None:
    names = [name for name, *_ in iter_options()]
    assert len(names) > 20  # the schema really was read
    missing = [n for n in names if f"`{n}`" not in readme]
    assert not missing, f"README lacks programme.yaml options: {missing}"


def test_readme_documents_every_data_column(readme: str) -> None:
    missing = []
    for spec in FILES + (NOISE_LOG,):
        section = readme.split(f"#### `{spec.path}`", 1)
        if len(section) == 1:
            missing.append(spec.path)
            continue
        body = section[1].split("####", 1)[0]
        missing += [f"{spec.path}:{c.name}" for c in spec.columns if f"| `{c.name}` |" not in body]
    assert not missing, f"README lacks data files/columns: {missing}"


def test_readme_holds_the_current_generated_blocks(readme: str) -> None:
    assert docs_gen.config_markdown() in readme, \
        "options table is stale: run python -m generator.docs_gen README.md"
    assert docs_gen.data_markdown() in readme, \
        "data-format block is stale: run python -m generator.docs_gen README.md"
    assert docs_gen.render_blocks(readme) == readme


def test_config_markdown_lists_defaults_and_sections() -> None:
    text = docs_gen.config_markdown()
    rows = [line for line in text.splitlines() if line.startswith("| `") or line.startswith("| **")]
    assert len(rows) == len(iter_options())
    assert "| `privacy.min_group_size` | a whole number | `5` |" in text
    assert "| `audiometry.age_correction` | true or false | `true` |" in text
    assert "| **`period`** | section |" in text
    assert "| `period.start` | a date YYYY-MM-DD | `2025-01-01` |" in text


def test_data_markdown_marks_required_and_private_columns() -> None:
    text = docs_gen.file_markdown(next(s for s in FILES if s.name == "people"))
    assert text.startswith("#### `data/people.csv` (required)")
    assert "| `person_id` | yes | identifier |" in text
    assert "never on public pages" in text.split("| `birth_date` |", 1)[1].split("\n", 1)[0]
    hl = docs_gen.file_markdown(next(s for s in FILES if s.name == "audiograms"))
    assert "| `hl_4000` |  | hearing level, dB HL |" in hl
    assert "-10 to 120" in hl


def test_table_cells_escape_pipes() -> None:
    assert docs_gen._cell("a | b\nc") == "a \\| b c"


def test_render_blocks_replaces_only_marked_text() -> None:
    start, end = docs_gen._marker("options")
    doc = f"before\n{start}\nold text\n{end}\nafter\n"
    out = docs_gen.render_blocks(doc)
    assert out.startswith("before\n") and out.endswith("after\n")
    assert "old text" not in out
    assert docs_gen.config_markdown() in out
    assert docs_gen.render_blocks(out) == out


def test_docs_gen_check_mode(tmp_path: Path) -> None:
    start, end = docs_gen._marker("options")
    p = tmp_path / "doc.md"
    p.write_text(f"{start}\nstale\n{end}\n", encoding="utf-8")
    assert docs_gen.main([str(p), "--check"]) == 1
    assert docs_gen.main([str(p)]) == 0
    assert docs_gen.main([str(p), "--check"]) == 0


def test_ci_runs_the_readme_test_command_verbatim(readme: str) -> None:
    blocks = _code_blocks(readme)
    test_cmd = next(b.strip() for b in blocks if "pytest" in b and "pip install -e" in b)
    build_cmd = next(b.strip() for b in blocks if "hcpsite build site_example" in b and "venv" in b)
    assert test_cmd == "python3 -m venv .venv && .venv/bin/pip install -e '.[test]' && .venv/bin/python -m pytest"
    assert build_cmd == "python3 -m venv .venv && .venv/bin/pip install . && .venv/bin/hcpsite build site_example"
    ci = CI.read_text(encoding="utf-8")
    run_lines = [ln.strip() for ln in ci.splitlines()
                 if not ln.strip().startswith(("#", "echo", "stamp"))]
    assert test_cmd in run_lines, ".ci/run must run the README's test command exactly"
    assert ci.startswith("#!/usr/bin/env bash") and "set -euo pipefail" in ci
    assert re.search(r"^\s*5\)", ci, re.M), ".ci/run must treat pytest's exit 5 (no tests) as a failure"


def test_readme_opens_with_one_paragraph_and_two_commands(readme: str) -> None:
    head = readme.split("\n## ", 1)[0]
    paragraphs = [p for p in head.split("\n\n")[1:] if p.strip()]
    assert not paragraphs[0].startswith(("```", "#")), "README must open with a paragraph"
    assert "audiologist" in paragraphs[0] and "offline" in paragraphs[0]
    assert len(_code_blocks(head)) == 2


GLOSSARY_TERMS = (
    "dose", "TWA", "LEX,8h", "LAeq", "LCpeak", "exchange rate", "criterion level", "threshold level",
    "action level", "action values", "exposure limit value", "PEL", "REL", "STS", "age correction",
    "recordable hearing loss", "baseline audiogram", "NIPTS", "similar exposure group", "NRR", "SNR",
    "HML", "PAR", "derating", "expanded uncertainty",
)


def test_glossary_defines_the_trade_terms() -> None:
    text = (ROOT / "content" / "glossary.md").read_text(encoding="utf-8")
    rows = [ln for ln in text.splitlines() if ln.startswith("| ") and not ln.startswith("| ---")]
    first_cells = " ".join(r.split("|")[1] for r in rows)
    missing = [t for t in GLOSSARY_TERMS if t not in first_cells]
    assert not missing, f"glossary lacks terms: {missing}"
    # every trade term names where it comes from (third cell not blank)
    unsourced = [r.split("|")[1].strip() for r in rows if r.count("|") >= 4 and not r.split("|")[3].strip()]
    assert not unsourced, f"glossary terms without a source: {unsourced}"


def test_methods_overview_states_the_limits() -> None:
    text = (ROOT / "content" / "methods" / "overview.md").read_text(encoding="utf-8")
    assert "not a diagnosis" in text
    assert "audiologist" in text and "noise assessor" in text


def test_methods_page_texts_start_with_overview_and_end_with_glossary() -> None:
    from generator.pages.methods import method_texts

    names = [t["name"] for t in method_texts()]
    assert names[0] == "overview" and names[-1] == "glossary"
    assert "| LEX,8h (daily noise exposure level) |" in method_texts()[-1]["markdown"]


def test_readme_relative_links_resolve(readme: str) -> None:
    links = re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", readme)
    local = [link for link in links if not re.match(r"[a-z]+:", link)]
    missing = [link for link in local if not (ROOT / link).exists()]
    assert not missing, f"README links to missing files: {missing}"
