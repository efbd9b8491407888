"""Hearing-protector adequacy: estimated levels under the protector and their judgement.

Methods (every one the data allow is computed, one governs):

* ``par``: a fitted personal attenuation rating, ``L − PAR`` (common practice);
* ``octave``: ISO 4869-2:2018 octave-band method, Formula (2), APV = m − α·s (Formula (1));
* ``hml``: ISO 4869-2:2018 HML method, Formulas (16)–(18);
* ``snr``: ISO 4869-2:2018 SNR method, Formulas (23)/(24);
* ``nrr-c`` / ``nrr-a``: 29 CFR 1910.95 App. B, ``LC − NRR`` and ``TWA − (NRR − 7)``;
* ``nrr-50``: OSHA's 50 % safety factor, ``TWA − (NRR − 7)/2`` (``LC − NRR/2``). OSHA
  Instruction CPL 02-02-035 App. A applies it when weighing protectors against engineering
  controls and says it is not for the 1910.95(j) adequacy check: it is shown beside the
  verdict, never used for it;
* ``nrr-niosh``: NIOSH 98-126 derating by type (earmuffs 25 %, formable plugs 50 %,
  other plugs 70 % of the NRR), then the 7-dB step on A-weighted data (where NIOSH puts
  that step was not verified: the order is the programme's own setting). NIOSH's 2025
  science policy superseded this derating with individual fit testing, so a fitted PAR
  comes first wherever one is on record.

Two protectors worn together (issued the same day) use the dual-protection rule for the NRR
methods: the higher NRR, its corrections, plus 5 dB. The governing method is the first
available in the rule set's ``protector_methods`` (e.g. ``PAR > octave > HML > SNR > NRR``).

The figures are estimates that support, and do not replace, the judgement of a competent
noise assessor and the fitting of protectors to the person.
"""
from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np
import pandas as pd

from .findings import Finding, WARNING
from .frames import person_keys, shared_codes
from .inputs.spec import OCTAVE_BANDS
from .exposure import ExposureResult
from .model import Programme
from .rules import RuleSet, load_rule_set

log = logging.getLogger(__name__)

# ---------------------------------------------------------------------------------------
# constants (each with its source; PARAMETERS lists them for the methods page)

#: 29 CFR 1910.95 App. B: NRR applied to A-weighted data is reduced by 7 dB.
NRR_A_CORRECTION = 7.0
#: OSHA Instruction CPL 02-02-035 App. A: "apply a safety factor of 50 percent" to the computed
#: attenuation when weighing protectors against engineering controls; "not applicable ... for
#: determining compliance with" 1910.95(j). Shown for that use only, never for the verdict.
OSHA_DERATING = 0.5
#: Dual protection: add this to the higher-rated protector's attenuation (OSHA Technical Manual).
DUAL_ADD = 5.0
#: NIOSH 98-126: share of the NRR subtracted, by protector type (NIOSH abstract of Murphy & Franks
#: 2002: "derating the NRR by 25%, 50% and 70% for earmuffs, formable earplugs, and all other
#: earplugs"); superseded in January 2025 by NIOSH's science policy recommending individual fit
#: testing (AIHA news of 30 Jan 2025).
NIOSH_DERATING: dict[str, float] = {
    "earmuff": 0.25,
    "foam_plug": 0.50,  # formable earplugs
    "premolded_plug": 0.70,
    "canal_cap": 0.70,
    "custom_plug": 0.70,
    "other": 0.70,  # unknown construction: the largest derating (our choice)
}
#: ISO 4869-2:2018 Table 1: α for protection performance 84 % (the usual choice).
ALPHA_84 = 1.0
#: IEC 61672-1:2013 Table 3, A weighting at the octave centres 63 Hz … 8 kHz (dB).
A_OCTAVE = np.array([-26.2, -16.1, -8.6, -3.2, 0.0, 1.2, 1.0, -1.1])
#: IEC 61672-1:2013 Table 3, C weighting at the octave centres 63 Hz … 8 kHz (dB).
C_OCTAVE = np.array([-0.8, -0.2, 0.0, 0.0, 0.0, -0.2, -0.8, -3.0])
#: Reference level of the bands of the level under the protector: the programme's own setting
#: (the bands of EN 458 could not be verified, so none is cited).
EN458_ACTION_LEVEL = 80.0
#: Below this level under the protector a person is flagged as possibly over-protected: the
#: programme's own setting (15 dB below the reference level).
OVERPROTECTION_BELOW = 65.0

METHODS = ("par", "octave", "hml", "snr", "nrr-niosh", "nrr-c", "nrr-a", "nrr-50")
METHOD_LABELS = {
    "par": "fitted PAR",
    "octave": "octave band (ISO 4869-2)",
    "hml": "HML (ISO 4869-2)",
    "snr": "SNR (ISO 4869-2)",
    "nrr-niosh": "NRR, NIOSH 1998 derating (superseded 2025 by fit testing)",
    "nrr-c": "NRR on C-weighted level (App. B)",
    "nrr-a": "NRR on A-weighted level (App. B)",
    "nrr-50": "NRR derated 50 % (OSHA CPL 02-02-035, for weighing engineering controls only)",
}
ADEQUACY = ("adequate", "insufficient", "over-protected", "no protector", "not exposed", "unknown")

_NIOSH_SRC = "NIOSH 98-126 (1998); superseded in Jan 2025 by NIOSH's recommendation of individual fit testing"

