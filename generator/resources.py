"""Locate the stock templates/ and content/ folders, in a checkout or an installed wheel."""
from __future__ import annotations

from pathlib import Path

_PKG = Path(__file__).resolve().parent


def resource_dir(name: str) -> Path:
    """Return the folder of stock resources *name* ('templates' or 'content')."""
    for candidate in (_PKG / name, _PKG.parent / name):
        if candidate.is_dir():
            return candidate
    raise FileNotFoundError(f"stock folder {name!r} is missing from the installation")


def templates_dir() -> Path:
    """Return the stock jinja2 templates folder."""
    return resource_dir("templates")


def content_dir() -> Path:
    """Return the stock markdown content folder."""
    return resource_dir("content")
