"""The hearing stage's integer-keyed joins checked against pandas' own merges as the oracle.

The stage sorts and joins on integer person codes and takes baseline thresholds by position;
these tests recompute the same joins with pandas ``merge_asof`` and ``merge`` on the id
text (the general-purpose library as an independent implementation) and ask for identical
values, on the built example and on small hand-made cases.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from generator import hearing, norms
from generator.inputs.spec import AUDIO_FREQS


def _oracle_baseline(ag: pd.DataFrame, events: pd.DataFrame) -> pd.DataFrame:
    """Return baseline_date, baseline_source and base_* per row by pandas merges on the id text."""
    left = ag[["person_id", "ear", "date"]].assign(_i=np.arange(len(ag))).sort_values("date", kind="mergesort")
    right = events[["person_id", "ear", "baseline_date", "source"]].copy()
    first = ~right.duplicated(["person_id", "ear"], keep="first")
    later = right["source"].eq("revised by review") & ~first
    # 29 CFR 1910.95(g)(9): a revision applies to the audiograms after the one it names
    right["_eff"] = right["baseline_date"] + pd.to_timedelta(later.astype(np.int64).to_numpy(), unit="ns")
    right = right.sort_values("_eff", kind="mergesort")
    m = pd.merge_asof(left, right, left_on="date", right_on="_eff", by=["person_id", "ear"],
                      direction="backward").set_index("_i").sort_index()
    out = pd.DataFrame({"person_id": ag["person_id"].to_numpy(), "ear": ag["ear"].to_numpy(),
                        "baseline_date": pd.to_datetime(m["baseline_date"].to_numpy()).astype("datetime64[ns]"),
                        "baseline_source": m["source"].fillna("").astype(str).to_numpy()})
    cols = [f"hl_{f}" for f in AUDIO_FREQS] + ["age", "avg_234"]
    base = ag[["person_id", "ear", "date"] + cols].rename(
        columns={c: f"base_{c}" for c in cols} | {"date": "baseline_date"})
    return out.merge(base, on=["person_id", "ear", "baseline_date"], how="left")


def _check_attach(ag: pd.DataFrame, events: pd.DataFrame) -> None:
    got = hearing._attach_baseline(ag.copy(), events)
    want = _oracle_baseline(ag, events)
    assert len(got) == len(ag)
    for c in want.columns:
        # the baseline's thresholds are read by position from the row the baseline names
        g = got[c] if c in got.columns else pd.Series(hearing._base(got, c.removeprefix("base_")))
        if isinstance(g.dtype, pd.CategoricalDtype):  # an enumeration held as a categorical: compare its text
            g = g.astype(want[c].dtype)
        pd.testing.assert_series_equal(g.reset_index(drop=True), want[c].reset_index(drop=True),
                                       check_names=False, check_dtype=False, obj=c)


def test_baseline_attach_matches_merge_on_example(built_example):
    """Every audiogram row of the example gets the same baseline as the pandas merges give."""
    h = built_example.context.results.hearing
    prog = built_example.context.programme
    ag = hearing._prepare(prog)
    assert len(ag) == len(h.audiograms) > 100
    events = h.baseline_history
    assert not events.empty
    _check_attach(ag, events)


def _frame(rows: list[tuple[str, str, str, float]]) -> pd.DataFrame:
    ag = pd.DataFrame(rows, columns=["person_id", "ear", "date", "hl"])
    ag["date"] = pd.to_datetime(ag["date"]).astype("datetime64[ns]")
    ag = ag.sort_values(["person_id", "ear", "date"], kind="mergesort").reset_index(drop=True)
    for f in AUDIO_FREQS:
        ag[f"hl_{f}"] = ag["hl"] + f / 1000.0
    ag["age"] = np.arange(len(ag), dtype=float) + 30
    ag["avg_234"] = ag["hl"]
    ag["_pid"] = pd.factorize(ag["person_id"], sort=True)[0].astype(np.int64)
    return ag.drop(columns="hl")


def test_revision_applies_after_the_audiogram_it_names():
    """A revised baseline takes effect after its own audiogram; earlier ones keep the first (1910.95(g)(9))."""
    ag = _frame([("p1", "L", "2020-01-01", 5), ("p1", "L", "2021-01-01", 20), ("p1", "L", "2022-01-01", 22),
                 ("p1", "R", "2020-01-01", 0), ("p1", "R", "2022-01-01", 10), ("p2", "L", "2019-06-01", 15),
                 ("p10", "L", "2018-01-01", 7)])
    d = pd.to_datetime
    events = pd.DataFrame({
        "person_id": ["p1", "p1", "p1", "p10", "p2"], "ear": ["L", "L", "R", "L", "L"],
        "baseline_date": d(["2020-01-01", "2021-01-01", "2020-01-01", "2018-01-01", "2019-06-01"]).astype(
            "datetime64[ns]"),
        "source": ["baseline kind", "revised by review", "first", "first", "baseline kind"],
        "decided": pd.Series(pd.NaT, index=range(5), dtype="datetime64[ns]")})
    _check_attach(ag, events)
    got = hearing._attach_baseline(ag.copy(), events)
    # p1 left ear: the 2021 test is still compared with the 2020 baseline, the 2022 test with 2021
    p1l = got[(got["person_id"] == "p1") & (got["ear"] == "L")]
    assert p1l["baseline_date"].dt.year.tolist() == [2020, 2020, 2021]


def test_baseline_attach_without_events():
    """No baseline event: every row has no baseline and no baseline thresholds."""
    ag = _frame([("p1", "L", "2020-01-01", 5), ("p2", "R", "2021-01-01", 20)])
    events = pd.DataFrame({"person_id": pd.Series([], dtype=str), "ear": pd.Series([], dtype=str),
                           "baseline_date": pd.Series([], dtype="datetime64[ns]"),
                           "source": pd.Series([], dtype=str),
                           "decided": pd.Series([], dtype="datetime64[ns]")})
    got = hearing._attach_baseline(ag.copy(), events)
    assert got["baseline_date"].isna().all()
    assert np.isnan(hearing._base(got, "hl_4000")).all()


def test_appf_rows_match_the_table_function():
    """The once-indexed App. F lookup gives norms.appf_correction's values (Tables F-1/F-2) at 2/3/4 kHz."""
    rng = np.random.default_rng(7)
    age = rng.uniform(10, 75, 500)
    age[::17] = np.nan
    sex = rng.choice(np.array(["M", "F", "m", "f", "", "X"], dtype=object), 500)
    got = hearing._appf(age, norms._sex_codes(sex))
    for j, f in enumerate(hearing.STS_FREQS):
        np.testing.assert_array_equal(got[:, j], norms.appf_correction(age, f, sex))
    # 29 CFR 1910.95 App. F Table F-1 (males), age 40, 4000 Hz: 14 dB (as 30 CFR 62 Table 62-3)
    assert hearing._appf(np.array([40.0]), norms._sex_codes(np.array(["M"], dtype=object)))[0, 2] == 14