PARAMETERS: list[tuple[str, Any, str, str]] = [
    ("A-weighted NRR correction", NRR_A_CORRECTION, "dB", "29 CFR 1910.95 App. B"),
    ("OSHA safety factor when weighing protectors against engineering controls (not for the "
     "adequacy verdict)", OSHA_DERATING * 100, "% of (NRR − 7)", "OSHA Instruction CPL 02-02-035, App. A"),
    ("dual protection: added to the higher NRR", DUAL_ADD, "dB", "OSHA Technical Manual; WAC 296-307-63215"),
    ("NIOSH derating, earmuffs", NIOSH_DERATING["earmuff"] * 100, "% of NRR", _NIOSH_SRC),
    ("NIOSH derating, formable (foam) plugs", NIOSH_DERATING["foam_plug"] * 100, "% of NRR", _NIOSH_SRC),
    ("NIOSH derating, all other plugs", NIOSH_DERATING["premolded_plug"] * 100, "% of NRR",
     _NIOSH_SRC + "; type 'other' treated alike (our choice)"),
    ("α for the assumed protection value (84 %)", ALPHA_84, "", "ISO 4869-2:2018 Table 1"),
    ("HML branch point LC − LA", 2.0, "dB", "ISO 4869-2:2018 Formulas (16)/(17)"),
    ("target under the protector, before and after a shift", "rule set", "dB(A)",
     "protected_target, protected_target_after_sts of the rule set (clauses in its table)"),
    ("order of the methods (the first the data allow governs)", "rule set", "",
     "protector_methods of the rule set"),
    ("reference level of the bands under the protector", EN458_ACTION_LEVEL, "dB(A)",
     f"the programme's own setting: {EN458_ACTION_LEVEL:g} dB(A)"),
    ("possible over-protection below", OVERPROTECTION_BELOW, "dB(A)",
     f"the programme's own setting: {OVERPROTECTION_BELOW:g} dB(A)"),
]

PEOPLE_COLUMNS = ["person_id", "group", "protector_id", "protector_type", "exposure_level",
                  "protected_level", "method", "adequacy", "fit_date", "par"]
ACTION_COLUMNS = ["subject", "subject_type", "kind", "detail", "due_date", "clause"]

# ---------------------------------------------------------------------------------------
# pure methods (array in, array out)


def _arr(x: Any) -> np.ndarray:
    return np.asarray(x, dtype=float)


def iso_round(x: Any) -> np.ndarray:
    """Round to the nearest whole decibel, halves upwards (ISO 4869-2 results)."""
    return np.floor(_arr(x) + 0.5)


def nrr_protected(level: Any, nrr: Any, weighting: str = "A") -> np.ndarray:
    """Return the App. B level under the protector from an A- or C-weighted level and the NRR."""
    corr = NRR_A_CORRECTION if weighting.upper() == "A" else 0.0
    return _arr(level) - (_arr(nrr) - corr)


def osha_derated_protected(level: Any, nrr: Any, weighting: str = "A") -> np.ndarray:
    """Return the level under the protector with OSHA's 50 % derating of the (corrected) NRR."""
    corr = NRR_A_CORRECTION if weighting.upper() == "A" else 0.0
    return _arr(level) - (_arr(nrr) - corr) * OSHA_DERATING


def niosh_derating_factor(ptype: Any) -> np.ndarray:
    """Return the NIOSH share of the NRR to subtract for each protector type (NaN if unknown)."""
    s = pd.Series(np.atleast_1d(np.asarray(ptype, dtype=object)))
    return s.map(NIOSH_DERATING).astype(float).to_numpy()


def niosh_derated_nrr(nrr: Any, ptype: Any) -> np.ndarray:
    """Return the NRR derated by type per NIOSH 98-126."""
    return _arr(nrr) * (1.0 - niosh_derating_factor(ptype))


def niosh_protected(level: Any, nrr: Any, ptype: Any, weighting: str = "A") -> np.ndarray:
    """Return the level under the protector with the NIOSH-derated NRR (App. B correction on A data)."""
    return nrr_protected(level, niosh_derated_nrr(nrr, ptype), weighting)


def dual_nrr_protected(level: Any, nrr_1: Any, nrr_2: Any, weighting: str = "A",
                       derate: float = 1.0) -> np.ndarray:
    """Return the level under plug plus muff: the higher NRR (corrected, derated) plus 5 dB."""
    corr = NRR_A_CORRECTION if weighting.upper() == "A" else 0.0
    top = np.fmax(_arr(nrr_1), _arr(nrr_2))
    return _arr(level) - ((top - corr) * derate + DUAL_ADD)


def snr_protected(lc: Any, snr: Any) -> np.ndarray:
    """Return the ISO 4869-2 SNR level under the protector, L'A = LC − SNR."""
    return _arr(lc) - _arr(snr)


def hml_pnr(la: Any, lc: Any, h: Any, m: Any, l: Any) -> np.ndarray:
    """Return the ISO 4869-2 predicted noise level reduction PNR from LA, LC and H, M, L."""
    d = _arr(lc) - _arr(la)
    h, m, l = _arr(h), _arr(m), _arr(l)
    return np.where(d <= 2.0, m - (h - m) / 4.0 * (d - 2.0), m - (m - l) / 8.0 * (d - 2.0))


def hml_protected(la: Any, lc: Any, h: Any, m: Any, l: Any) -> np.ndarray:
    """Return the ISO 4869-2 HML level under the protector, L'A = LA − PNR."""
    return _arr(la) - hml_pnr(la, lc, h, m, l)


def apv(mean: Any, sd: Any, alpha: float = ALPHA_84) -> np.ndarray:
    """Return the assumed protection value APV = m − α·s per band (ISO 4869-2 Formula (1))."""
    return _arr(mean) - alpha * _arr(sd)


