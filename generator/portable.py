"""Numbers written the same in every environment.

numpy's transcendental functions (power, log10, exp) may differ in the last bit between
numpy versions and between the SIMD paths of different processors. A chart's JSON writes
a float with all 17 digits, so such a difference would change the page. Chart data are
therefore rounded to ``DIGITS`` significant digits (far below anything a chart can show)
before they are written; values with fewer digits are unchanged.
"""
from __future__ import annotations

from typing import Any

import numpy as np

#: significant digits kept in chart data
DIGITS = 10


def _round(x: float) -> float:
    return float(f"{x:.{DIGITS}g}")


def round_floats(obj: Any) -> Any:
    """Return a copy of *obj* (nested dicts, lists, tuples, arrays) with floats rounded."""
    if isinstance(obj, float):
        return _round(obj)
    if isinstance(obj, dict):
        return {k: round_floats(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return type(obj)(round_floats(v) for v in obj)
    if isinstance(obj, np.ndarray) and obj.dtype.kind == "f":
        flat = [_round(v) for v in obj.ravel().tolist()]
        return np.asarray(flat, dtype=obj.dtype).reshape(obj.shape)
    if isinstance(obj, np.ndarray) and obj.dtype == object:
        return np.asarray([round_floats(v) for v in obj.ravel().tolist()], dtype=object).reshape(obj.shape)
    return obj
