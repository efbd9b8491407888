"""The protection and compliance stages joined on integer person codes, against pandas.

Oracle: the plain pandas formulation each step had when it joined, grouped and sorted on the
person id text (left merges, ``groupby(...).sum()/.agg``, ``drop_duplicates``,
``sort_values``), kept here as written then; the integer-keyed steps must give the same
frames, value for value, dtype for dtype, over random tables with empty tables, people
missing from some tables, duplicate rows, blank ids and groups and NaT dates.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from generator import compliance, protection
from generator.frames import loaded_person_codes, person_keys, shared_codes
from generator.inputs.spec import OCTAVE_BANDS
from generator.model import PersonIndex

OCT = [f"oct_{f}" for f in OCTAVE_BANDS]
POOL = ["E001", "E002", "E010", "E1", "e001", "Zz 9", "É3", "E001 ", "E7", "E8"]


class Bare:
    """The parts of a Programme the helpers read: tables and (optionally) the person key."""

    def __init__(self, tables: dict[str, pd.DataFrame], key: bool = True) -> None:
        self.tables = tables
        self.persons = PersonIndex.of(tables) if key else None


def _text(values) -> pd.Series:
    return pd.Series(list(values), dtype=str)


def _dates(rng: np.random.Generator, n: int, nat: float = 0.1) -> np.ndarray:
    d = pd.to_datetime(rng.choice(["2021-01-04", "2021-06-30", "2022-02-01", "2022-12-31", "2023-03-03"], n))
    d = d.to_numpy("datetime64[ns]")
    d[rng.random(n) < nat] = np.datetime64("NaT")
    return d


# ---------------------------------------------------------------------------------------
# oracles: the id-text formulations


def _energy_mean_by_text(df: pd.DataFrame, by: str, cols: list[str], weight: str) -> pd.DataFrame:
    e = np.power(10.0, 0.1 * df[cols].to_numpy(dtype=float)) * df[[weight]].to_numpy(dtype=float)
    tmp = pd.DataFrame(e, columns=cols, index=df.index)
    tmp[by] = df[by].to_numpy()
    tmp["_w"] = df[weight].to_numpy(dtype=float)
    g = tmp.groupby(by, sort=True)
    s = g[cols].sum(min_count=1)
    missing = tmp[cols].isna().groupby(tmp[by]).any()
    w = g["_w"].sum()
    out = 10.0 * np.log10(s.div(w, axis=0))
    return out.mask(missing.reindex(out.index))


def spectra_by_text(noise: pd.DataFrame, people: pd.DataFrame, end: pd.Timestamp | None = None) -> pd.DataFrame:
    base = people[["person_id", "group"]].copy()
    empty = base.assign(spectrum_source="", **{c: np.nan for c in OCT}, la_spec=np.nan,
                        lc_minus_la=np.nan)[["person_id", "spectrum_source"] + OCT + ["la_spec", "lc_minus_la"]]
    if noise.empty:
        return empty
    n = noise.copy() if end is None or "date" not in noise.columns else \
        noise[noise["date"].isna() | (noise["date"] <= end)].copy()
    if n.empty:
        return empty
    for c in OCT + ["lceq", "laeq", "duration_h"]:
        if c not in n.columns:
            n[c] = np.nan
    bands = n[OCT].to_numpy(dtype=float)
    has_bands = ~np.isnan(bands[:, 1:]).any(axis=1)
    n["_la"] = np.where(has_bands, protection.weighted_level(bands, "A"), n["laeq"].to_numpy(dtype=float))
    n["_lc"] = np.where(has_bands, protection.weighted_level(bands, "C"), n["lceq"].to_numpy(dtype=float))
    n.loc[n["_lc"].isna(), "_la"] = np.nan
    n["_has_bands"] = has_bands
    person_group = people.set_index("person_id")["group"]
    pid = n["person_id"] if "person_id" in n.columns else pd.Series("", index=n.index)
    grp = n["group"] if "group" in n.columns else pd.Series("", index=n.index)
    n["_group"] = grp.where(grp != "", pid.map(person_group)).fillna("")
    n["_pid"] = pid.fillna("")

    def agg(sub: pd.DataFrame, by: str) -> pd.DataFrame:
        sub = sub[sub[by] != ""]
        lev = sub[sub["_lc"].notna()]
        cl = _energy_mean_by_text(lev, by, ["_la", "_lc"], "duration_h")
        sp = sub[sub["_has_bands"]]
        ob = _energy_mean_by_text(sp, by, OCT, "duration_h")
        res = ob.join(cl, how="outer")
        res["la_spec"] = res["_la"]
        res["lc_minus_la"] = res["_lc"] - res["_la"]
        for c in OCT:
            if c not in res.columns:
                res[c] = np.nan
        return res[OCT + ["la_spec", "lc_minus_la"]]

    pers = n[(n["kind"] == "personal") & (n["_pid"] != "")] if "kind" in n.columns else n.iloc[:0]
    own = base.join(agg(pers, "_pid"), on="person_id")
    grp_vals = base.join(agg(n, "_group"), on="group")
    use_own = own[["oct_125", "lc_minus_la"]].notna().any(axis=1).to_numpy()
    cols = OCT + ["la_spec", "lc_minus_la"]
    vals = np.where(use_own[:, None], own[cols].to_numpy(dtype=float), grp_vals[cols].to_numpy(dtype=float))
    out = pd.DataFrame(vals, columns=cols, index=base.index)
    have_grp = grp_vals[["oct_125", "lc_minus_la"]].notna().any(axis=1).to_numpy()
    out.insert(0, "spectrum_source", np.where(use_own, "personal", np.where(have_grp, "group", "")))
    out.insert(0, "person_id", base["person_id"].to_numpy())
    return out.reset_index(drop=True)


def current_protectors_by_text(fits: pd.DataFrame, cat: pd.DataFrame, period_end: pd.Timestamp) -> pd.DataFrame:
    cols = ["person_id", "protector_id", "protector_type", "n_protectors", "issue_date", "par", "fit_date"]
    if fits.empty:
        return pd.DataFrame(columns=cols)
    f = fits[(fits["date"].isna()) | (fits["date"] <= period_end)].copy()
    if f.empty:
        return pd.DataFrame(columns=cols)
    f["_d"] = f["date"].astype("datetime64[ns]").fillna(pd.Timestamp("1900-01-01"))
    latest = f.groupby("person_id")["_d"].transform("max")
    cur = f[f["_d"] == latest].drop_duplicates(["person_id", "protector_id"])
    cur = cur.merge(cat, on="protector_id", how="left")
    if "_row" not in cur.columns:
        cur["_row"] = np.arange(len(cur))
    cur["_muff"] = cur["type"].eq("earmuff")
    kinds = cur.groupby("person_id")["_muff"].agg(["any", "all"])
    dual_ids = kinds.index[kinds["any"] & ~kinds["all"]]
    is_dual = cur["person_id"].isin(dual_ids)
    single_rows = cur[~is_dual].sort_values(["person_id", "_row"], kind="stable").drop_duplicates(
        "person_id", keep="last")
    dual_rows = cur[is_dual].sort_values(["person_id", "_muff", "nrr"], ascending=[True, True, False],
                                         kind="stable", na_position="last").drop_duplicates(
        ["person_id", "_muff"], keep="first")
    cur = pd.concat([single_rows, dual_rows])
    cur = cur.sort_values(["person_id", "nrr", "protector_id"], ascending=[True, False, True], kind="stable",
                          na_position="last")
    g = cur.groupby("person_id", sort=True)
    first = cur.drop_duplicates("person_id", keep="first").set_index("person_id").sort_index()
    out = pd.DataFrame(index=first.index)
    out["n_protectors"] = g.size()
    out["protector_id"] = first["protector_id"]
    multi = cur[cur["person_id"].isin(out.index[out["n_protectors"] > 1])]
    if not multi.empty:
        joined = multi.sort_values(["person_id", "protector_id"]).groupby("person_id")["protector_id"].agg("+".join)
        out.loc[joined.index, "protector_id"] = joined
    out["protector_type"] = np.where(out["n_protectors"] > 1, "dual", first["type"].fillna(""))
    out["issue_date"] = first["date"]
    rating_cols = ["nrr", "snr", "h", "m", "l"] + [f"apv_{b}" for b in OCTAVE_BANDS] + ["type"]
    single = out["n_protectors"] == 1
    for c in rating_cols:
        out[c] = first[c].where(single) if c != "nrr" else first[c]
    second = cur[g.cumcount() == 1].set_index("person_id")["nrr"]
    out["nrr_2"] = second.reindex(out.index)
    out["dual_type"] = first["type"]
    pairs = cur[["person_id", "protector_id"]]
    withpar = f[f["par"].notna()].merge(pairs, on=["person_id", "protector_id"], how="inner")
    withpar = withpar.sort_values(["person_id", "_d", "_row"] if "_row" in withpar.columns
                                  else ["person_id", "_d"], kind="stable")
    lastpar = withpar.drop_duplicates("person_id", keep="last").set_index("person_id")
    out["par"] = lastpar["par"].reindex(out.index)
    out["fit_date"] = lastpar["date"].reindex(out.index)
    return out.reset_index()


# ---------------------------------------------------------------------------------------
# random tables


def _people(rng: np.random.Generator, n: int | None = None) -> pd.DataFrame:
    ids = sorted(rng.choice(POOL, int(rng.integers(0, len(POOL) + 1)) if n is None else n, replace=False))
    return pd.DataFrame({"person_id": _text(ids), "group": _text(rng.choice(["G1", "G2", "", "G3"], len(ids)))})


def _noise(rng: np.random.Generator, n: int) -> pd.DataFrame:
    bands = 85 + 10 * rng.standard_normal((n, len(OCT)))
    bands[rng.random((n, len(OCT))) < 0.08] = np.nan
    bands[rng.random(n) < 0.4] = np.nan  # runs with no spectrum
    df = pd.DataFrame(bands, columns=OCT)
    df.insert(0, "duration_h", np.where(rng.random(n) < 0.05, np.nan, rng.choice([1.0, 2.5, 8.0], n)))
    df.insert(0, "lceq", np.where(rng.random(n) < 0.15, np.nan, 88 + 4 * rng.standard_normal(n)))
    df.insert(0, "laeq", np.where(rng.random(n) < 0.1, np.nan, 84 + 4 * rng.standard_normal(n)))
    df.insert(0, "group", _text(rng.choice(["G1", "G2", "", "G4"], n)))
    df.insert(0, "person_id", _text(rng.choice(POOL + ["", "X9"], n)))  # X9: in no people table
    df.insert(0, "kind", _text(rng.choice(["personal", "area"], n)))
    df.insert(0, "date", _dates(rng, n))
    if rng.random() < 0.5:  # missing cells (a frame made in code): blank, as the stage reads them
        df.loc[rng.random(n) < 0.1, "group"] = np.nan
        df.loc[rng.random(n) < 0.1, "person_id"] = np.nan
    if n and rng.random() < 0.5:
        df = pd.concat([df, df.iloc[rng.integers(0, n, 3)]], ignore_index=True)  # duplicate rows
    return df


@pytest.mark.parametrize("seed", range(30))
def test_shared_codes_and_person_keys_are_a_sorted_factorisation(seed):
    """Codes of several columns are one sorted factorisation of their text together; the
    loaded key and the fallback give codes equal exactly where the ids are, ordered as they are."""
    rng = np.random.default_rng(seed)
    cols = [_text(rng.choice(POOL + [""], int(rng.integers(0, 30)))) for _ in range(3)]
    got = shared_codes(*cols)
    want, _ = pd.factorize(np.concatenate([c.to_numpy(dtype=object) for c in cols] + [np.array([], dtype=object)]),
                           sort=True)
    assert np.concatenate(got + [np.array([], dtype=np.int64)]).tolist() == list(want)
    tables = {"people": pd.DataFrame({"person_id": cols[0]}), "noise": pd.DataFrame({"person_id": cols[1]}),
              "protector_fits": pd.DataFrame({"person_id": cols[2]})}
    names = ("people", "protector_fits", "noise")
    loaded = Bare(tables)
    assert loaded_person_codes(loaded, *names) is not None
    changed = Bare(tables)
    changed.tables = {**tables, "noise": tables["noise"].iloc[:-1] if len(tables["noise"]) else
                      pd.DataFrame({"person_id": _text(["E1"])})}  # no longer the rows the key was made of
    assert loaded_person_codes(changed, *names) is None
    for prog in (loaded, changed, Bare(tables, key=False)):
        codes = person_keys(prog, *names)
        ids = np.concatenate([prog.tables[n]["person_id"].to_numpy(dtype=object) for n in names])
        flat = np.concatenate(codes)
        assert len(flat) == len(ids)
        for i in range(len(ids)):
            assert ((flat == flat[i]) == (ids == ids[i])).all()
            assert ((flat < flat[i]) == (ids < ids[i])).all()


@pytest.mark.parametrize("seed", range(40))
def test_energy_mean_matches_the_grouped_text_form(seed):
    """Per key: NaN where any row lacks a value, else 10·log10(Σ w·10^(L/10) / Σ w), as the groupby."""
    rng = np.random.default_rng(seed)
    n, k = int(rng.integers(0, 60)), int(rng.integers(1, 9))
    keys = rng.integers(0, 7, n)
    vals = 80 + 10 * rng.standard_normal((n, k))
    vals[rng.random((n, k)) < 0.1] = np.nan
    w = rng.choice([0.5, 1.0, 8.0, np.nan], n, p=[0.3, 0.3, 0.35, 0.05])
    df = pd.DataFrame(vals, columns=[f"c{j}" for j in range(k)])
    df["key"], df["w"] = keys, w
    want = _energy_mean_by_text(df, "key", [f"c{j}" for j in range(k)], "w").reindex(range(7))
    got = protection._energy_mean(keys, vals, w, 7)
    np.testing.assert_array_equal(got, want.to_numpy(dtype=float))


@pytest.mark.parametrize("seed", range(60))
def test_spectra_match_the_text_keyed_joins(seed):
    """Spectra per person (own personal runs, else the group's) equal the id-keyed merges and
    groupbys, with the codes of a loaded key and with codes made from the ids."""
    rng = np.random.default_rng(seed)
    people = _people(rng)
    noise = _noise(rng, int(rng.integers(0, 80)) if seed % 7 else 0)
    if seed % 5 == 1:
        noise = noise.drop(columns=["kind"])
    if seed % 6 == 2:
        noise = noise.drop(columns=["group"])
    end = None if seed % 4 == 0 else pd.Timestamp("2022-06-30")
    want = spectra_by_text(noise, people, end)
    pd.testing.assert_frame_equal(protection.spectra(noise, people, end), want, check_exact=True)
    prog = Bare({"people": people, "noise": noise})
    pk = person_keys(prog, "people", "noise")
    pd.testing.assert_frame_equal(protection.spectra(noise, people, end, codes=(pk[1], pk[0])), want,
                                  check_exact=True)


def _fits(rng: np.random.Generator, n: int, protectors: list[str], row: bool = True) -> pd.DataFrame:
    df = pd.DataFrame({"person_id": _text(rng.choice(POOL[:6] + ["X9"], n)),
                       "protector_id": _text(rng.choice(protectors, n)),
                       "date": _dates(rng, n, 0.15),
                       "par": np.where(rng.random(n) < 0.5, np.nan, rng.integers(5, 30, n).astype(float))})
    if row:
        df["_row"] = np.arange(2, n + 2, dtype=np.int64)
    if n and rng.random() < 0.5:  # duplicate rows (with their own line numbers)
        df = pd.concat([df, df.iloc[rng.integers(0, n, 3)]], ignore_index=True)
        if row:
            df["_row"] = np.arange(2, len(df) + 2, dtype=np.int64)
    return df


def _catalogue() -> pd.DataFrame:
    rows = []
    for pid, kind, nrr in (("M1", "earmuff", 25.0), ("M2", "earmuff", 30.0), ("P1", "foam_plug", 29.0),
                           ("P2", "premolded_plug", 27.0), ("P3", "canal_cap", np.nan), ("O1", "other", 20.0)):
        r = {"protector_id": pid, "type": kind, "nrr": nrr, "snr": nrr + 3, "h": nrr + 2, "m": nrr, "l": nrr - 4,
             "name": pid}
        for i, f in enumerate(OCTAVE_BANDS):
            r[f"att_{f}"], r[f"sd_{f}"] = 10.0 + 3 * i, 3.0
        rows.append(r)
    return protection.catalogue(pd.DataFrame(rows).astype({"protector_id": str, "type": str, "name": str}))


@pytest.mark.parametrize("seed", range(60))
def test_current_protectors_match_the_text_keyed_form(seed):
    """The latest issue per person (dual pairs, the last row, the latest PAR of a worn protector)
    equals the id-keyed groupby/merge form, with and without the loaded codes."""
    rng = np.random.default_rng(seed)
    cat = _catalogue()
    protectors = ["M1", "M2", "P1", "P2", "P3", "O1", "U9"]  # U9: not in the catalogue
    fits = _fits(rng, int(rng.integers(0, 50)) if seed % 9 else 0, protectors, row=seed % 8 != 3)
    end = pd.Timestamp("2022-06-30") if seed % 3 else pd.Timestamp("2020-01-01")
    want = current_protectors_by_text(fits, cat, end)
    pd.testing.assert_frame_equal(protection.current_protectors(fits, cat, end), want, check_exact=True)
    people = _people(rng)
    pk = person_keys(Bare({"people": people, "protector_fits": fits}), "people", "protector_fits")
    got = protection.current_protectors(fits, cat, end, codes=pk[1])
    if "_pc" in got.columns:  # the person's code, in id order
        assert got["_pc"].is_monotonic_increasing and got["_pc"].is_unique
        got = got.drop(columns=["_pc"])
    pd.testing.assert_frame_equal(got, want, check_exact=True)


@pytest.mark.parametrize("seed", range(30))
def test_people_joined_by_codes_match_the_merges(seed):
    """The people joined with their protectors and spectra by code, and the long table of
    methods, equal the left merges on person_id and the melt/isin/sort form."""
    rng = np.random.default_rng(seed)
    people = _people(rng)
    people["lex_8h"] = 80 + 10 * rng.random(len(people))
    fits = _fits(rng, int(rng.integers(0, 40)), ["M1", "M2", "P1", "P2", "O1"])
    pk = person_keys(Bare({"people": people, "protector_fits": fits}), "people", "protector_fits")
    people["_pc"] = pk[0]
    end = pd.Timestamp("2023-12-31")
    cur = protection.current_protectors(fits, _catalogue(), end, codes=pk[1])
    spec = protection.spectra(pd.DataFrame(), people, end)
    got = protection._join_people(people, cur, spec)
    want = people.merge(cur.drop(columns=["_pc"], errors="ignore"), on="person_id", how="left").merge(
        spec, on="person_id", how="left")
    pd.testing.assert_frame_equal(got, want, check_exact=True)
    lv = pd.DataFrame(np.where(rng.random((len(people), len(protection.METHODS))) < 0.4, np.nan,
                               rng.integers(60, 90, (len(people), len(protection.METHODS)))),
                      columns=list(protection.METHODS))
    gov = protection.governing(lv, ["par", "octave", "hml", "snr", "nrr-c", "nrr-a"])
    out_people = pd.DataFrame({"person_id": people["person_id"], "method": gov["method"]})
    pd.testing.assert_frame_equal(protection._methods(lv, people["person_id"], out_people["method"]),
                                  protection._methods_merged(lv, people, out_people), check_exact=True)


# ---------------------------------------------------------------------------------------
# compliance


@pytest.mark.parametrize("seed", range(40))
def test_runs_are_the_sorted_groups_and_their_first_rows(seed):
    """_runs numbers the (code, value) groups as a sorted groupby does and returns each group's
    first row in group order, as drop_duplicates + a stable sort by the keys."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(0, 50))
    day = 86_400 * 10**9
    pool = [7, -3, 10**15, 0] if seed % 2 else [-400 * day, 0, 3 * day, 20_000 * day]  # dates at midnight
    codes, values = rng.integers(-1, 5, n), rng.choice(pool, n)
    use = codes >= 0
    run, first = compliance._runs(codes, values, use)
    df = pd.DataFrame({"c": codes, "v": values})[use]
    want_run = df.groupby(["c", "v"], sort=True).ngroup()
    assert run[use].tolist() == want_run.tolist() and (run[~use] == -1).all()
    want_first = df.drop_duplicates().sort_values(["c", "v"], kind="mergesort").index
    assert first.tolist() == want_first.tolist()


def _records(rng: np.random.Generator) -> dict[str, pd.DataFrame]:
    n = int(rng.integers(0, 60))
    aud = pd.DataFrame({"person_id": _text(rng.choice(POOL + ["X9", ""], n)), "date": _dates(rng, n),
                        "ear": _text(rng.choice(["L", "R"], n)),
                        "kind": _text(rng.choice(["periodic", "exit", "", "baseline"], n))})
    m = int(rng.integers(0, 40))
    tr = pd.DataFrame({"person_id": _text(rng.choice(POOL + ["X9"], m)), "date": _dates(rng, m)})
    tr.index = rng.permutation(m) + 100  # labels out of order
    if m and rng.random() < 0.6:
        tr = pd.concat([tr, tr.iloc[rng.integers(0, m, 4)]])  # the same training twice
    people = _people(rng).assign(hire_date=pd.Timestamp("2020-01-01"), leave_date=pd.NaT)
    return {"people": people, "audiograms": aud, "training": tr,
            "protector_fits": _fits(rng, int(rng.integers(0, 20)), ["M1", "P1", ""])}


@pytest.mark.parametrize("seed", range(40))
def test_audiogram_and_training_days_match_the_text_keyed_form(seed):
    """One row per person and test date (first kind, exit on either ear) and per person and
    training date, as the groupby and drop_duplicates on the id text give them."""
    rng = np.random.default_rng(seed)
    tables = _records(rng)
    for prog in (Bare(tables), Bare(tables, key=False)):
        a, arows = compliance._audiogram_days(prog)
        aud = tables["audiograms"]
        d = aud[aud["date"].notna()].assign(is_exit=aud["kind"].eq("exit"))
        want = d.groupby(["person_id", "date"], sort=True).agg(kind=("kind", "first"), is_exit=("is_exit", "any"))
        assert a["person_id"].tolist() == want.index.get_level_values(0).tolist()
        assert a["date"].tolist() == want.index.get_level_values(1).tolist()
        assert a["kind"].tolist() == want["kind"].replace("", "periodic").tolist()
        assert a["is_exit"].tolist() == want["is_exit"].tolist()
        assert aud["person_id"].take(arows).tolist() == a["person_id"].tolist()
        t, trows = compliance._training_days(prog)
        tr = tables["training"]
        want_t = pd.DataFrame({"person_id": tr["person_id"].astype(str), "date": tr["date"]}).dropna(
            subset=["date"]).drop_duplicates().sort_values(["person_id", "date"], kind="mergesort")
        pd.testing.assert_frame_equal(t, want_t, check_exact=True)
        assert tr.index.take(trows).tolist() == want_t.index.tolist()


@pytest.mark.parametrize("seed", range(30))
def test_person_keys_from_loaded_codes_match_the_text_codes(seed):
    """PersonKeys made from the codes of the load (binary search) equal those made by coding the
    ids (get_indexer), one person on several rows included."""
    rng = np.random.default_rng(seed)
    tables = _records(rng)
    people = tables["people"]
    if len(people) and seed % 3 == 0:  # one person on two rows
        people = pd.concat([people, people.iloc[[0]]], ignore_index=True)
        tables["people"] = people
    people = people.assign(leave_date=_dates(rng, len(people), 0.6))
    tables["people"] = people
    prog = Bare(tables)
    a, arows = compliance._audiogram_days(prog)
    t, trows = compliance._training_days(prog)
    fits = tables["protector_fits"]
    f = pd.DataFrame({"person_id": fits["person_id"].astype(str), "protector_id": fits["protector_id"].astype(str),
                      "date": fits["date"], "par": fits["par"]})
    loaded = loaded_person_codes(prog, "people", "audiograms", "training", "protector_fits")
    assert loaded is not None
    codes = {"people": loaded[0], "audiograms": loaded[1][arows], "training": loaded[2][trows], "fits": loaded[3]}
    args = (people.assign(person_id=people["person_id"].astype(str)), a, t, f, None, 6.0, 12.0, 12.0)
    got = compliance.PersonKeys.of(compliance.ComplianceInputs(*args, codes=codes))
    want = compliance.PersonKeys.of(compliance.ComplianceInputs(*args))
    pd.testing.assert_frame_equal(got.people, want.people, check_exact=True)
    assert got.ids.tolist() == want.ids.tolist()
    for name in ("person", "audiogram", "training", "fit", "first_audiogram", "first_protector",
                 "first_fit_test", "first_exit"):
        assert getattr(got, name).tolist() == getattr(want, name).tolist(), name


@pytest.mark.parametrize("rule_id", ["osha-1910.95", "eu-2003-10"])
def test_exposure_people_own_figures_match_a_loop_over_people(rule_id):
    """Each person's own figures in exposure._people (grouped on integer person codes) equal a plain loop
    over the people on the id text: the energy mean LEX,8h of their personal measurements within the survey
    interval of their latest one, their highest LCpeak and their first measurement at the duty's start.
    Random measurements with blank and missing ids, people on two rows, ids that differ only in case or space."""
    from generator import exposure, levels as lv
    from generator.rules import load_rule_set

    head = load_rule_set(rule_id)
    hid, years = head.id, 3.0
    end = pd.Timestamp("2025-12-31")
    rng = np.random.default_rng(17)
    for _ in range(120):
        n = int(rng.integers(0, 60))
        ids = rng.choice(POOL + ["", None], size=n).tolist()
        level = np.round(rng.normal(84, 6, n), 1)
        m = pd.DataFrame({
            "kind": rng.choice(["personal", "area"], size=n, p=[0.8, 0.2]),
            "person_id": pd.Series(ids, dtype=object),
            "group": rng.choice(["G1", "G2", ""], size=n),
            "date": pd.Timestamp("2019-01-01") + pd.to_timedelta(rng.integers(0, 2900, n), unit="D"),
            "laeq": level, "lex_8h": level, f"level_{hid}": level, f"dose_{hid}": rng.uniform(10, 300, n),
            "te_h": 8.0, "duration_h": rng.uniform(6, 8, n), "lcpeak": np.round(rng.normal(125, 8, n), 1)})
        people = pd.DataFrame({"person_id": rng.choice(POOL, size=int(rng.integers(1, 12))).tolist(),
                               "group": "G9"})  # (a group without measurements: no group fallback)
        g = pd.DataFrame({"group": ["G9"], "lex_8h": [np.nan], f"level_{hid}": [np.nan], "u_expanded": [np.nan],
                          "max_lcpeak": [np.nan]})
        got = exposure._people(people, m, g, head, end, years)
        ordered = people.sort_values("person_id", kind="stable").reset_index(drop=True)
        assert got["person_id"].tolist() == ordered["person_id"].tolist()
        for i, pid in enumerate(ordered["person_id"]):
            mine = m[(m["kind"] == "personal") & (m["person_id"] == pid) & (m["date"] <= end) & m["laeq"].notna()]
            if mine.empty:
                assert np.isnan(got["lex_8h"].iat[i]) and np.isnan(got["max_lcpeak"].iat[i])
                assert pd.isna(got["first_exposed_date"].iat[i])
                continue
            recent = mine[mine["date"] >= mine["date"].max() - pd.to_timedelta(years * 365.25, unit="D")]
            energy = np.mean([10 ** (v / 10) for v in recent["lex_8h"]])
            assert got["lex_8h"].iat[i] == pytest.approx(10 * np.log10(energy), abs=1e-9)
            assert got["max_lcpeak"].iat[i] == recent["lcpeak"].max()
            hit = mine[exposure.exposed_for(head, "audiometry", mine[f"level_{hid}"], mine["lcpeak"])]
            want = hit["date"].min() if len(hit) else pd.NaT
            assert (pd.isna(want) and pd.isna(got["first_exposed_date"].iat[i])) or got["first_exposed_date"].iat[i] == want
            assert lv.level(lv.energy(got["lex_8h"].iat[i])) == pytest.approx(got["lex_8h"].iat[i])
