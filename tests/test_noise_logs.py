"""The reader's noise logs held in one frame (model.NoiseLogs) behave as a dict of one frame per log.

Oracle: pandas itself, a dict of the logs' own frames and ``pd.concat`` of the logs asked for.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from generator.model import NoiseLogs


def _random_logs(rng: np.random.Generator) -> dict[str, pd.DataFrame]:
    logs = {}
    for i in rng.permutation(int(rng.integers(1, 12))):
        n = int(rng.integers(1, 30))
        start = np.datetime64("2024-03-01T07:00:00", "ns") + np.sort(rng.integers(0, 10**6, n)) * 10**9
        logs[f"M{i:03d}"] = pd.DataFrame({"start": start.astype("datetime64[ns]"),
                                          "laeq": np.round(rng.normal(85, 6, n), 1),
                                          "_row": np.arange(2, n + 2, dtype=np.int64)})
    return logs


def test_noise_logs_match_a_dict_of_frames_and_concat():
    rng = np.random.default_rng(5)
    for _ in range(300):
        logs = _random_logs(rng)
        order = list(logs)  # the frame holds the logs in file order, not id order
        frame = pd.concat([logs[m] for m in order], ignore_index=True)
        sizes = np.array([len(logs[m]) for m in order])
        first = np.concatenate(([0], np.cumsum(sizes)[:-1]))
        ids = sorted(logs)
        at = [order.index(m) for m in ids]
        held = NoiseLogs(frame, ids, first[at], (first + sizes)[at])
        assert list(held) == ids and len(held) == len(logs) and all(m in held for m in ids) and "X" not in held
        for m in ids:
            pd.testing.assert_frame_equal(held[m], logs[m], check_exact=True)
        pick = sorted(rng.choice(ids, size=int(rng.integers(1, len(ids) + 1)), replace=False).tolist())
        got_sizes, got_start, got_laeq = held.arrays(pick)
        every = pd.concat([logs[m] for m in pick], ignore_index=True)
        assert got_sizes.tolist() == [len(logs[m]) for m in pick]
        assert np.array_equal(got_start, every["start"].to_numpy("datetime64[ns]").astype(np.int64))
        assert np.array_equal(got_laeq, every["laeq"].to_numpy(float))
