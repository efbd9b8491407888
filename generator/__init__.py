"""hcpsite: hearing-conservation programme records -> static offline review site."""
from __future__ import annotations

__version__ = "0.1.0"