def _band_sum(bands: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Energy-sum rows of band levels plus weights; NaN at 63 Hz is skipped, elsewhere it propagates."""
    b = np.atleast_2d(bands) + weights
    e = np.power(10.0, 0.1 * b)
    e63 = np.nan_to_num(e[:, 0], nan=0.0)
    rest = e[:, 1:].sum(axis=1)  # NaN if any 125 Hz … 8 kHz band is missing
    return 10.0 * np.log10(e63 + rest)


def weighted_level(bands: Any, weighting: str = "A") -> np.ndarray:
    """Return the A- or C-weighted total of rows of octave-band levels 63 Hz … 8 kHz."""
    w = A_OCTAVE if weighting.upper() == "A" else C_OCTAVE
    return _band_sum(_arr(bands), w)


def octave_protected(bands: Any, apv_bands: Any) -> np.ndarray:
    """Return the ISO 4869-2 octave-band L'A (Formula (2)); 63 Hz is left out where either lacks it."""
    b = np.atleast_2d(_arr(bands))
    a = np.atleast_2d(_arr(apv_bands))
    b, a = np.broadcast_arrays(b, a)
    b = b.copy()
    b[:, 0] = np.where(np.isnan(a[:, 0]), np.nan, b[:, 0])
    a0 = np.nan_to_num(a[:, :1], nan=0.0)
    return _band_sum(b - np.concatenate([a0, a[:, 1:]], axis=1), A_OCTAVE)


def en458_band(protected: Any, action_level: float = EN458_ACTION_LEVEL) -> np.ndarray:
    """Return the band of each level under the protector relative to *action_level*.

    The bands (above the level: insufficient; 0-5 dB below: acceptable; 5-10: good; 10-15:
    acceptable; more than 15: too high) are the programme's own setting.
    """
    p = _arr(protected)
    conds = [np.isnan(p), p > action_level, p > action_level - 5, p > action_level - 10,
             p > action_level - 15]
    labels = ["", "insufficient", "acceptable", "good", "acceptable"]
    return np.select(conds, labels, default="too high").astype(object)


# ---------------------------------------------------------------------------------------
# tables


def _energy_mean(keys: np.ndarray, values: np.ndarray, weight: np.ndarray, n: int) -> np.ndarray:
    """Return per key 0..n-1 the weight-weighted energy mean of each column of *values* (rows
    of *keys*): NaN where any row of the key lacks a value, and for a key without rows."""
    out = np.full((n, values.shape[1]), np.nan)
    if len(keys) == 0:
        return out
    e = np.power(10.0, 0.1 * values) * weight[:, None]
    # the sums are pandas' grouped sums (compensated), as the id-keyed groupby made them
    sums = pd.DataFrame(np.column_stack([e, weight])).groupby(keys, sort=True).sum()
    at = sums.index.to_numpy(dtype=np.int64)
    s = sums.to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out[at] = 10.0 * np.log10(s[:, :-1] / s[:, -1:])
    for j in range(values.shape[1]):
        out[np.bincount(keys, weights=np.isnan(e[:, j]), minlength=n) > 0, j] = np.nan
    return out


def spectra(noise: pd.DataFrame, people: pd.DataFrame, end: pd.Timestamp | None = None, *,
            codes: tuple[np.ndarray, np.ndarray] | None = None) -> pd.DataFrame:
    """Return per person the octave spectrum and LC − LA to use (own personal runs, else the group's).

    Runs dated after *end* are left out. *codes*: the person code of each row of *noise* and
    of *people* in one code space (frames.person_keys); made from the ids when not given.

    Columns: person_id, spectrum_source ('personal' | 'group' | ''), oct_63 … oct_8000,
    la_spec, lc_minus_la; one row per row of *people*, in its order.
    """
    oct_cols = [f"oct_{f}" for f in OCTAVE_BANDS]
    base = people[["person_id", "group"]]
    empty = base.assign(spectrum_source="", **{c: np.nan for c in oct_cols}, la_spec=np.nan,
                        lc_minus_la=np.nan)[["person_id", "spectrum_source"] + oct_cols
                                            + ["la_spec", "lc_minus_la"]]
    if noise.empty:
        return empty
    rows = np.ones(len(noise), dtype=bool) if end is None or "date" not in noise.columns else \
        (noise["date"].isna() | (noise["date"] <= end)).to_numpy(dtype=bool)
    if not rows.any():
        return empty
    m = int(rows.sum())

    def num(c: str) -> np.ndarray:
        return noise[c].to_numpy(dtype=float)[rows] if c in noise.columns else np.full(m, np.nan)

    bands = np.column_stack([num(c) for c in oct_cols])
    has_bands = ~np.isnan(bands[:, 1:]).any(axis=1)
    lc = np.where(has_bands, weighted_level(bands, "C"), num("lceq"))
    la = np.where(has_bands, weighted_level(bands, "A"), num("laeq"))
    la[np.isnan(lc)] = np.nan
    dur = num("duration_h")
    blank = pd.Series("", index=noise.index, dtype=object)
    pid = (noise["person_id"] if "person_id" in noise.columns else blank).fillna("").to_numpy(dtype=object)[rows]
    if codes is None:
        made = shared_codes(noise["person_id"] if "person_id" in noise.columns else blank, base["person_id"])
        codes = (made[0], made[1])
    ncode, pcode = np.asarray(codes[0], dtype=np.int64)[rows], np.asarray(codes[1], dtype=np.int64)
    size = int(max(ncode.max(initial=-1), pcode.max(initial=-1))) + 1
    # a run without a group counts for the group of its person (people of *people* only)
    group_of = np.full(size, "", dtype=object)
    pgroup = base["group"].to_numpy(dtype=object, copy=True)
    pgroup[pd.isna(pgroup)] = ""
    group_of[pcode] = pgroup
    grp = (noise["group"] if "group" in noise.columns else blank).to_numpy(dtype=object)[rows]
    grp = np.where(grp == "", group_of[ncode], grp)
    grp[pd.isna(grp)] = ""
    gcode, pgcode = shared_codes(grp, base["group"])
    ng = int(max(gcode.max(initial=-1), pgcode.max(initial=-1))) + 1

    def agg(sub: np.ndarray, keys: np.ndarray, n: int) -> np.ndarray:
        lev = sub & ~np.isnan(lc)
        cl = _energy_mean(keys[lev], np.column_stack([la, lc])[lev], dur[lev], n)
        sp = sub & has_bands
        ob = _energy_mean(keys[sp], bands[sp], dur[sp], n)
        return np.column_stack([ob, cl[:, 0], cl[:, 1] - cl[:, 0]])

    kind = noise["kind"].eq("personal").to_numpy(dtype=bool)[rows] if "kind" in noise.columns \
        else np.zeros(m, dtype=bool)
    by_person = agg(kind & (pid != ""), ncode, size)
    by_group = agg(grp != "", gcode, ng)
    own, grp_vals = by_person[pcode], by_group[pgcode]
    i125, ilc = oct_cols.index("oct_125"), len(oct_cols) + 1
    use_own = ~(np.isnan(own[:, i125]) & np.isnan(own[:, ilc]))
    cols = oct_cols + ["la_spec", "lc_minus_la"]
    vals = np.where(use_own[:, None], own, grp_vals)
    out = pd.DataFrame(vals, columns=cols, index=base.index)
    have_grp = ~(np.isnan(grp_vals[:, i125]) & np.isnan(grp_vals[:, ilc]))
    out.insert(0, "spectrum_source", np.where(use_own, "personal", np.where(have_grp, "group", "")))
    out.insert(0, "person_id", base["person_id"].to_numpy())
    return out.reset_index(drop=True)


def catalogue(protectors: pd.DataFrame) -> pd.DataFrame:
    """Return the protector catalogue with derated values by method and the octave APVs."""
    p = protectors.copy()
    for c in ["nrr", "snr", "h", "m", "l"] + [f"{k}_{f}" for k in ("att", "sd") for f in OCTAVE_BANDS]:
        if c not in p.columns:
            p[c] = np.nan
    if "name" not in p.columns:
        p["name"] = ""
    out = p[["protector_id", "type", "name", "nrr", "snr", "h", "m", "l"]].copy()
    nrr = p["nrr"].to_numpy(dtype=float)
    out["nrr_a"] = nrr - NRR_A_CORRECTION
    out["nrr_osha_50"] = (nrr - NRR_A_CORRECTION) * OSHA_DERATING
    out["niosh_factor"] = niosh_derating_factor(p["type"].to_numpy()) if len(p) else np.array([])
    out["nrr_niosh"] = niosh_derated_nrr(nrr, p["type"].to_numpy()) if len(p) else np.array([])
    for f in OCTAVE_BANDS:
        out[f"apv_{f}"] = apv(p[f"att_{f}"], p[f"sd_{f}"])  # both mean and SD are needed
    apv_cols = [f"apv_{f}" for f in OCTAVE_BANDS]
    out["has_octave"] = out[apv_cols[1:]].notna().all(axis=1)
    return out.sort_values("protector_id", kind="stable").reset_index(drop=True)


def current_protectors(fits: pd.DataFrame, cat: pd.DataFrame, period_end: pd.Timestamp, *,
                       codes: np.ndarray | None = None) -> pd.DataFrame:
    """Return per person the protector(s) of the latest issue up to *period_end* and the PAR to use.

    Columns: person_id, protector_id ('A+B' when two are worn together), protector_type
    ('dual' then), n_protectors, issue_date, par, fit_date, and the ratings of a single
    protector (nrr, snr, h, m, l, apv_*), with nrr_2 the second NRR of a dual pair; one row
    per person, in person id order. *codes*: the person code of each row of *fits* (codes
    sort as the ids do, frames.person_keys); made from the ids when not given. With codes,
    the frame has the person's code too, in ``_pc``.
    """
    cols = ["person_id", "protector_id", "protector_type", "n_protectors", "issue_date", "par", "fit_date"]
    if fits.empty:
        return pd.DataFrame(columns=cols)
    keep = ((fits["date"].isna()) | (fits["date"] <= period_end)).to_numpy(dtype=bool)
    if not keep.any():
        return pd.DataFrame(columns=cols)
    coded = codes is not None
    pc = (np.asarray(codes, dtype=np.int64) if coded else shared_codes(fits["person_id"])[0])[keep]
    # the person is grouped and sorted by its integer code (in id order), never by its text
    f = fits.loc[keep, [c for c in ("person_id", "protector_id", "date", "par", "_row") if c in fits.columns]].copy()
    f["_pc"] = pc
    d = f["date"].to_numpy(dtype="datetime64[ns]").copy()
    d[np.isnat(d)] = np.datetime64("1900-01-01", "ns")
    f["_d"] = d
    latest = np.full(int(pc.max()) + 1, np.iinfo(np.int64).min, dtype=np.int64)
    np.maximum.at(latest, pc, d.view(np.int64))
    # protector ids coded too, in sorted order (a missing one last, as the sorts put it)
    prc, prot_ids = pd.factorize(f["protector_id"].to_numpy(dtype=object), sort=True, use_na_sentinel=False)
    f["_pr"] = prc
    cur = f[d.view(np.int64) == latest[pc]].drop_duplicates(["_pc", "_pr"])
    cat_ids = pd.Index(cat["protector_id"])
    if cat_ids.is_unique and not (set(cur.columns) & set(cat.columns) - {"protector_id"}):
        at = cat_ids.get_indexer(prot_ids)[cur["_pr"].to_numpy()]  # the left merge on protector_id
        cur = pd.concat([cur.reset_index(drop=True), cat.drop(columns=["protector_id"]).reset_index(
            drop=True).reindex(at).reset_index(drop=True)], axis=1)
    else:
        cur = cur.merge(cat, on="protector_id", how="left")
    if "_row" not in cur.columns:
        cur["_row"] = np.arange(len(cur))
    # an earmuff and a plug issued together are worn together (dual); otherwise the last row counts
    cur["_muff"] = cur["type"].eq("earmuff").to_numpy(dtype=bool)
    kinds = cur.groupby("_pc")["_muff"].agg(["any", "all"])
    dual_ids = kinds.index[kinds["any"] & ~kinds["all"]]
    is_dual = cur["_pc"].isin(dual_ids)
    single_rows = cur[~is_dual].sort_values(["_pc", "_row"], kind="stable").drop_duplicates(
        "_pc", keep="last")
    dual_rows = cur[is_dual].sort_values(["_pc", "_muff", "nrr"], ascending=[True, True, False],
                                         kind="stable", na_position="last").drop_duplicates(
        ["_pc", "_muff"], keep="first")
    cur = pd.concat([single_rows, dual_rows])
    cur = cur.sort_values(["_pc", "nrr", "_pr"], ascending=[True, False, True], kind="stable",
                          na_position="last")
    g = cur.groupby("_pc", sort=True)
    first = cur.drop_duplicates("_pc", keep="first").set_index("_pc").sort_index()
    out = pd.DataFrame(index=first.index)
    out["person_id"] = first["person_id"]
    out["n_protectors"] = g.size()
    out["protector_id"] = first["protector_id"]
    multi = cur[cur["_pc"].isin(out.index[out["n_protectors"] > 1])]
    if not multi.empty:  # rare: two protectors worn together
        joined = multi.sort_values(["_pc", "_pr"]).groupby("_pc")["protector_id"].agg("+".join)
        out.loc[joined.index, "protector_id"] = joined
    out["protector_type"] = np.where(out["n_protectors"] > 1, "dual", first["type"].fillna(""))
    out["issue_date"] = first["date"]
    rating_cols = ["nrr", "snr", "h", "m", "l"] + [f"apv_{b}" for b in OCTAVE_BANDS] + ["type"]
    single = out["n_protectors"] == 1
    for c in rating_cols:
        out[c] = first[c].where(single) if c != "nrr" else first[c]
    second = cur[g.cumcount() == 1].set_index("_pc")["nrr"]
    out["nrr_2"] = second.reindex(out.index)
    out["dual_type"] = first["type"]
    # PAR: the latest fit test with a PAR of a protector currently worn
    n_pr = len(prot_ids) + 1
    worn = np.isin(f["_pc"].to_numpy() * n_pr + prc, cur["_pc"].to_numpy() * n_pr + cur["_pr"].to_numpy())
    withpar = f[f["par"].notna().to_numpy() & worn]
    withpar = withpar.sort_values(["_pc", "_d", "_row"] if "_row" in withpar.columns
                                  else ["_pc", "_d"], kind="stable")
    lastpar = withpar.drop_duplicates("_pc", keep="last").set_index("_pc")
    out["par"] = lastpar["par"].reindex(out.index)
    out["fit_date"] = lastpar["date"].reindex(out.index)
    out = out.set_index("person_id").reset_index()
    if coded:
        out["_pc"] = first.index.to_numpy()
    return out


def protected_levels(df: pd.DataFrame) -> pd.DataFrame:
    """Return a wide frame (one column per method) of levels under the protector.

    *df* has exposure_level (A-weighted TWA or LEX,8h), lc_minus_la, la_spec, oct_*, and the
    protector columns of :func:`current_protectors`.
    """
    L = df["exposure_level"].to_numpy(dtype=float)
    d = df["lc_minus_la"].to_numpy(dtype=float)
    lc = L + d
    nrr = df["nrr"].to_numpy(dtype=float)
    nrr2 = df["nrr_2"].to_numpy(dtype=float) if "nrr_2" in df.columns else np.full(len(df), np.nan)
    dual = df["n_protectors"].to_numpy(dtype=float) > 1
    ptype = df["type"].fillna("").to_numpy(dtype=object)
    out = pd.DataFrame(index=df.index)
    out["par"] = L - df["par"].to_numpy(dtype=float)
    oct_cols = [f"oct_{f}" for f in OCTAVE_BANDS]
    apv_cols = [f"apv_{f}" for f in OCTAVE_BANDS]
    under = octave_protected(df[oct_cols].to_numpy(dtype=float), df[apv_cols].to_numpy(dtype=float))
    la_b = weighted_level(df[oct_cols].to_numpy(dtype=float), "A")
    out["octave"] = iso_round(L + under - la_b)
    out["hml"] = iso_round(hml_protected(L, lc, df["h"], df["m"], df["l"]))
    out["snr"] = iso_round(snr_protected(lc, df["snr"]))
    dual_type = df["dual_type"].fillna("").to_numpy(dtype=object) if "dual_type" in df.columns else ptype
    niosh_single = niosh_protected(L, nrr, ptype, "A")
    niosh_nrr_1 = niosh_derated_nrr(nrr, dual_type)
    niosh_c = np.where(np.isnan(lc), np.nan, nrr_protected(lc, niosh_derated_nrr(nrr, ptype), "C"))
    niosh_single = np.where(np.isnan(niosh_c), niosh_single, niosh_c)
    niosh_dual = np.where(np.isnan(lc), dual_nrr_protected(L, niosh_nrr_1, np.nan, "A"),
                          dual_nrr_protected(lc, niosh_nrr_1, np.nan, "C"))
    out["nrr-niosh"] = np.where(dual, niosh_dual, niosh_single)
    out["nrr-c"] = np.where(dual, dual_nrr_protected(lc, nrr, nrr2, "C"), nrr_protected(lc, nrr, "C"))
    out["nrr-a"] = np.where(dual, dual_nrr_protected(L, nrr, nrr2, "A"), nrr_protected(L, nrr, "A"))
    out["nrr-50"] = np.where(dual, dual_nrr_protected(L, nrr, nrr2, "A", OSHA_DERATING),
                             osha_derated_protected(L, nrr, "A"))
    return out


def governing(levels: pd.DataFrame, order: Iterable[str] = ("par", "octave", "hml", "snr", "nrr-c", "nrr-a")
              ) -> pd.DataFrame:
    """Return (method, protected_level) of the first available method in *order* (the rule set's)."""
    order = list(order)
    vals = levels[order].to_numpy(dtype=float)
    ok = ~np.isnan(vals)
    idx = np.where(ok.any(axis=1), ok.argmax(axis=1), -1)
    level = np.where(idx >= 0, vals[np.arange(len(vals)), np.clip(idx, 0, None)], np.nan)
    method = np.where(idx >= 0, np.array(order, dtype=object)[np.clip(idx, 0, None)], "")
    return pd.DataFrame({"method": method, "protected_level": level}, index=levels.index)


def targets(person_ids: Iterable[str], rules: RuleSet, sts_people: set[str] | None = None) -> np.ndarray:
    """Return the target level under the protector for each person (lower after an STS)."""
    base = rules.protected_target
    if base is None:
        base = rules.limit_value if rules.limit_value is not None else np.nan
    after = rules.protected_target_after_sts if rules.protected_target_after_sts is not None else base
    ids = pd.Series(person_ids.tolist() if hasattr(person_ids, "tolist") else list(person_ids), dtype=object)
    sts = ids.isin(sorted(sts_people or ()))
    return np.where(sts.to_numpy(), float(after), float(base))


def judge(people: pd.DataFrame, rules: RuleSet, sts_people: set[str] | None = None,
          over_below: float = OVERPROTECTION_BELOW) -> pd.DataFrame:
    """Return *people* with target, after_sts and adequacy (re)judged; the hearing stage may re-apply it.

    *people* needs person_id, exposed, protector_id and protected_level.
    """
    out = people.copy()
    out["after_sts"] = out["person_id"].isin(sorted(sts_people or ()))
    out["target"] = targets(out["person_id"], rules, sts_people)
    p = out["protected_level"].to_numpy(dtype=float)
    t = out["target"].to_numpy(dtype=float)
    exposed = out["exposed"].fillna(False).astype(bool).to_numpy()
    has_prot = (out["protector_id"].fillna("") != "").to_numpy()
    conds = [~exposed, ~has_prot, np.isnan(p) | np.isnan(t), p > t, p < over_below]
    labels = ["not exposed", "no protector", "unknown", "insufficient", "over-protected"]
    out["adequacy"] = np.select(conds, labels, default="adequate").astype(object)
    out["en458"] = en458_band(p)
    return out


# ---------------------------------------------------------------------------------------
# stage


@dataclass
class ProtectionResult:
    """Protector adequacy per person and group, the catalogue and the protector actions."""

    people: pd.DataFrame
    groups: pd.DataFrame
    methods: pd.DataFrame
    protectors: pd.DataFrame
    actions: pd.DataFrame
    findings: list[Finding] = field(default_factory=list)
    #: the rule set the judgement used (id) and the people judged with the post-STS target
    rules_id: str = ""
    over_below: float = OVERPROTECTION_BELOW
    period_end: pd.Timestamp | None = None


def _exposure_people(programme: Programme, exp: ExposureResult | None,
                     codes: np.ndarray | None = None) -> pd.DataFrame:
    """Return person_id, group, lex_8h, twa, exposed from the exposure stage (or blanks);
    with *codes* (the person code of each row of the people table), the row's code in ``_pc``."""
    people = programme.table("people")
    start = pd.Timestamp(programme.config.period.start)
    rows = np.ones(len(people), dtype=bool)
    if "leave_date" in people.columns:
        rows = (people["leave_date"].isna() | (people["leave_date"] >= start)).to_numpy(dtype=bool)
    base = people.loc[rows, ["person_id", "group"]].copy()
    if codes is not None:
        base["_pc"] = np.asarray(codes, dtype=np.int64)[rows]
    ep = None if exp is None else exp.people
    if ep is None or ep.empty:
        return base.assign(lex_8h=np.nan, twa=np.nan, exposed=False)
    cols = [c for c in ("person_id", "lex_8h", "twa", "exposed") if c in ep.columns]
    merged = base.merge(ep[cols].drop_duplicates("person_id"), on="person_id", how="left")
    for c in ("lex_8h", "twa"):
        if c not in merged.columns:
            merged[c] = np.nan
    merged["exposed"] = merged.get("exposed", pd.Series(False, index=merged.index)).fillna(False).astype(bool)
    return merged


def _join_people(people: pd.DataFrame, cur: pd.DataFrame, spec: pd.DataFrame) -> pd.DataFrame:
    """Return *people* (one row per person, sorted by ``_pc``) with the columns of *cur* (from
    current_protectors with codes) and of *spec* (one row per row of *people*): the left
    merges on person_id, by the person codes."""
    pc = people["_pc"].to_numpy()
    pos = np.full(len(pc), -1, dtype=np.int64)
    if "_pc" in cur.columns and len(cur):
        have = cur["_pc"].to_numpy(dtype=np.int64)  # sorted, one row per person
        at = np.minimum(np.searchsorted(have, pc), len(have) - 1)
        pos = np.where(have[at] == pc, at, -1)
    right = cur.drop(columns=["person_id", "_pc"], errors="ignore").reset_index(drop=True).reindex(pos)
    return pd.concat([people, right.set_axis(people.index), spec.drop(columns=["person_id"]).set_axis(people.index)],
                     axis=1)


def _methods(lv: pd.DataFrame, person_id: pd.Series, governing_method: pd.Series) -> pd.DataFrame:
    """Return the long table of every level under the protector (person_id, method,
    protected_level, governs), sorted by person and method, of *lv* (one row per person, in
    person order, one column per method) and each person's governing method."""
    names = np.asarray(lv.columns, dtype=object)
    order = np.argsort(names, kind="stable")  # the methods in text order
    vals = lv.to_numpy(dtype=float)[:, order]
    r, c = np.nonzero(~np.isnan(vals))
    method = pd.Series(lv.columns[order].take(c), dtype=lv.columns.dtype)
    return pd.DataFrame({"person_id": person_id.take(r).reset_index(drop=True), "method": method,
                         "protected_level": vals[r, c],
                         "governs": governing_method.to_numpy(dtype=object)[r] == names[order][c]})


def _methods_merged(lv: pd.DataFrame, df: pd.DataFrame, out_people: pd.DataFrame) -> pd.DataFrame:
    """_methods where a person may have several rows (the id-keyed formulation)."""
    methods = lv.assign(person_id=df["person_id"]).melt(id_vars="person_id", var_name="method",
                                                        value_name="protected_level")
    methods = methods[methods["protected_level"].notna()]
    methods["governs"] = methods.set_index(["person_id", "method"]).index.isin(
        pd.MultiIndex.from_frame(out_people[["person_id", "method"]]))
    return methods.sort_values(["person_id", "method"], kind="stable").reset_index(drop=True)


def _groups(people: pd.DataFrame) -> pd.DataFrame:
    """Return per group the counts per adequacy and the share of wearers fitted with a PAR."""
    if people.empty:
        return pd.DataFrame(columns=["group", "n_people", "n_exposed", "n_wearing", "n_par", "share_par",
                                     *ADEQUACY, "median_protected"])
    counts = pd.crosstab(people["group"], people["adequacy"]).reindex(columns=list(ADEQUACY), fill_value=0)
    g = people.groupby("group", sort=True)
    out = pd.DataFrame({
        "n_people": g.size(),
        "n_exposed": g["exposed"].sum().astype(int),
        "n_wearing": people["protector_id"].ne("").groupby(people["group"], sort=True).sum().astype(int),
        "n_par": people["par"].notna().groupby(people["group"], sort=True).sum().astype(int),
        "median_protected": g["protected_level"].median(),
    })
    out = out.join(counts).fillna({a: 0 for a in ADEQUACY})
    out[list(ADEQUACY)] = out[list(ADEQUACY)].astype(int)
    out["share_par"] = np.where(out["n_wearing"] > 0, out["n_par"] / out["n_wearing"].where(out["n_wearing"] > 0), np.nan)
    out = out.reset_index().rename(columns={"index": "group"})
    return out[["group", "n_people", "n_exposed", "n_wearing", "n_par", "share_par", *ADEQUACY,
                "median_protected"]]


def _actions(people: pd.DataFrame, rules: RuleSet) -> pd.DataFrame:
    """Return one action per person with too little or too much protection."""
    base_clause = rules.clause("protected_target")
    sts_clause = rules.clause("protected_target_after_sts")
    # the texts are made for the people who get an action only
    p = people[people["adequacy"].isin(["insufficient", "over-protected"])]
    if p.empty:  # nobody to act on (and no texts to join: an empty column keeps a number dtype)
        return pd.DataFrame({c: pd.Series(dtype="datetime64[ns]" if c == "due_date" else object)
                             for c in ACTION_COLUMNS})
    clause = pd.Series(np.where(p["after_sts"].to_numpy(dtype=bool), sts_clause, base_clause), index=p.index)
    lvl = p["protected_level"].round(1).astype(str)
    tgt = p["target"].map(lambda v: f"{v:g}").astype(object)
    meth = p["method"].map(METHOD_LABELS).fillna("")
    kinds = {
        "insufficient": ("protection insufficient",
                         "estimated " + lvl + " dB(A) under " + p["protector_id"] + " (" + meth
                         + ") is above the target of " + tgt + " dB(A); review the protector and its fit",
                         clause),
        "over-protected": ("possible over-protection",
                           "estimated " + lvl + " dB(A) under " + p["protector_id"] + " (" + meth
                           + ") is below " + f"{OVERPROTECTION_BELOW:g}"
                           + " dB(A) (the programme's own setting): consider a protector with less "
                             "attenuation",
                           f"the programme's own setting: {OVERPROTECTION_BELOW:g} dB(A)"),
    }  # people with no protector on record: the compliance stage lists them (coverage)
    frames = []
    for adequacy, (kind, detail, cl) in kinds.items():
        m = p["adequacy"] == adequacy
        if m.any():
            frames.append(pd.DataFrame({"subject": p.loc[m, "person_id"], "subject_type": "person",
                                        "kind": kind, "detail": detail[m], "due_date": pd.NaT,
                                        "clause": cl[m] if isinstance(cl, pd.Series) else cl}))
    if not frames:
        return pd.DataFrame({c: pd.Series(dtype="datetime64[ns]" if c == "due_date" else object)
                             for c in ACTION_COLUMNS})
    out = pd.concat(frames, ignore_index=True)
    out["due_date"] = pd.to_datetime(out["due_date"])
    return out.sort_values(["kind", "subject"], kind="stable").reset_index(drop=True)[ACTION_COLUMNS]


def _wearers(cur: pd.DataFrame) -> pd.Series:
    """Return the number of people wearing each protector ("A+B" counts for A and for B)."""
    if cur.empty:
        return pd.Series(dtype=int)
    # few distinct protector ids: split each once, counted as often as it is worn
    counts: dict[str, int] = {}
    for ids, n in cur["protector_id"].value_counts(sort=False).items():
        for part in str(ids).split("+"):
            counts[part] = counts.get(part, 0) + int(n)
    return pd.Series(counts, dtype=int)


def _findings(programme: Programme, cat: pd.DataFrame, worn: set[str]) -> list[Finding]:
    """Return warnings about protectors that cannot be assessed (*worn*: the protector ids worn)."""
    out: list[Finding] = []
    prot = programme.table("protectors")
    path = programme.present.get("protectors", "data/protectors.csv")
    if not prot.empty:
        rated = cat[["nrr", "snr", "h"]].notna().any(axis=1) | cat["has_octave"]
        bad = cat.loc[~rated & cat["protector_id"].isin(sorted(worn)), "protector_id"]
        rows = prot.set_index("protector_id")["_row"] if "_row" in prot.columns else pd.Series(dtype=float)
        for pid in bad:
            r = rows.get(pid)
            out.append(Finding(path, None if r is None or pd.isna(r) else int(r), "nrr", WARNING,
                               f"protector '{pid}' is worn but has no rating (nrr, snr, hml or octave "
                               "attenuation): its adequacy cannot be estimated",
                               key="protector without rating"))
        att = [f"att_{f}" for f in OCTAVE_BANDS[1:]]
        partial = prot[att].notna().any(axis=1) & ~prot[att].notna().all(axis=1) if set(att) <= set(prot.columns) \
            else pd.Series(False, index=prot.index)
        for _, r in prot[partial].iterrows():
            out.append(Finding(path, int(r["_row"]) if "_row" in prot.columns else None, "att_125", WARNING,
                               "octave attenuation is incomplete (125 Hz … 8 kHz needed): the octave-band "
                               "method is not used for this protector", key="incomplete octave attenuation"))
    return out


def compute(programme: Programme, *, exposure: ExposureResult | None, sts_people: frozenset[str],
            rules: RuleSet | None = None) -> ProtectionResult:
    """Estimate levels under each person's protector by every method and judge their adequacy.

    *sts_people* are the people with a standard threshold shift in force at the end of the
    period (from the hearing stage, which runs first): they are judged against the rule
    set's target after a shift.
    """
    if rules is None:
        rules = load_rule_set(programme.config.rules, programme.config)
    end = pd.Timestamp(programme.config.period.end)
    # people are joined, grouped and sorted on integer person codes (in id order), not on id text
    pk = person_keys(programme, "people", "protector_fits", "noise")
    people = _exposure_people(programme, exposure, pk[0])
    people = people.iloc[np.argsort(people["_pc"].to_numpy(), kind="stable")].reset_index(drop=True)
    pc = people["_pc"].to_numpy()
    cat = catalogue(programme.table("protectors"))
    cur = current_protectors(programme.table("protector_fits"), cat, end, codes=pk[1])
    spec = spectra(programme.table("noise"), people, end, codes=(pk[2], pc))
    metric_col = "twa" if rules.metric == "twa" else "lex_8h"
    other_col = "lex_8h" if metric_col == "twa" else "twa"
    one_each = bool((np.diff(pc) > 0).all())  # one row per person (the people table's key)
    if one_each:
        df = _join_people(people, cur, spec)
    else:
        df = people.merge(cur.drop(columns=["_pc"], errors="ignore"), on="person_id", how="left").merge(
            spec, on="person_id", how="left")
    df["exposure_level"] = df[metric_col].fillna(df[other_col])
    for c in ["nrr", "nrr_2", "snr", "h", "m", "l", "par", "n_protectors"] + [f"apv_{b}" for b in OCTAVE_BANDS]:
        if c not in df.columns:
            df[c] = np.nan
    for c in ["type", "dual_type", "protector_id", "protector_type"]:
        if c not in df.columns:
            df[c] = ""
        df[c] = df[c].fillna("").astype(object)
    for c in ["fit_date", "issue_date"]:
        if c not in df.columns:
            df[c] = pd.NaT
        df[c] = pd.to_datetime(df[c])
    lv = protected_levels(df)
    lv.loc[df["protector_id"] == "", :] = np.nan
    gov = governing(lv, rules.protector_methods)
    df["method"] = gov["method"].where(df["protector_id"] != "", "")
    df["protected_level"] = gov["protected_level"]
    df["osha_50_level"] = lv["nrr-50"]
    judged = judge(df, rules, set(sts_people))
    out_people = judged[PEOPLE_COLUMNS + ["issue_date", "n_protectors", "osha_50_level", "target", "after_sts",
                                          "en458", "exposed", "spectrum_source"]].copy()
    out_people["n_protectors"] = pd.to_numeric(out_people["n_protectors"], errors="coerce").fillna(0).astype(int)
    methods = _methods(lv, df["person_id"], out_people["method"]) if one_each else _methods_merged(lv, df, out_people)
    worn = _wearers(cur)
    cat["n_wearers"] = cat["protector_id"].map(worn).fillna(0).astype(int)
    findings = _findings(programme, cat, set(worn.index))
    log.info("protection: %d people judged, %d insufficient", len(out_people),
             int((out_people["adequacy"] == "insufficient").sum()))
    return ProtectionResult(people=out_people, groups=_groups(out_people), methods=methods, protectors=cat,
                            actions=_actions(judged, rules), findings=findings, rules_id=rules.id,
                            period_end=end)