def test_age_from_calendar_parts_matches_age_at():
    """Ages worked out from each distinct birth and test date once equal age_at row by row (leap days too)."""
    rng = np.random.default_rng(11)
    births = pd.Series(pd.to_datetime(["1960-02-29", "1971-12-31", "1985-06-15", None, "2000-03-01"]))
    dates = pd.Series(pd.to_datetime(["2020-02-28", "2020-02-29", "2021-03-01", "2023-12-30", "2024-06-15"]))
    who = rng.integers(0, len(births), 300)
    when = rng.integers(0, len(dates), 300)
    got = hearing._age_years(births.astype("datetime64[ns]"), dates.astype("datetime64[ns]"), who, when)
    want = hearing.age_at(births.iloc[who].reset_index(drop=True), dates.iloc[when].reset_index(drop=True))
    np.testing.assert_array_equal(got, want.to_numpy(float))


def test_prepare_orders_rows_as_lexsort_by_person_ear_date(built_example):
    """The audiogram rows come out in the order numpy's lexsort by (person id text, ear, date) gives,
    rows of one person, ear and day in file order; the per-row date rank matches the sorted distinct dates."""
    prog = built_example.context.programme
    raw = prog.table("audiograms")
    ag = hearing._prepare(prog)
    ear = raw["ear"].astype(str).str.upper()
    date = pd.to_datetime(raw["date"], errors="coerce").astype("datetime64[ns]")
    kept = np.flatnonzero(date.notna().to_numpy() & ear.isin(["L", "R"]).to_numpy())
    ids = raw["person_id"].astype(str).to_numpy(object)[kept]
    uniq, pid = np.unique(ids, return_inverse=True)  # (codes in sorted id order, as the stage's)
    order = np.lexsort((date.to_numpy()[kept], ear.to_numpy(object)[kept] == "R", pid))
    assert ag["_row"].tolist() == raw["_row"].to_numpy()[kept][order].tolist()
    assert (ag["person_id"].to_numpy(object) == ids[order]).all()
    days = np.unique(ag["date"].to_numpy())
    assert (days[ag["_drank"].to_numpy()] == ag["date"].to_numpy()).all()


