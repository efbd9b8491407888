"""Generate the README's reference sections from the declarations in the code.

The programme.yaml table comes from :func:`generator.config.iter_options` and the data
format tables from :data:`generator.inputs.spec.FILES`, so the documentation cannot drift
from what the reader accepts. ``python -m generator.docs_gen README.md`` rewrites the
marked blocks of a markdown file in place; ``--check`` only reports whether they are
current (exit 1 when not).
"""
from __future__ import annotations

import argparse
import datetime as dt
import logging
import re
import sys
from pathlib import Path
from typing import Any, Callable

from .inputs.docs import _cell
from .config import iter_options
from .inputs.spec import FILES, NOISE_LOG, Column, FileSpec

log = logging.getLogger(__name__)

#: Names of the generated blocks and the functions that make them.
BLOCKS: dict[str, Callable[[], str]] = {}

_TYPE_WORDS = {
    "list[str]": "list of text",
    "float | None": "a number or blank",
    "int | None": "a whole number or blank",
    "str | None": "text or blank",
}

_KIND_WORDS = {
    "id": "identifier",
    "text": "text",
    "choice": "choice",
    "date": "date",
    "datetime": "date-time",
    "date_or_year": "date or year",
    "float": "number",
    "int": "whole number",
    "level": "level, dB",
    "hl": "hearing level, dB HL",
    "hours": "hours",
}


def _yaml_value(value: Any) -> str:
    """Return a default as it would be written in programme.yaml."""
    if value is None:
        return "(blank)"
    if isinstance(value, bool):
        return "`true`" if value else "`false`"
    if isinstance(value, dt.date):
        return f"`{value.isoformat()}`"
    if isinstance(value, (list, tuple)):
        return "`[" + ", ".join(str(v) for v in value) + "]`"
    if isinstance(value, str):
        return f"`{value}`" if value else '`""`'
    if isinstance(value, float) and value.is_integer():
        return f"`{value:g}`"
    return f"`{value}`"


def config_markdown() -> str:
    """Return the programme.yaml options as a markdown table."""
    lines = ["| option | type | default | meaning |", "| --- | --- | --- | --- |"]
    for name, type_name, default, doc in iter_options():
        if type_name == "section":
            lines.append(f"| **`{name}`** | section | | {_cell(doc)} |")
            continue
        lines.append(f"| `{name}` | {_cell(_TYPE_WORDS.get(type_name, type_name))} | "
                     f"{_cell(_yaml_value(default))} | {_cell(doc)} |")
    return "\n".join(lines) + "\n"


def _range(col: Column) -> str:
    """Return the accepted range or choices of a column as short text."""
    parts = []
    if col.choices:
        shown = [c for c in col.choices if c]
        parts.append("one of " + ", ".join(f"`{c}`" for c in shown) + (" or blank" if "" in col.choices else ""))
    if col.lo is not None or col.hi is not None:
        lo = "" if col.lo is None else f"{col.lo:g}"
        hi = "" if col.hi is None else f"{col.hi:g}"
        parts.append(f"{'>' if col.lo_open else '>='} {lo}" if col.hi is None else
                     f"{lo}{' (excluded)' if col.lo_open else ''} to {hi}")
    if col.default is not None:
        parts.append(f"default {col.default:g}" if isinstance(col.default, float) else f"default `{col.default}`")
    if col.ref is not None:
        parts.append(f"must match {col.ref[0]}.{col.ref[1]}")
    if col.private:
        parts.append("never on public pages")
    return "; ".join(parts)


def file_markdown(spec: FileSpec) -> str:
    """Return one data file's columns as a markdown section."""
    need = "required" if spec.required else "optional"
    lines = [f"#### `{spec.path}` ({need})", "", spec.doc, "",
             "| column | required | kind | meaning | accepted |", "| --- | --- | --- | --- | --- |"]
    for col in spec.columns:
        lines.append(f"| `{col.name}` | {'yes' if col.required else ''} | "
                     f"{_KIND_WORDS.get(col.kind, col.kind)} | {_cell(col.doc)} | {_cell(_range(col))} |")
    if spec.key:
        lines += ["", "Unique key: " + ", ".join(f"`{k}`" for k in spec.key) + "."]
    return "\n".join(lines) + "\n"


def data_markdown() -> str:
    """Return every data file's declared columns as markdown sections."""
    specs = sorted(FILES, key=lambda s: (not s.required, s.path)) + [NOISE_LOG]
    return "\n".join(file_markdown(s) for s in specs)


BLOCKS["options"] = config_markdown
BLOCKS["data-format"] = data_markdown


def _marker(name: str) -> tuple[str, str]:
    return f"<!-- generated:{name} start -->", f"<!-- generated:{name} end -->"


def render_blocks(text: str) -> str:
    """Return *text* with every marked generated block replaced by its current content."""
    for name, make in sorted(BLOCKS.items()):
        start, end = _marker(name)
        pattern = re.compile(re.escape(start) + r".*?" + re.escape(end), re.S)
        if not pattern.search(text):
            log.warning("no %s block in the document", name)
            continue
        body = make()
        text = pattern.sub(lambda _m: f"{start}\n{body}{end}", text, count=1)
    return text


def main(argv: list[str] | None = None) -> int:
    """Rewrite (or with --check, verify) the generated blocks of a markdown file."""
    ap = argparse.ArgumentParser(prog="python -m generator.docs_gen", description=main.__doc__)
    ap.add_argument("path", type=Path, help="markdown file with generated-block markers")
    ap.add_argument("--check", action="store_true", help="only report whether the blocks are current")
    args = ap.parse_args(argv)
    logging.basicConfig(level=logging.INFO, format="%(message)s")
    old = args.path.read_text(encoding="utf-8")
    new = render_blocks(old)
    if args.check:
        if new != old:
            log.error("%s: generated blocks are out of date (run python -m generator.docs_gen %s)",
                      args.path, args.path)
            return 1
        return 0
    if new != old:
        args.path.write_text(new, encoding="utf-8")
        log.info("%s: generated blocks updated", args.path)
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
