"""Hostile text in every free-text column of every input file is inert on every page.

The payloads are the classic script-tag and attribute-breaking strings (OWASP XSS filter
evasion cheat sheet; common practice for escaping tests). The check: no page contains
them as live markup, in public and restricted builds alike.
"""
from __future__ import annotations

import re
from pathlib import Path

import pandas as pd
import pytest

from generator.demo import write_demo
from generator.inputs.spec import FILES
from tests.conftest import build_fixed

PAYLOADS = ("<script>alert(1)</script>", '"><img src=x onerror=alert(2)>', "<svg onload=alert(3)>")
LIVE_HANDLER = re.compile(r"<[a-zA-Z][^<>]*\son[a-z]+\s*=", re.S)


def _poison(root: Path) -> list[tuple[str, str]]:
    """Put a payload into every text column of every data file; return (file, column) poisoned."""
    poisoned = []
    for spec in FILES:
        path = root / spec.path
        if not path.is_file():
            continue
        df = pd.read_csv(path, dtype=str, keep_default_na=False)
        cols = [c.name for c in spec.columns if c.kind == "text" and c.name in df.columns]
        if not cols or df.empty:
            continue
        for i, col in enumerate(cols):
            payload = PAYLOADS[i % len(PAYLOADS)]
            # every third row, keeping required text non-empty
            df.loc[df.index % 3 == 0, col] = payload + " " + df.loc[df.index % 3 == 0, col]
            poisoned.append((spec.name, col))
        df.to_csv(path, index=False, lineterminator="\n")
    return poisoned


@pytest.mark.parametrize("restricted", [False, True])
def test_payloads_in_every_text_column_are_inert(tmp_path: Path, restricted: bool) -> None:
    root = tmp_path / "prog"
    write_demo(root, people=40, years=2, seed=7)
    poisoned = _poison(root)
    # the demo fills every kind of text column the site shows
    assert {"people", "groups", "noise", "tasks", "protectors"} <= {f for f, _ in poisoned}
    out = tmp_path / "site"
    build_fixed(root, out, restricted=restricted)
    pages = sorted(out.rglob("*.html"))
    assert len(pages) > 10
    shown = 0
    for page in pages:
        text = page.read_text(encoding="utf-8")
        assert "<script>alert" not in text, page
        assert "<svg onload" not in text, page
        assert not LIVE_HANDLER.search(text), (page, LIVE_HANDLER.search(text))
        shown += text.count("&lt;script&gt;alert(1)&lt;/script&gt;") + text.count("\\u003cscript\\u003ealert(1)")
    assert shown > 0, "the poisoned text should still be shown, escaped"
