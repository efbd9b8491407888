"""Numbers read from text: converting each distinct text once gives what converting every cell gives.

Python's own ``float`` is the oracle for every text it accepts (the reader rejects non-finite
values later, with their own messages).
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

from generator.inputs.reader import _to_float


def _oracle(text: str) -> float:
    if text == "":
        return math.nan
    try:
        return float(text)
    except ValueError:
        return math.nan


def test_many_rows_with_repeated_and_bad_texts():
    texts = ["12.5", "", "abc", "inf", "1e999", "nan", "-3", "7", "0.1", "85.35", "1e-5", "NR"] * 30
    s = pd.Series(texts, dtype=str)
    blank = (s == "").to_numpy()
    got = _to_float(s, blank)
    want = np.array([_oracle(t) for t in texts])
    np.testing.assert_array_equal(got, want)


def test_many_distinct_values_and_a_blank_marker():
    rng = np.random.default_rng(3)
    texts = [f"{v:.3f}" for v in rng.uniform(-10, 140, 400)] + ["NR"] * 400
    s = pd.Series(texts, dtype=str)
    nr = (s == "NR").to_numpy()
    got = _to_float(s, nr)
    np.testing.assert_array_equal(got[:400], np.array([float(t) for t in texts[:400]]))
    assert np.isnan(got[400:]).all()