def test_person_year_means_match_pandas_groupby():
    """The per person-year mean 2/3/4 kHz average and NR count equal pandas' groupby mean and sum over the
    latest row per ear (reindexed to every person-year, so one without such a row is NaN), over random frames."""
    rng = np.random.default_rng(3)
    for _ in range(1500):
        n = int(rng.integers(1, 40))
        pid = np.sort(pd.factorize(rng.integers(0, 6, n))[0])
        year, ear = rng.integers(2018, 2022, n), rng.integers(0, 2, n)
        o = np.lexsort((year, ear, pid))
        pid, year, ear = pid[o], year[o], ear[o]
        avg = np.round(rng.normal(20, 10, n), 1)
        avg[rng.random(n) < 0.2] = np.nan
        ag = pd.DataFrame({"_pid": pid, "year": year, "avg_234": avg, "nr_234": rng.random(n) < 0.3,
                           "sts": rng.random(n) < 0.1, "case": rng.random(n) < 0.05,
                           "is_retest_of_shift": rng.random(n) < 0.2, "_key": pid * 2 + ear,
                           "person_id": [f"P{p}" for p in pid], "group": "G", "ear": np.where(ear == 1, "R", "L")})
        last = hearing._last_per_year(ag)
        got = hearing._per_person_year(ag, last)
        code = pid * (int(year.max()) - int(year.min()) + 1) + (year - int(year.min()))
        want = ag[["avg_234", "nr_234"]].take(last).groupby(code[last], sort=True).agg(
            avg_234=("avg_234", "mean"), n_nr=("nr_234", "sum")).reindex(np.unique(code))
        assert np.array_equal(got["avg_234"].to_numpy(), want["avg_234"].to_numpy(), equal_nan=True)
        assert got["n_nr"].dtype == want["n_nr"].dtype
        assert np.array_equal(got["n_nr"].to_numpy(float), want["n_nr"].to_numpy(float), equal_nan=True)


def test_population_counts_match_pandas_groupby_on_group_and_year():
    """The per group and year counts and means (one integer key per group-year, every person-year counted
    again in 'all') equal pandas' groupby on the group text and the year over the rows plus a copy labelled
    'all', over random person-year frames with missing groups and NaN averages."""
    rng = np.random.default_rng(8)
    for _ in range(300):
        n = int(rng.integers(1, 50))
        avg = np.round(rng.normal(20, 10, n), 1)
        avg[rng.random(n) < 0.2] = np.nan
        within = np.where(rng.random(n) < 0.5, np.round(rng.normal(1, 3, n), 1), np.nan)
        py = pd.DataFrame({"group": pd.Series(rng.choice(["ASM", "WHS", "b", None], size=n).tolist(), dtype=object),
                           "year": rng.integers(2015, 2026, n), "sts": rng.random(n) < 0.1,
                           "recordable": rng.random(n) < 0.05, "avg_234": avg, "n_nr": rng.integers(0, 3, n),
                           "within_change": within})
        got = hearing._population(py)
        both = pd.concat([py, py.assign(group="all")], ignore_index=True)
        want = both.groupby(["group", "year"], sort=True).agg(
            n_tested=("year", "size"), n_sts=("sts", "sum"), n_recordable=("recordable", "sum"),
            mean_avg_234=("avg_234", "mean"), n_avg=("avg_234", "count"), n_nr_excluded=("n_nr", "sum"),
            mean_within_change=("within_change", "mean"), n_within=("within_change", "count")).reset_index()
        assert got["group"].tolist() == want["group"].tolist()
        assert got["year"].tolist() == want["year"].tolist() and got["year"].dtype == want["year"].dtype
        for c in ("n_tested", "n_sts", "n_recordable", "n_avg", "n_nr_excluded", "n_within"):
            assert got[c].tolist() == want[c].astype(int).tolist(), c
        for c in ("mean_avg_234", "mean_within_change"):
            assert np.array_equal(got[c].to_numpy(float), want[c].to_numpy(float), equal_nan=True), c
