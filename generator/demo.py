"""Synthetic programmes of an invented workplace, for ``hcpsite demo``, site_example/ and benchmarks.

Everything is drawn from one seeded ``numpy.random.Generator`` in a fixed order, so the
same arguments always write the same bytes. The workplace, its people and its
protectors are invented. Hearing levels follow published population models:

* a young-adult threshold per person, ear and frequency (mean 3 dB HL, SD about 5 dB,
  close to ISO 7029's spread at age 18);
* the ISO 7029:2017 age effect, with a per-person fractile kept across the years
  (:func:`generator.norms.iso7029_median` and :func:`generator.norms.iso7029_spread`);
* the ISO 1999:2013 noise-induced permanent threshold shift from the group's LEX,8h and
  the years of exposure, with a per-person fractile (:func:`generator.norms.iso1999_nipts`),
  combined with the age part by ISO 1999 Formula (1);
* test-retest variation, rounded to the 5 dB steps audiometers report.

The data are demonstration material only. Figures built from them describe no real
workplace and say nothing about anyone's hearing.
"""
from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from . import norms
from .config import Config, iter_options
from .findings import HcpsiteError, UsageError
from .inputs.spec import AUDIO_FREQS, BOOTH_BANDS, OCTAVE_BANDS
from .levels import weighted_from_bands

log = logging.getLogger(__name__)

#: Invented organisation of the demonstration programme.
ORGANISATION = "Tallowmere Pressings Ltd"

#: Share of the workforce leaving per year (replaced by new hires in the same group).
TURNOVER = 0.05
#: Annual hours worked per full-time person, for ``hours_worked``.
HOURS_PER_PERSON_YEAR = 1900.0
#: Mean young-adult hearing level (dB HL); per person and ear the spread is about 5 dB.
YOUNG_MEAN = 3.0
#: Plant floor (metres) of the area survey: east x north.
PLANT = (160.0, 80.0)

_DAY = 365.25


@dataclass(frozen=True)
class GroupModel:
    """How one invented similar exposure group sounds and works."""

    code: str
    name: str
    description: str
    department: str
    job_titles: tuple[str, ...]
    share: float  # of the headcount
    laeq: float  # typical full-shift LAeq, dB(A)
    sd_person: float  # between-person spread of the personal LAeq, dB
    sd_day: float  # day-to-day spread, dB
    shift_hours: float
    days_per_week: float
    enrolled: bool  # in the audiometric programme
    female_share: float
    peak_offset: float  # typical LCpeak - LAeq, dB
    start_hour: float  # shift start, hours after midnight
    zone: tuple[float, float, float, float]  # x0, x1, y0, y1 of its area on the plant floor
    #: change of the group's levels (dB) from the middle year of the records on
    trend_db: float = 0.0


GROUPS: tuple[GroupModel, ...] = (
    GroupModel("OFF", "Offices and planning", "Production planning, purchasing and the site office; "
               "printers and ventilation only.", "Administration",
               ("Planner", "Buyer", "Office coordinator", "Cost clerk"),
               0.14, 60.0, 2.0, 2.5, 8.0, 5.0, False, 0.50, 25.0, 8.0, (0.0, 30.0, 50.0, 80.0)),
    GroupModel("ASM", "Assembly lines", "Hand and powered-tool assembly of pressed parts on two "
               "conveyor lines.", "Assembly",
               ("Assembler", "Line leader", "Quality checker"),
               0.26, 82.0, 1.5, 2.0, 8.0, 5.0, True, 0.35, 22.0, 7.0, (30.0, 90.0, 40.0, 80.0)),
    GroupModel("MNT", "Maintenance crew", "Breakdown repairs and planned maintenance across the "
               "plant; exposure depends on the day's jobs.", "Engineering",
               ("Maintenance fitter", "Electrician", "Toolsetter"),
               0.10, 86.0, 3.5, 4.0, 8.0, 5.0, True, 0.08, 26.0, 7.0, (130.0, 160.0, 0.0, 40.0)),
    GroupModel("PRS", "Press shop", "Mechanical and hydraulic presses blanking and forming steel "
               "sheet; impulsive noise.", "Press shop",
               ("Press operator", "Die setter", "Press shop leader"),
               0.22, 91.0, 1.5, 2.0, 12.0, 3.5, True, 0.15, 32.0, 6.0, (30.0, 100.0, 0.0, 40.0)),
    GroupModel("GRD", "Grinding and fettling", "Hand grinding and fettling of castings with "
               "angle grinders and chipping hammers.", "Finishing",
               ("Fettler", "Grinder", "Finishing leader"),
               0.10, 95.0, 2.0, 2.5, 8.0, 5.0, True, 0.07, 25.0, 7.0, (100.0, 130.0, 0.0, 40.0),
               trend_db=-2.5),
    GroupModel("WHS", "Forklift and warehouse", "Forklift driving, loading bays and the "
               "finished-goods store.", "Logistics",
               ("Forklift driver", "Warehouse operative", "Dispatch clerk"),
               0.18, 86.0, 2.0, 2.5, 10.0, 4.0, True, 0.20, 24.0, 7.0, (90.0, 160.0, 40.0, 80.0)),
)

#: Point sources of the area-survey field model: (x, y, level at 1 m dB(A), group code).
_SOURCES = (
    (40.0, 12.0, 104.0, "PRS"), (55.0, 12.0, 104.0, "PRS"), (70.0, 12.0, 106.0, "PRS"),
    (85.0, 25.0, 103.0, "PRS"), (108.0, 10.0, 107.0, "GRD"), (118.0, 22.0, 108.0, "GRD"),
    (124.0, 32.0, 106.0, "GRD"), (45.0, 60.0, 91.0, "ASM"), (65.0, 60.0, 92.0, "ASM"),
    (80.0, 70.0, 90.0, "ASM"), (110.0, 60.0, 93.0, "WHS"), (140.0, 55.0, 93.0, "WHS"),
    (150.0, 8.0, 101.0, "MNT"), (138.0, 30.0, 95.0, "MNT"), (10.0, 65.0, 68.0, "OFF"),
)
#: Diffuse (reverberant) level in each group's area, dB(A).
_REVERB = {"OFF": 52.0, "ASM": 76.0, "MNT": 78.0, "PRS": 84.0, "GRD": 86.0, "WHS": 74.0}
#: Relative octave spectra 63..8000 Hz (dB, unweighted) of each area's noise.
_SPECTRA = {
    "OFF": (58, 55, 52, 50, 48, 44, 40, 35), "ASM": (78, 80, 80, 79, 78, 76, 73, 68),
    "MNT": (82, 84, 83, 82, 81, 80, 78, 74), "PRS": (92, 94, 93, 90, 88, 86, 84, 80),
    "GRD": (80, 82, 84, 87, 90, 92, 93, 91), "WHS": (84, 83, 81, 79, 77, 74, 70, 65),
}

#: Task-based sampling (ISO 9612 strategy 1): group -> (task, hours per nominal day, LAeq).
TASKS = {
    "MNT": (("Press line breakdown repairs", 2.5, 93.0), ("Machine shop bench work", 3.0, 82.0),
            ("Compressor house rounds", 0.5, 97.0), ("Workshop paperwork and breaks", 2.0, 66.0)),
    "GRD": (("Hand grinding of castings", 4.0, 97.0), ("Fettling with chipping hammer", 2.0, 100.0),
            ("Inspection and handling", 1.5, 86.0), ("Breaks away from the shop", 0.5, 65.0)),
}

#: Invented protector catalogue: id, type, nrr (label value), name.
PROTECTORS = (
    ("FP33", "foam_plug", 33.0, "Tall slow-recovery foam plug"),
    ("FP29", "foam_plug", 29.0, "Small-fit slow-recovery foam plug"),
    ("PP25", "premolded_plug", 25.0, "Triple-flange reusable plug"),
    ("CC20", "canal_cap", 20.0, "Banded canal caps"),
    ("EM27", "earmuff", 27.0, "Headband earmuff, standard"),
    ("EM31", "earmuff", 31.0, "Headband earmuff, high attenuation"),
    ("CU26", "custom_plug", 26.0, "Custom-moulded plug with filter"),
    ("UF12", "premolded_plug", 12.0, "Uniform-attenuation filtered plug"),
    ("EM19", "earmuff", 19.0, "Low-profile earmuff, light attenuation"),
)
#: Invented ISO 4869-1 style octave attenuation 63..8000 Hz: protector -> (means, SDs), dB.
#: SNR and H/M/L of the catalogue are derived from these (see :func:`protector_ratings`).
PROTECTOR_OCTAVES = {
    "FP33": ((31.0, 33.0, 35.0, 37.5, 37.0, 36.0, 43.0, 45.0), (5.5, 5.5, 5.0, 5.5, 4.5, 4.0, 4.5, 5.0)),
    "FP29": ((26.0, 28.0, 30.5, 33.0, 33.5, 34.0, 40.0, 41.0), (5.5, 5.5, 5.5, 5.0, 4.5, 4.5, 5.0, 5.5)),
    "PP25": ((21.0, 23.0, 24.5, 26.5, 28.0, 33.0, 37.5, 38.0), (6.0, 6.0, 6.0, 5.5, 5.0, 4.5, 5.0, 5.5)),
    "CC20": ((17.0, 18.5, 19.0, 21.0, 24.5, 32.5, 37.0, 36.0), (6.0, 6.0, 5.5, 5.5, 5.0, 4.5, 4.5, 5.5)),
    "EM27": ((12.0, 15.5, 24.0, 33.0, 36.5, 35.0, 38.5, 37.0), (3.5, 3.0, 3.0, 3.0, 3.0, 3.5, 3.5, 4.0)),
    "EM31": ((16.0, 21.0, 29.5, 38.0, 40.5, 37.5, 40.5, 39.5), (3.5, 3.0, 3.0, 3.0, 3.0, 3.5, 3.5, 4.0)),
    "CU26": ((20.0, 21.5, 23.0, 25.0, 26.0, 30.5, 34.0, 33.5), (4.0, 4.0, 4.0, 3.5, 3.5, 3.5, 4.0, 4.0)),
    "UF12": ((11.0, 12.0, 12.5, 13.5, 15.0, 17.0, 19.0, 20.0), (3.5, 3.5, 3.5, 3.5, 3.0, 3.5, 4.0, 4.0)),
    "EM19": ((7.0, 9.5, 14.5, 20.5, 24.0, 23.5, 26.5, 25.5), (3.5, 3.0, 3.0, 3.0, 3.0, 3.5, 3.5, 4.0)),
}
#: Protectors listed with ratings only (no octave data in the catalogue).
_NO_OCTAVES = ("CC20", "CU26")
#: ISO 4869-2:2018 Table 2: A-weighted octave levels 125..8000 Hz of the reference noises 1-8
#: (100 dB(A)) and their d values; Table 3: pink noise (C-weighted total 100 dB).
_REF_NOISES = (
    (62.6, 70.8, 81.0, 90.4, 96.2, 94.7, 92.3), (68.9, 78.3, 84.3, 92.8, 96.3, 94.0, 90.0),
    (71.1, 80.8, 88.0, 95.0, 94.4, 94.1, 89.0), (77.2, 84.5, 89.8, 95.5, 94.3, 92.5, 88.8),
    (77.4, 86.5, 92.5, 96.4, 93.0, 90.4, 83.7), (82.0, 89.3, 93.3, 95.6, 93.0, 90.1, 83.0),
    (84.2, 90.1, 93.6, 96.2, 91.3, 87.9, 81.9), (88.0, 93.4, 93.8, 94.2, 91.4, 87.9, 79.9),
)
_REF_D = (-1.20, -0.49, 0.14, 1.56, -2.98, -1.01, 0.85, 3.14)
_PINK_A = (75.9, 83.4, 88.8, 92.0, 93.2, 93.0, 90.9)
#: alpha of the catalogue ratings (80 % protection performance, ISO 4869-2:2018 Table 1)
_ALPHA_80 = 0.84


def protector_ratings(means: Any, sds: Any, alpha: float = _ALPHA_80) -> tuple[float, float, float, float]:
    """Return (SNR, H, M, L) of octave attenuation data 63..8000 Hz, rounded to whole dB.

    The assumed protection values APV = m - alpha·s (ISO 4869-2:2018 Formula (1)) at 125..8000 Hz
    go through ISO 4869-2 Formulas (15) and (22) and the H/M/L weights of Formulas (12)-(14)
    as one average subject (a demo simplification of the per-subject derivation).
    """
    apv = (np.asarray(means, dtype=float) - alpha * np.asarray(sds, dtype=float))[1:]
    pnr = np.array([100.0 - 10.0 * np.log10(np.sum(np.power(10.0, 0.1 * (np.array(n) - apv))))
                    for n in _REF_NOISES])
    d = np.array(_REF_D)
    h = 0.25 * pnr[:4].sum() - 0.48 * (d[:4] * pnr[:4]).sum()
    m = 0.25 * pnr[4:].sum() - 0.16 * (d[4:] * pnr[4:]).sum()
    lo = 0.25 * pnr[4:].sum() + 0.23 * (d[4:] * pnr[4:]).sum()
    snr = 100.0 - 10.0 * np.log10(np.sum(np.power(10.0, 0.1 * (np.array(_PINK_A) - apv))))
    return tuple(float(np.floor(v + 0.5)) for v in (snr, h, m, lo))  # type: ignore[return-value]


def protector_catalogue() -> pd.DataFrame:
    """Return protectors.csv: label NRR, SNR/H/M/L from the octave data, octave data where listed."""
    rows = []
    for pid, ptype, nrr, name in PROTECTORS:  # nine catalogue entries
        means, sds = PROTECTOR_OCTAVES[pid]
        snr, h, m, lo = protector_ratings(means, sds)
        row: dict[str, Any] = {"protector_id": pid, "type": ptype, "nrr": nrr, "snr": snr, "h": h, "m": m,
                               "l": lo, "name": name}
        listed = pid not in _NO_OCTAVES
        for f, mv, sv in zip(OCTAVE_BANDS, means, sds):
            row[f"att_{f}"] = mv if listed else np.nan
            row[f"sd_{f}"] = sv if listed else np.nan
        rows.append(row)
    cols = (["protector_id", "type", "nrr", "snr", "h", "m", "l", "name"] + [f"att_{f}" for f in OCTAVE_BANDS]
            + [f"sd_{f}" for f in OCTAVE_BANDS])
    return pd.DataFrame(rows)[cols]


#: Protectors usually issued in each enrolled group, matched to its exposure: light
#: attenuation where the 8-h level is a little above 85 dB(A) (so that the level under the
#: protector stays above the over-protection band), more where it is well above.
_ISSUE = {"ASM": ("UF12", "EM19", "CC20"), "MNT": ("CC20", "EM19", "UF12"),
          "PRS": ("EM27", "CU26", "PP25"), "GRD": ("CU26", "PP25", "CC20"),
          "WHS": ("UF12", "EM19", "CC20")}
#: Protectors issued at a refit after a shift: one step up in the group's range.
_REFIT = {"ASM": ("CC20", "EM19"), "MNT": ("CC20", "EM19"), "PRS": ("EM27", "CU26"),
          "GRD": ("CU26", "PP25"), "WHS": ("CC20", "EM19")}
#: People of the loudest group whose latest fit test shows a poor fit (PAR, dB): deliberate.
_POOR_FITS = (3.0, 2.0)

AUDIOMETERS = ("AM-01", "AM-02")
#: Typical booth background octave levels at 500..8000 Hz (dB), well below 29 CFR 1910.95 App. D.
_BOOTH = (24.0, 22.0, 28.0, 33.0, 38.0)

# invented names from syllables (no lists of real people)
_FIRST_A = ("Ar", "Bel", "Cor", "Da", "El", "Fen", "Gal", "Hal", "Is", "Jor", "Kel", "Lor",
            "Mar", "Nel", "Or", "Per", "Ral", "Sel", "Tor", "Val", "Wyn", "Yor", "Zan", "Bri")
_FIRST_M = ("an", "ek", "o", "ric", "mir", "ten", "dor", "vin", "us", "ald")
_FIRST_F = ("ina", "wen", "a", "ise", "eth", "ora", "yn", "elle", "ia", "ith")
_SUR_A = ("Ash", "Brom", "Cald", "Dun", "Fern", "Gorse", "Hurst", "Kil", "Lang", "Mor", "Pen",
          "Rook", "Stan", "Thorn", "Wick", "Quill", "Tallow", "Bracken", "Oak", "Har")
_SUR_B = ("by", "ford", "ley", "wood", "ton", "well", "mere", "ridge", "field", "combe", "gate",
          "holt", "stead", "wick")

#: Column order of each file written.
_PEOPLE_COLS = ["person_id", "group", "sex", "birth_date", "hire_date", "leave_date", "department",
                "job_title", "name"]
_NOISE_COLS = (["measurement_id", "date", "kind", "person_id", "group", "location", "duration_h", "laeq",
                "lcpeak", "lceq", "instrument_class", "osha_dose_pct", "osha_twa", "x_m", "y_m", "notes"]
               + [f"oct_{f}" for f in OCTAVE_BANDS])
_AUDIO_COLS = (["person_id", "date", "ear", "kind"] + [f"hl_{f}" for f in AUDIO_FREQS]
               + ["quiet_hours", "audiometer_id"])


# ---------------------------------------------------------------------------------------
# small helpers


def _day(year: int, month: int = 1, day: int = 1) -> int:
    """Return the day number (days since 1970-01-01) of a calendar date."""
    return int(np.datetime64(f"{year:04d}-{month:02d}-{day:02d}", "D").astype(np.int64))


def _year_of(days: np.ndarray) -> np.ndarray:
    """Return calendar years of day numbers."""
    return np.asarray(days, dtype=np.int64).astype("datetime64[D]").astype("datetime64[Y]").astype(int) + 1970


def _date_str(days: Any) -> np.ndarray:
    """Return ISO date strings of day numbers (blank for missing)."""
    d = np.asarray(days, dtype=float)
    ok = np.isfinite(d)
    out = np.full(d.shape, "", dtype=object)
    if ok.any():
        out[ok] = np.datetime_as_string(d[ok].astype(np.int64).astype("datetime64[D]"), unit="D")
    return out


def _workday(days: np.ndarray) -> np.ndarray:
    """Return the next Monday-Friday day on or after each day number."""
    d = np.asarray(days, dtype=np.int64).astype("datetime64[D]")
    return np.busday_offset(d, 0, roll="forward").astype(np.int64)


def _round5(x: np.ndarray) -> np.ndarray:
    """Round hearing levels to the 5 dB steps audiometers report, within -10..120 dB HL."""
    return np.clip(np.round(np.asarray(x) / 5.0) * 5.0, -10.0, 120.0)


def _energy_mean(levels: np.ndarray, ids: np.ndarray, n: int) -> np.ndarray:
    """Return the energy mean of *levels* per id 0..n-1."""
    e = np.bincount(ids, weights=np.power(10.0, 0.1 * levels), minlength=n)
    c = np.bincount(ids, minlength=n)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 10.0 * np.log10(e / c)


def _osha_dose_from_minutes(levels: np.ndarray, ids: np.ndarray, n: int) -> np.ndarray:
    """Return the OSHA dose % of 1-minute levels per id (90 dB/8 h, 5 dB exchange, 80 dB threshold)."""
    ref_h = 8.0 / np.power(2.0, (levels - 90.0) / 5.0)
    part = np.where(levels >= 80.0, (1.0 / 60.0) / ref_h, 0.0)
    return 100.0 * np.bincount(ids, weights=part, minlength=n)


def _twa_from_dose(dose: np.ndarray) -> np.ndarray:
    """Return the OSHA 8-h TWA of a dose % (16.61 lg(D/100) + 90); NaN for no dose."""
    d = np.asarray(dose, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(d > 0, 16.61 * np.log10(d / 100.0) + 90.0, np.nan)


_SD = np.dtypes.StringDType()


def _zfill(digits: np.ndarray, width: int) -> np.ndarray:
    """Return the texts of non-negative numbers *digits* padded with zeros on the left to *width*
    (``str.zfill``; the zfill of numpy 2.0 does not take variable-width text)."""
    digits = np.asarray(digits, dtype=_SD)
    pad = np.maximum(width - np.strings.str_len(digits), 0)
    return np.strings.add(np.strings.multiply(np.array("0", dtype=_SD), pad), digits)
#: Columns holding codes, dates and choices only (never quoted).
_CODE_COLUMNS = frozenset({"person_id", "date", "ear", "kind", "measurement_id", "start", "group",
                           "audiometer_id", "check", "result", "protector_id", "decision", "about",
                           "hire_date", "birth_date", "leave_date", "audiogram_date", "sex",
                           "instrument_class"})
#: Decimals written for numeric columns (default 1: levels are kept to 0.1 dB).
_DECIMALS = {"duration_h": 2, "task_hours": 2, "sample_minutes": 0, "par": 0}


def _num_text(values: Any, decimals: int = 1) -> np.ndarray:
    """Return numbers as fixed-decimal text (blank where missing), vectorised."""
    v = np.asarray(values, dtype=float)
    ok = np.isfinite(v)
    scale = 10 ** decimals
    t = np.round(np.where(ok, v, 0.0) * scale).astype(np.int64)
    if not len(t):
        return np.zeros(0, dtype=_SD)
    lo, hi = int(t.min()), int(t.max())
    if hi - lo <= 200_000:
        # small range (levels, hours, hearing levels): format each distinct value once
        table = np.array([_fmt_scaled(i, decimals) for i in range(lo, hi + 1)], dtype=_SD)
        txt = table[t - lo]
    else:
        a = np.abs(t)
        txt = np.strings.add(np.where(t < 0, "-", "").astype(_SD), (a // scale).astype(_SD))
        if decimals:
            frac = _zfill((a % scale).astype(_SD), decimals)
            txt = np.strings.add(np.strings.add(txt, "."), frac)
    return np.where(ok, txt, np.array("", dtype=_SD))


def _fmt_scaled(i: int, decimals: int) -> str:
    """Return the integer *i* / 10**decimals as fixed-decimal text."""
    if not decimals:
        return str(i)
    sign = "-" if i < 0 else ""
    a = abs(i)
    return f"{sign}{a // 10 ** decimals}.{a % 10 ** decimals:0{decimals}d}"


def _int_str(values: Any) -> np.ndarray:
    """Return whole numbers as text, blank where missing."""
    return _num_text(values, 0)


def _text_column(values: Any, name: str) -> np.ndarray:
    """Return one column as CSV field text (numbers formatted, text quoted where needed)."""
    arr = np.asarray(values)
    if arr.dtype.kind in "fiub":
        return _num_text(arr.astype(float), _DECIMALS.get(name, 1))
    txt = arr.astype(_SD)
    if name in _CODE_COLUMNS or name.startswith("hl_"):
        return txt
    need = ((np.strings.find(txt, ",") >= 0) | (np.strings.find(txt, '"') >= 0)
            | (np.strings.find(txt, "\n") >= 0))
    if need.any():
        quoted = np.strings.add(np.strings.add('"', np.strings.replace(txt[need], '"', '""')), '"')
        txt = txt.copy()
        txt[need] = quoted
    return txt


def _write_csv(df: pd.DataFrame, out: "_DemoWriter", rel: str) -> None:
    """Write one CSV: header, LF line ends, fixed decimals per column (vectorised text join)."""
    cols = list(df.columns)
    body = ""
    if len(df):
        line = _text_column(df[cols[0]].to_numpy(), cols[0])
        for c in cols[1:]:
            line = np.strings.add(np.strings.add(line, ","), _text_column(df[c].to_numpy(), c))
        body = "\n".join(line.tolist()) + "\n"
    out.write(rel, (",".join(cols) + "\n" + body).encode("utf-8"))


def _write_logs(logs: pd.DataFrame, out: "_DemoWriter", folder: str) -> None:
    """Write one time-history CSV per measurement (rows grouped by measurement_id, in time order)."""
    if not len(logs):
        return
    mids = logs["measurement_id"].to_numpy()
    lines = np.strings.add(np.strings.add(_text_column(logs["start"].to_numpy(), "start"), ","),
                           _text_column(logs["laeq"].to_numpy(), "laeq")).tolist()
    cut = np.flatnonzero(np.concatenate([[True], mids[1:] != mids[:-1], [True]]))
    for a, b in zip(cut[:-1], cut[1:]):  # one file per logged measurement
        out.write(f"{folder}/{mids[a]}.csv", ("start,laeq\n" + "\n".join(lines[a:b]) + "\n").encode("utf-8"))


# ---------------------------------------------------------------------------------------
# the hearing model (pure, vectorised; tested on its own)


#: Age grid (years) of the precomputed ISO 7029 tables; linear interpolation between points.
_AGE_STEP = 0.1
_AGE_GRID = np.round(np.arange(18.0, 80.0 + _AGE_STEP / 2, _AGE_STEP), 6)


@functools.lru_cache(maxsize=None)
def _iso7029_tables() -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Return (freqs, median, upper spread growth, lower spread growth); tables [sex M/F, age, freq]."""
    freqs = np.array(norms.ISO7029_FREQS, dtype=float)
    md = np.empty((2, len(_AGE_GRID), len(freqs)))
    su = np.empty_like(md)
    sl = np.empty_like(md)
    for i, sx in enumerate(("M", "F")):  # two sexes
        a = _AGE_GRID[:, None]
        md[i] = norms.iso7029_median(a, freqs[None, :], sx)
        # spread added since age 18 (variances add): the young-adult spread is the separate
        # baseline term, so the sum keeps ISO 7029's spread at every age
        for t, side in ((su, "u"), (sl, "l")):
            s_y = norms.iso7029_spread(a, freqs[None, :], sx, side)
            s_18 = norms.iso7029_spread(18.0, freqs, sx, side)
            t[i] = np.sqrt(np.maximum(s_y ** 2 - s_18 ** 2, 0.0))
    return freqs, md, su, sl


def age_effect(age: Any, freq: Any, sex: Any, z: Any) -> np.ndarray:
    """Return the ISO 7029:2017 age part (dB) re age 18 at person fractile *z* (z > 0 = worse).

    The median is ISO 7029's; a person at fractile z sits z spreads from it, where the
    spread is the part added since age 18, sqrt(s(Y)² - s(18)²) (the young-adult spread is
    the separate baseline term, so the two together keep ISO 7029's spread), never below 0 dB.
    Blank or unknown sex uses the male model. Values come from
    tables of :mod:`generator.norms` on a 0.1-year grid, interpolated linearly.
    """
    freqs, md_t, su_t, sl_t = _iso7029_tables()
    age_a, freq_a, sex_a, z_a = np.broadcast_arrays(np.asarray(age, dtype=float), np.asarray(freq, dtype=float),
                                                    np.asarray(sex, dtype=object), np.asarray(z, dtype=float))
    fi = np.searchsorted(freqs, freq_a)
    x = (np.clip(age_a, 18.0, 80.0) - 18.0) / _AGE_STEP
    i0 = np.clip(np.floor(x).astype(np.int64), 0, len(_AGE_GRID) - 2)
    w = x - i0
    si = (sex_a == "F").astype(np.int64)

    def look(t: np.ndarray) -> np.ndarray:
        return t[si, i0, fi] * (1.0 - w) + t[si, i0 + 1, fi] * w

    md = look(md_t)
    grow = np.where(z_a >= 0, z_a * look(su_t), z_a * look(sl_t))
    return np.maximum(md + grow, 0.0)


def noise_shift(freq: np.ndarray, lex_8h: np.ndarray, years: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Return the ISO 1999:2013 NIPTS (dB) at fraction *q* (q < 0.5 = more susceptible).

    ISO 1999 tabulates 500-6000 Hz; at 8000 Hz this demo takes half the 6000 Hz value
    (an assumption of the demo: the typical recovery above the 4-6 kHz notch).
    """
    f = np.asarray(freq, dtype=float)
    f_model = np.where(f == 8000.0, 6000.0, f)
    n = norms.iso1999_nipts(f_model, lex_8h, years, q)
    n = np.where(f == 8000.0, 0.5 * n, n)
    return np.nan_to_num(n, nan=0.0)


def hearing_levels(age: np.ndarray, sex: np.ndarray, freq: np.ndarray, young: np.ndarray,
                   z_age: np.ndarray, lex_8h: np.ndarray, years: np.ndarray,
                   q_noise: np.ndarray) -> np.ndarray:
    """Return true (unrounded) hearing thresholds, dB HL: young-adult level + age part ⊕ NIPTS.

    The age part and the noise part combine by ISO 1999:2013 Formula (1),
    H' = H + N - H·N/120 (:func:`generator.norms.iso1999_combine`).
    """
    h = young + age_effect(age, freq, sex, z_age)
    n = noise_shift(freq, lex_8h, years, q_noise)
    return norms.iso1999_combine(h, n)


# ---------------------------------------------------------------------------------------
# the workforce


def _people(rng: np.random.Generator, headcount: int, start: int, end: int) -> pd.DataFrame:
    """Return the workforce: initial staff in each position plus the hires that replace leavers."""
    shares = np.array([g.share for g in GROUPS])
    slot_group = rng.choice(len(GROUPS), size=headcount, p=shares / shares.sum())
    slot_group = np.sort(slot_group)
    years_span = (end - start) / _DAY
    k_max = int(np.ceil(years_span * TURNOVER * 3.0)) + 3
    s_year = int(_year_of(np.array([start]))[0])
    max_birth_year = min(2004, s_year - 19)
    lo_birth, hi_birth = _day(1960, 1, 1), _day(max_birth_year, 12, 31)

    birth = np.empty((headcount, k_max))
    hire = np.empty((headcount, k_max))
    leave = np.empty((headcount, k_max))
    # position holders at the start of the records
    b0 = rng.uniform(lo_birth, hi_birth, headcount)
    served = rng.uniform(0.0, 1.0, headcount) * np.minimum((start - b0) / _DAY - 18.0, 30.0)
    birth[:, 0] = b0
    hire[:, 0] = np.floor(start - np.maximum(served, 0.02) * _DAY)
    for k in range(k_max):
        if k > 0:
            hire[:, k] = leave[:, k - 1] + rng.integers(14, 76, headcount)
            age_h = rng.uniform(18.0, 50.0, headcount)
            birth[:, k] = np.clip(hire[:, k] - age_h * _DAY, lo_birth, _day(2004, 12, 31))
            birth[:, k] = np.minimum(birth[:, k], hire[:, k] - 18.0 * _DAY)
        tenure = rng.exponential(1.0 / TURNOVER, headcount) * _DAY
        base = np.maximum(hire[:, k], start) if k == 0 else hire[:, k]
        leave[:, k] = np.floor(np.minimum(base + tenure, birth[:, k] + 65.0 * _DAY))
        leave[:, k] = np.maximum(leave[:, k], hire[:, k] + 60)
    keep = hire <= end - 20
    slot = np.repeat(np.arange(headcount)[:, None], k_max, axis=1)
    df = pd.DataFrame({
        "slot": slot[keep], "occupant": np.repeat(np.arange(k_max)[None, :], headcount, axis=0)[keep],
        "gi": slot_group[slot[keep]], "birth": np.floor(birth[keep]), "hire": hire[keep],
        "leave": leave[keep],
    })
    df.loc[df["leave"] > end - 7, "leave"] = np.nan
    df = df.sort_values(["hire", "slot", "occupant"], kind="mergesort").reset_index(drop=True)
    n = len(df)
    df["person_id"] = np.strings.add("P", _zfill((np.arange(n) + 1).astype(_SD), 5)).astype(object)
    fshare = np.array([g.female_share for g in GROUPS])[df["gi"].to_numpy()]
    u = rng.random(n)
    sex = np.where(u < fshare, "F", "M").astype(object)
    sex[rng.random(n) < 0.012] = ""
    df["sex"] = sex
    female = sex == "F"
    first = (np.array(_FIRST_A, dtype=object)[rng.integers(0, len(_FIRST_A), n)]
             + np.where(female, np.array(_FIRST_F, dtype=object)[rng.integers(0, len(_FIRST_F), n)],
                        np.array(_FIRST_M, dtype=object)[rng.integers(0, len(_FIRST_M), n)]))
    sur = (np.array(_SUR_A, dtype=object)[rng.integers(0, len(_SUR_A), n)]
           + np.array(_SUR_B, dtype=object)[rng.integers(0, len(_SUR_B), n)])
    df["name"] = first + " " + sur
    gi = df["gi"].to_numpy()
    df["group"] = np.array([g.code for g in GROUPS], dtype=object)[gi]
    df["department"] = np.array([g.department for g in GROUPS], dtype=object)[gi]
    title_pick = rng.random(n)
    titles = np.empty(n, dtype=object)
    for i, g in enumerate(GROUPS):  # six groups, not rows
        m = gi == i
        t = np.array(g.job_titles, dtype=object)
        # the first title is the common one
        w = np.array([3.0] + [1.0] * (len(t) - 1))
        cdf = np.cumsum(w / w.sum())
        titles[m] = t[np.searchsorted(cdf, title_pick[m])]
    df["job_title"] = titles
    # person-level model draws: ISO 1999 fraction (kept for life), own level re the group's
    df["q_noise"] = np.clip(rng.uniform(0.0, 1.0, n), 0.05, 0.95)
    g_lex = np.array([g.laeq + 10.0 * np.log10(g.shift_hours / 8.0) for g in GROUPS])
    g_sd = np.array([g.sd_person for g in GROUPS])
    df["laeq_offset"] = g_sd[gi] * rng.standard_normal(n)
    df["lex_person"] = g_lex[gi] + df["laeq_offset"].to_numpy()
    # long-run protector benefit (dB): protectors worn much, but not all, of the time
    df["benefit"] = np.where(np.array([g.enrolled for g in GROUPS])[gi], rng.uniform(2.0, 10.0, n), 0.0)
    return df


# ---------------------------------------------------------------------------------------
# audiograms


def _audiogram_schedule(rng: np.random.Generator, ppl: pd.DataFrame, start: int, end: int) -> pd.DataFrame:
    """Return test events (person index, date, kind, quiet hours) of the enrolled people."""
    enrolled = np.array([g.enrolled for g in GROUPS])[ppl["gi"].to_numpy()]
    idx = np.flatnonzero(enrolled)
    hire = ppl["hire"].to_numpy()[idx]
    leave = ppl["leave"].to_numpy()[idx]
    leave_f = np.where(np.isnan(leave), np.inf, leave)
    m = len(idx)
    # baseline at hire (a few late), or in the first year of the records
    base = hire + rng.integers(7, 100, m)
    late = rng.random(m) < 0.05
    base = np.where(late, hire + rng.integers(200, 420, m), base)
    first_year = (hire < start) & (rng.random(m) < 0.03)
    base = np.where(first_year, start + rng.integers(10, 200, m), base)
    base = _workday(base).astype(float)
    ok_base = (base < leave_f - 20) & (base <= end)
    # periodic tests, yearly near a personal anniversary
    years = np.arange(int(_year_of(np.array([start]))[0]), int(_year_of(np.array([end]))[0]) + 1)
    anniv = rng.integers(5, 340, m)
    jan1 = np.array([_day(int(y)) for y in years])
    per = jan1[None, :] + anniv[:, None] + rng.integers(-15, 16, (m, len(years)))
    per = _workday(per.ravel()).reshape(per.shape).astype(float)
    missed = rng.random(per.shape) < 0.04
    missed[:, -1] |= rng.random(m) < 0.04
    ok_per = ((per > base[:, None] + 180) & (per < leave_f[:, None] - 45) & (per <= end)
              & ~missed & ok_base[:, None])
    # exit tests for leavers
    exit_d = _workday(np.where(np.isfinite(leave), leave - rng.integers(1, 15, m), 0)).astype(float)
    ok_exit = np.isfinite(leave) & (rng.random(m) < 0.85) & ok_base & (exit_d > base + 60) & (exit_d >= start)
    # (the records begin with the review window: staff hired before it have their baseline at
    # hire and their annual tests from the first year of the records on)
    pi = np.concatenate([idx[ok_base], np.repeat(idx[:, None], len(years), axis=1)[ok_per], idx[ok_exit]])
    date = np.concatenate([base[ok_base], per[ok_per], exit_d[ok_exit]])
    kind = np.concatenate([np.full(ok_base.sum(), "baseline", dtype=object),
                           np.full(ok_per.sum(), "periodic", dtype=object),
                           np.full(ok_exit.sum(), "exit", dtype=object)])
    ev = pd.DataFrame({"pi": pi, "date": date, "kind": kind})
    ev = ev.sort_values(["pi", "date"], kind="mergesort").drop_duplicates(["pi", "date"]).reset_index(drop=True)
    n = len(ev)
    quiet = np.round(rng.uniform(12.0, 18.0, n), 1)
    is_base = ev["kind"].to_numpy() == "baseline"
    quiet[is_base] = np.round(rng.uniform(14.0, 20.0, is_base.sum()), 1)
    quiet[~is_base & (rng.random(n) < 0.02)] = np.nan
    # a few baselines after too short a quiet period or without it recorded (deliberate)
    base_i = np.flatnonzero(is_base)
    k_odd = min(len(base_i) // 2, max(2, int(round(0.004 * len(base_i)))))
    odd = rng.choice(base_i, size=2 * k_odd, replace=False) if k_odd else np.zeros(0, dtype=np.int64)
    quiet[odd[:k_odd]] = np.round(rng.uniform(8.0, 13.5, k_odd), 1)
    quiet[odd[k_odd:]] = np.nan
    ev["quiet_hours"] = quiet
    # a temporary shift on a few periodic tests taken soon after a noisy shift
    temp = (ev["kind"].to_numpy() == "periodic") & (rng.random(n) < 0.03)
    ev["temp_db"] = np.where(temp, rng.uniform(12.0, 22.0, n), 0.0)
    ev.loc[temp, "quiet_hours"] = np.round(rng.uniform(1.0, 6.0, temp.sum()), 1)
    return ev


def _levels_for(rng: np.random.Generator, ppl: pd.DataFrame, ev: pd.DataFrame,
                young: np.ndarray, real: dict[str, np.ndarray]) -> np.ndarray:
    """Return measured levels (tests x 2 ears x 7 frequencies, rounded) for test events."""
    pi = ev["pi"].to_numpy()
    date = ev["date"].to_numpy()
    age = (date - ppl["birth"].to_numpy()[pi]) / _DAY
    sex = ppl["sex"].to_numpy()[pi]
    sex = np.where(sex == "", "M", sex).astype(object)
    years = np.maximum((date - ppl["hire"].to_numpy()[pi]) / _DAY, 0.0)
    lex = ppl["lex_person"].to_numpy()[pi] - ppl["benefit"].to_numpy()[pi]
    freqs = np.array(AUDIO_FREQS, dtype=float)
    # person fractile per frequency: one draw per person, mostly shared across frequencies
    z = real["z_f"][pi]  # (n, 7)
    hl = np.empty((len(ev), 2, len(freqs)))
    base_age = age_effect(age[:, None], freqs[None, :], sex[:, None], z)
    nipts = noise_shift(freqs[None, :], lex[:, None], years[:, None], ppl["q_noise"].to_numpy()[pi][:, None])
    temp_shape = np.array([0.0, 0.0, 0.4, 0.8, 1.0, 0.7, 0.3])
    real_shape = np.array([0.0, 0.0, 0.3, 0.8, 1.0, 0.9, 0.5])
    for e in range(2):  # two ears
        h = young[pi, e, :] + base_age
        t = norms.iso1999_combine(h, nipts)
        onset = real["onset"][pi]
        ear_hit = real["ears"][pi, e]
        t = t + np.where((date >= onset) & ear_hit, real["size"][pi], 0.0)[:, None] * real_shape[None, :]
        t = t + ev["temp_db"].to_numpy()[:, None] * temp_shape[None, :] * rng.uniform(0.8, 1.2, (len(ev), 1))
        hl[:, e, :] = t + rng.normal(0.0, 4.0, t.shape)
    return _round5(hl)


def _audiometers_from(start: int) -> int:
    """Return the day the current audiometers were commissioned (the first day of the records).

    Tests before it come from older records that do not name the audiometer (blank).
    """
    return int(_workday(np.array([start]))[0])


def _appf_234(ppl: pd.DataFrame, pi: np.ndarray, date: np.ndarray) -> np.ndarray:
    """Return the mean 29 CFR 1910.95 App. F age correction at 2/3/4 kHz (0 where sex is blank).

    Ages are whole calendar years at the test date (App. F tabulates whole years).
    """
    birth = np.asarray(ppl["birth"].to_numpy()[pi], dtype=np.int64).astype("datetime64[D]")
    test = np.asarray(date, dtype=np.int64).astype("datetime64[D]")
    by, ty = birth.astype("datetime64[Y]"), test.astype("datetime64[Y]")
    before = (test - ty) < (birth - by)  # the birthday of that year is still to come
    age = (ty.astype(np.int64) - by.astype(np.int64) - before).astype(float)
    sex = ppl["sex"].to_numpy()[pi]
    c = sum(norms.appf_correction(age, f, sex) for f in (2000, 3000, 4000)) / 3.0
    return np.nan_to_num(np.asarray(c, dtype=float), nan=0.0)


def _review_year_lapses(notices: pd.DataFrame, refits: pd.DataFrame, year0: int, end: int
                        ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Make one written notice of the review year late, leave out another and one refit (deliberate)."""
    notices = notices.sort_values(["date", "pi"], kind="mergesort").reset_index(drop=True)
    referred = set(notices.loc[notices["about"] == "referral", "pi"].tolist())
    sts = notices[(notices["about"] == "sts") & (notices["date"] >= year0) & (notices["date"] <= end - 60)
                  & ~notices["pi"].isin(sorted(referred))]
    firsts = sts.drop_duplicates("pi")
    used: list[int] = []
    if len(firsts) >= 2:
        late_i, miss_i = firsts.index[0], firsts.index[1]
        notices.loc[late_i, "date"] = notices.loc[late_i, "date"] + 28.0  # past the 21 days
        notices = notices.drop(index=miss_i)
        used = [int(firsts.loc[late_i, "pi"]), int(firsts.loc[miss_i, "pi"])]
    refits = refits.sort_values(["date", "pi"], kind="mergesort").reset_index(drop=True)
    cand = refits[(refits["date"] >= year0) & (refits["date"] <= end - 60) & ~refits["pi"].isin(used)]
    if len(cand):
        refits = refits.drop(index=cand.index[0])
    return notices.reset_index(drop=True), refits.reset_index(drop=True)


def _audiograms(rng: np.random.Generator, ppl: pd.DataFrame, start: int, end: int
                ) -> tuple[pd.DataFrame, np.ndarray, pd.DataFrame, pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """Return (test events, their levels, reviews, notices, refits, test days per audiometer)."""
    n_p = len(ppl)
    freqs = len(AUDIO_FREQS)
    young = (YOUNG_MEAN + 3.5 * rng.standard_normal((n_p, 1, 1)) + 3.5 * rng.standard_normal((n_p, 2, freqs)))
    young = np.maximum(young, -10.0)
    z_p = rng.standard_normal(n_p)
    z_f = 0.8 * z_p[:, None] + 0.6 * rng.standard_normal((n_p, freqs))
    # a few real, persistent shifts (one or both ears) starting some time after hire
    has_real = (rng.random(n_p) < 0.05) & np.array([g.enrolled and g.laeq >= 84 for g in GROUPS])[ppl["gi"].to_numpy()]
    onset = np.where(has_real, np.maximum(ppl["hire"].to_numpy(), start) + rng.uniform(200, 2000, n_p), np.inf)
    both = rng.random(n_p) < 0.5
    left = rng.random(n_p) < 0.5
    ears = np.stack([both | left, both | ~left], axis=1)
    real = {"z_f": z_f, "onset": onset, "ears": ears, "size": rng.uniform(12.0, 24.0, n_p)}

    ev = _audiogram_schedule(rng, ppl, start, end)
    hl = _levels_for(rng, ppl, ev, young, real)
    pi = ev["pi"].to_numpy()
    ev_date = ev["date"].to_numpy()
    kind = ev["kind"].to_numpy()
    sts_cols = [AUDIO_FREQS.index(f) for f in (2000, 3000, 4000)]
    avg = hl[:, :, sts_cols].mean(axis=2)
    corr = _appf_234(ppl, pi, ev_date)
    # reference per person and ear (starts at the first test, the baseline)
    first = ~pd.Series(pi).duplicated().to_numpy()
    base_pos = np.full(n_p, -1)
    base_pos[pi[first]] = np.flatnonzero(first)
    has_tests = base_pos >= 0
    ref_avg = np.zeros((n_p, 2))
    ref_corr = np.zeros(n_p * 2).reshape(n_p, 2)
    ref_date = np.full((n_p, 2), np.inf)
    ref_avg[has_tests] = avg[base_pos[has_tests]]
    ref_corr[has_tests] = corr[base_pos[has_tests], None]
    ref_date[has_tests] = ev_date[base_pos[has_tests], None]
    search_from = np.where(has_tests, ev_date[np.maximum(base_pos, 0)], np.inf)
    leave = np.where(np.isnan(ppl["leave"].to_numpy()), np.inf, ppl["leave"].to_numpy())
    nxt = np.full(len(ev), np.inf)
    same_next = np.zeros(len(ev), dtype=bool)
    same_next[:-1] = pi[1:] == pi[:-1]
    nxt[:-1] = np.where(same_next[:-1], ev_date[1:], np.inf)
    rt_parts, rev_parts, note_parts, refit_parts = [], [], [], []
    # each round takes, per person, the first test after the last event that shows a shift
    # against the reference in force (age corrected as in 29 CFR 1910.95 App. F) and plays
    # out retest, review, notice and refit; revised baselines move the reference
    # deliberate lapses of the review year, so that the action list shows each kind once
    year0 = _day(int(_year_of(np.array([end]))[0]))
    skip_retest = True
    for _round in range(16):  # a few rounds, each vectorised over people
        sh = avg - ref_avg[pi] - (corr[:, None] - ref_corr[pi])
        fl = (np.round(sh, 6) >= 10.0) & (ev_date > search_from[pi])[:, None] & (ev_date[:, None] > ref_date[pi])
        fl &= (kind != "baseline")[:, None]
        cand = np.flatnonzero(fl.any(axis=1))
        if not len(cand):
            break
        pos = cand[~pd.Series(pi[cand]).duplicated().to_numpy()]
        pk = pi[pos]
        k = len(pos)
        hit = fl[pos]
        is_temp = ev["temp_db"].to_numpy()[pos] > 0
        # the earlier years hold a few random lapses; the review year only the deliberate ones
        in_rev = ev_date[pos] >= year0
        do_rt = (kind[pos] == "periodic") & ((rng.random(k) < np.where(is_temp, 0.99, 0.97)) | in_rev)
        gap = np.where((rng.random(k) < 0.02) & ~in_rev, rng.integers(32, 46, k), rng.integers(5, 15, k))
        rdate = _workday(ev_date[pos] + gap).astype(float)
        do_rt &= (rdate < nxt[pos] - 7) & (rdate <= end) & (rdate < leave[pk])
        lapse = np.flatnonzero(do_rt & (ev_date[pos] >= year0) & (ev_date[pos] <= end - 90) & (nxt[pos] > end)
                               & ~is_temp)
        if skip_retest and len(lapse):  # one shift of the review year without its retest
            do_rt[lapse[0]] = False
            skip_retest = False
        rt = pd.DataFrame({"pi": pk[do_rt], "date": rdate[do_rt], "kind": "retest",
                           "quiet_hours": np.round(rng.uniform(14.0, 20.0, do_rt.sum()), 1), "temp_db": 0.0})
        rt_hl = _levels_for(rng, ppl, rt, young, real) if len(rt) else np.zeros((0, 2, freqs))
        rt_corr = np.zeros(k)
        rt_corr[do_rt] = _appf_234(ppl, pk[do_rt], rdate[do_rt])
        # an ear without a shift on the flagged test keeps its levels on the retest (a shift that
        # first shows on a retest would need a retest of its own; the demo keeps to the common case)
        rt_pos = np.flatnonzero(do_rt)
        for e in range(2):  # two ears
            rt_sh0 = rt_hl[:, e, sts_cols].mean(axis=1) - ref_avg[pk[rt_pos], e] - (
                rt_corr[rt_pos] - ref_corr[pk[rt_pos], e])
            keep_ear = ~hit[rt_pos, e] & (np.round(rt_sh0, 6) >= 10.0)
            rt_hl[keep_ear, e, :] = hl[pos[rt_pos[keep_ear]], e, :]
        rt_parts.append((rt, rt_hl))
        rt_avg = np.full((k, 2), np.nan)
        rt_avg[do_rt] = rt_hl[:, :, sts_cols].mean(axis=2)
        basis = np.where(do_rt, rdate, ev_date[pos])
        when = basis + rng.integers(3, 21, k)
        reviewed = (rng.random(k) >= 0.05) & (when <= end)
        u_dec = rng.random(k)
        confirmed_any = np.zeros(k, dtype=bool)
        refer_any = np.zeros(k, dtype=bool)
        for e, ear in enumerate(("L", "R")):  # two ears
            rt_sh = rt_avg[:, e] - ref_avg[pk, e] - (rt_corr - ref_corr[pk, e])
            cancelled = hit[:, e] & do_rt & (np.round(rt_sh, 6) < 10.0)
            confirmed = hit[:, e] & ~cancelled
            confirmed_any |= confirmed
            decision = np.where(cancelled, "cancel_shift",
                                np.where(u_dec < 0.1, "not_work_related", "confirm_shift")).astype(object)
            keep = hit[:, e] & reviewed
            rev_parts.append(pd.DataFrame({
                "pi": pk[keep], "ear": ear, "date": when[keep], "decision": decision[keep],
                "audiogram_date": ev_date[pos][keep],
                "reviewer_role": np.where(u_dec[keep] < 0.7, "audiologist", "physician"),
                "note": np.where(decision[keep] == "cancel_shift", "retest back within 10 dB of the reference",
                                 np.where(decision[keep] == "not_work_related",
                                          "reviewer judged the shift not work-related", "shift persists on review")),
            }))
            # persistent shifts (confirmed by a retest): the retest becomes the revised baseline
            revise = keep & confirmed & do_rt & (rng.random(k) < 0.85)
            new_pos_avg = np.where(do_rt, rt_avg[:, e], avg[pos, e])
            new_corr = np.where(do_rt, rt_corr, corr[pos])
            rev_parts.append(pd.DataFrame({
                "pi": pk[revise], "ear": ear, "date": when[revise], "decision": "revise_baseline",
                "audiogram_date": basis[revise], "reviewer_role": "audiologist",
                "note": "persistent shift: revised baseline",
            }))
            ref_avg[pk[revise], e] = new_pos_avg[revise]
            ref_corr[pk[revise], e] = new_corr[revise]
            ref_date[pk[revise], e] = basis[revise]
            refer = keep & confirmed & (rng.random(k) < 0.08)
            refer_any |= refer
            rev_parts.append(pd.DataFrame({
                "pi": pk[refer], "ear": ear, "date": when[refer] + 1, "decision": "refer",
                "audiogram_date": ev_date[pos][refer], "reviewer_role": "physician",
                "note": "referred for a clinical opinion",
            }))
        search_from[pk] = basis
        # written notice of the shift: most within 21 days, some late, a few missing
        # (on time: within 21 days of the flagged test as well as of its retest)
        span = np.maximum(21.0 - (basis - ev_date[pos]), 2.0)
        u = np.where(in_rev, 0.0, rng.random(k))
        ndate = basis + np.where(u < 0.97, 1.0 + np.floor(rng.random(k) * (span - 1.0)), rng.integers(23, 50, k))
        give = confirmed_any & (u < 0.99) & (ndate <= end)
        note_parts.append(pd.DataFrame({"pi": pk[give], "date": ndate[give], "about": "sts"}))
        rdate2 = when + 1 + rng.integers(2, 15, k)
        give_r = refer_any & (rng.random(k) < 0.93) & (rdate2 <= end)
        note_parts.append(pd.DataFrame({"pi": pk[give_r], "date": rdate2[give_r], "about": "referral"}))
        # protector refit after a shift (not for leavers)
        u = np.where(in_rev, 0.0, rng.random(k))
        fdate = _workday(basis + np.where(u < 0.97, np.floor(rng.random(k) * np.maximum(span - 3.0, 1.0)),
                                          rng.integers(25, 60, k))).astype(float)
        give_f = confirmed_any & (u < 0.99) & (fdate <= end) & (fdate < leave[pk])
        choice = rng.integers(0, 2, k)
        refit_tab = np.array([_REFIT.get(g.code, ("CC20", "EM19")) for g in GROUPS], dtype=object)
        refit_prot = refit_tab[ppl["gi"].to_numpy()[pk], choice]
        refit_nrr = pd.Series(refit_prot, dtype=object).map({q[0]: q[2] for q in PROTECTORS}).to_numpy(dtype=float)
        # a supervised refit with a fit test: a good fit, most of the label value
        refit_par = np.where(rng.random(k) < 0.7, np.round(refit_nrr * rng.uniform(0.6, 0.9, k), 0), np.nan)
        refit_parts.append(pd.DataFrame({"pi": pk[give_f], "date": fdate[give_f],
                                         "protector_id": refit_prot[give_f], "par": refit_par[give_f]}))
    reviews = pd.concat(rev_parts, ignore_index=True) if rev_parts else pd.DataFrame(
        columns=["pi", "ear", "date", "decision", "audiogram_date", "reviewer_role", "note"])
    notices = pd.concat(note_parts, ignore_index=True) if note_parts else pd.DataFrame(columns=["pi", "date", "about"])
    refits = pd.concat(refit_parts, ignore_index=True) if refit_parts else pd.DataFrame(
        columns=["pi", "date", "protector_id", "par"])
    for frame in (reviews, notices, refits):  # typed even when no shift was found
        frame["pi"] = frame["pi"].astype(np.int64)
        frame["date"] = frame["date"].astype(float)
    notices, refits = _review_year_lapses(notices, refits, year0, end)
    rt_all = [r for r, _ in rt_parts]
    rt_hl_all = [h for _, h in rt_parts]

    # assemble the audiogram table (events + retests)
    allev = pd.concat([ev] + rt_all, ignore_index=True)
    all_hl = np.concatenate([hl] + rt_hl_all, axis=0)
    order = np.lexsort((allev["date"].to_numpy(), allev["pi"].to_numpy()))
    allev = allev.iloc[order].reset_index(drop=True)
    all_hl = all_hl[order]
    # audiometer per test day (older tests, from before the current audiometers: blank)
    days = np.unique(allev["date"].to_numpy())
    day_am = np.where(rng.random(len(days)) < 0.6, AUDIOMETERS[0], AUDIOMETERS[1]).astype(object)
    am_from = _audiometers_from(start)
    day_am = np.where(days >= am_from, day_am, "").astype(object)
    allev["audiometer_id"] = day_am[np.searchsorted(days, allev["date"].to_numpy())]
    test_days = pd.DataFrame({"date": days, "audiometer_id": day_am,
                              "n_tests": np.bincount(np.searchsorted(days, allev["date"].to_numpy()),
                                                     minlength=len(days))})
    test_days = test_days[test_days["date"] >= am_from]
    return allev, all_hl, reviews, notices, refits, test_days


def _audiogram_frame(rng: np.random.Generator, ppl: pd.DataFrame, ev: pd.DataFrame,
                     hl: np.ndarray) -> pd.DataFrame:
    """Return audiograms.csv rows (one per test and ear) with NR and a few untested cells."""
    n = len(ev)
    flat = hl.reshape(n * 2, len(AUDIO_FREQS)).copy()  # rows: test0 L, test0 R, test1 L, ...
    text = np.empty(flat.shape, dtype=_SD)
    for j in range(len(AUDIO_FREQS)):  # seven columns
        text[:, j] = _int_str(flat[:, j])
    # no response at 8000 Hz for the highest thresholds (oldest and most exposed)
    j8 = AUDIO_FREQS.index(8000)
    k = max(4, int(round(0.0008 * len(flat))))
    cand = np.flatnonzero(flat[:, j8] >= 60.0)
    if len(cand):
        top = cand[np.argsort(-flat[cand, j8], kind="stable")[:k]]
        text[top, j8] = "NR"
    # a couple of ears not tested at 6000/8000 Hz
    periodic_rows = np.flatnonzero(np.repeat(ev["kind"].to_numpy() == "periodic", 2))
    if len(periodic_rows):
        miss = rng.choice(periodic_rows, size=min(2, len(periodic_rows)), replace=False)
        text[miss, AUDIO_FREQS.index(6000)] = ""
        text[miss, j8] = ""
    df = pd.DataFrame({
        "person_id": np.repeat(ppl["person_id"].to_numpy()[ev["pi"].to_numpy()], 2),
        "date": np.repeat(_date_str(ev["date"].to_numpy()), 2),
        "ear": np.tile(np.array(["L", "R"], dtype=object), n),
        "kind": np.repeat(ev["kind"].to_numpy(), 2),
    })
    for j, f in enumerate(AUDIO_FREQS):
        df[f"hl_{f}"] = text[:, j]
    df["quiet_hours"] = np.repeat(ev["quiet_hours"].to_numpy(), 2)
    df["audiometer_id"] = np.repeat(ev["audiometer_id"].to_numpy(), 2)
    return df[_AUDIO_COLS]


# ---------------------------------------------------------------------------------------
# noise


def _group_laeq(gi: np.ndarray, year: np.ndarray, mid_year: int) -> np.ndarray:
    """Return the groups' typical LAeq in a year (with the groups' level trends)."""
    base = np.array([g.laeq for g in GROUPS])[gi]
    trend = np.array([g.trend_db for g in GROUPS])[gi]
    return base + np.where(year >= mid_year, trend, 0.0)


def _area_field(x: np.ndarray, y: np.ndarray, zone_code: np.ndarray) -> np.ndarray:
    """Return the modelled A-weighted level (dB) at plant positions: point sources + diffuse field."""
    sx = np.array([s[0] for s in _SOURCES])
    sy = np.array([s[1] for s in _SOURCES])
    sl = np.array([s[2] for s in _SOURCES])
    sz = np.array([s[3] for s in _SOURCES], dtype=object)
    r = np.hypot(x[:, None] - sx[None, :], y[:, None] - sy[None, :])
    wall = np.where(zone_code[:, None] == sz[None, :], 0.0, 18.0)
    direct = sl[None, :] - 20.0 * np.log10(np.maximum(r, 1.0)) - wall
    rev = pd.Series(zone_code, dtype=object).map(_REVERB).to_numpy(dtype=float)
    e = np.power(10.0, 0.1 * direct).sum(axis=1) + np.power(10.0, 0.1 * rev)
    return 10.0 * np.log10(e)


def _zone_of(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Return the group index whose floor area holds each position."""
    out = np.zeros(len(x), dtype=int)
    for i, g in enumerate(GROUPS):  # six zones
        x0, x1, y0, y1 = g.zone
        out[(x >= x0) & (x < x1) & (y >= y0) & (y < y1)] = i
    return out


def _noise(rng: np.random.Generator, ppl: pd.DataFrame, start: int, end: int, headcount: int
           ) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Return noise.csv rows and the logged time histories (measurement_id, start, laeq)."""
    years = np.arange(int(_year_of(np.array([start]))[0]), int(_year_of(np.array([end]))[0]) + 1)
    mid_year = int(years[len(years) // 2])
    hire = ppl["hire"].to_numpy()
    leave = np.where(np.isnan(ppl["leave"].to_numpy()), np.inf, ppl["leave"].to_numpy())
    gi_p = ppl["gi"].to_numpy()
    # --- personal dosimetry: person-years active, sampled per group and year
    py_p = np.repeat(np.arange(len(ppl)), len(years))
    py_y = np.tile(years, len(ppl))
    y0 = np.array([_day(int(y)) for y in years])
    lo = np.maximum(np.tile(y0, len(ppl)), hire[py_p] + 1)
    hi = np.minimum(np.minimum(np.tile(y0 + 364, len(ppl)), leave[py_p] - 1), end)
    act = hi - lo > 30
    py = pd.DataFrame({"p": py_p[act], "y": py_y[act], "lo": lo[act], "hi": hi[act]})
    py["g"] = gi_p[py["p"].to_numpy()]
    py["key"] = rng.random(len(py))
    size = py.groupby(["g", "y"])["p"].transform("size").to_numpy()
    want = np.maximum(np.where(py["g"].to_numpy() == 0, 2, 3), np.round(0.12 * size))
    rank = py.groupby(["g", "y"])["key"].rank(method="first").to_numpy()
    pers = py[rank <= want].reset_index(drop=True)
    n_pers = len(pers)
    pdate = _workday(np.floor(pers["lo"].to_numpy() + rng.random(n_pers) * (pers["hi"] - pers["lo"]).to_numpy()))
    pdate = np.minimum(pdate, pers["hi"].to_numpy()).astype(np.int64)
    g = pers["g"].to_numpy()
    shift_h = np.array([gm.shift_hours for gm in GROUPS])[g]
    dur = shift_h - rng.choice(np.array([0.5, 0.75, 1.0]), n_pers)
    p_laeq = (_group_laeq(g, _year_of(pdate), mid_year) + ppl["laeq_offset"].to_numpy()[pers["p"]]
              + np.array([gm.sd_day for gm in GROUPS])[g] * rng.standard_normal(n_pers))
    p_peak = p_laeq + np.array([gm.peak_offset for gm in GROUPS])[g] + rng.normal(0.0, 3.0, n_pers)
    codes = np.array([gm.code for gm in GROUPS], dtype=object)
    personal = pd.DataFrame({
        "date": pdate, "kind": "personal", "person_id": ppl["person_id"].to_numpy()[pers["p"]],
        "group": codes[g], "location": np.array([gm.name for gm in GROUPS], dtype=object)[g],
        "duration_h": dur, "laeq": p_laeq, "lcpeak": p_peak, "instrument_class": 2.0, "gi": g,
    })
    # --- area survey: fixed positions, measured each year in the survey weeks
    n_pts = max(24, int(round(0.012 * headcount)))
    px = np.round(rng.uniform(2.0, PLANT[0] - 2.0, n_pts), 1)
    pyy = np.round(rng.uniform(2.0, PLANT[1] - 2.0, n_pts), 1)
    pz = _zone_of(px, pyy)
    field = _area_field(px, pyy, codes[pz])
    a_pt = np.tile(np.arange(n_pts), len(years))
    a_y = np.repeat(years, n_pts)
    a_date = _workday(np.repeat(np.array([_day(int(y), 3, 2) for y in years]), n_pts)
                      + rng.integers(0, 28, len(a_pt)))
    a_date = np.minimum(a_date, end)
    a_g = pz[a_pt]
    trend = np.where(a_y >= mid_year, np.array([gm.trend_db for gm in GROUPS])[a_g], 0.0)
    a_laeq = field[a_pt] + trend + rng.normal(0.0, 0.7, len(a_pt))
    has_peak = rng.random(len(a_pt)) < 0.5
    area = pd.DataFrame({
        "date": a_date, "kind": "area", "person_id": "", "group": codes[a_g],
        "location": np.array([gm.name for gm in GROUPS], dtype=object)[a_g] + " bay "
        + (np.floor(px[a_pt] / 20.0).astype(int) + 1).astype(str),
        "duration_h": rng.choice(np.array([0.25, 0.5, 1.0]), len(a_pt)), "laeq": a_laeq,
        "lcpeak": np.where(has_peak, a_laeq + rng.uniform(15.0, 28.0, len(a_pt)), np.nan),
        "instrument_class": np.where(rng.random(len(a_pt)) < 0.8, 1.0, 2.0),
        "x_m": px[a_pt], "y_m": pyy[a_pt], "gi": a_g,
    })
    noise = pd.concat([personal, area], ignore_index=True)
    noise = noise.sort_values(["date", "kind", "group", "person_id", "x_m"], kind="mergesort").reset_index(drop=True)
    n = len(noise)
    yr = _year_of(noise["date"].to_numpy())
    seq = noise.groupby(yr).cumcount().to_numpy() + 1
    noise["measurement_id"] = np.strings.add(np.strings.add(np.strings.add("NM-", yr.astype(_SD)), "-"),
                                             _zfill(seq.astype(_SD), 5)).astype(object)
    for c in ("osha_dose_pct", "osha_twa", "notes"):
        noise[c] = np.nan if c != "notes" else ""
    for f in OCTAVE_BANDS:
        noise[f"oct_{f}"] = np.nan
    for c in ("x_m", "y_m"):
        if c not in noise:
            noise[c] = np.nan

    # --- octave bands for a few area rows of the last two years
    area_rows = np.flatnonzero((noise["kind"].to_numpy() == "area") & (yr >= years[-1] - 1))
    n_oct = min(len(area_rows), max(8, int(round(0.01 * (noise["kind"] == "area").sum()))))
    if n_oct:
        pick = np.sort(rng.choice(area_rows, size=n_oct, replace=False))
        shape = np.array([_SPECTRA[c] for c in noise["group"].to_numpy()[pick]], dtype=float)
        shape = shape + rng.normal(0.0, 1.5, shape.shape)
        la = weighted_from_bands(shape)
        bands = np.round(shape + (noise["laeq"].to_numpy()[pick] - la)[:, None], 1)
        for j, f in enumerate(OCTAVE_BANDS):
            noise.loc[pick, f"oct_{f}"] = bands[:, j]
        noise.loc[pick, "laeq"] = np.round(weighted_from_bands(bands), 1)
        noise.loc[pick, "notes"] = "octave-band survey with a class 1 meter"
        noise.loc[pick, "instrument_class"] = 1.0

    # --- logged time histories of whole shifts (1-minute intervals)
    pers_rows = np.flatnonzero((noise["kind"].to_numpy() == "personal")
                               & np.array([gm.enrolled for gm in GROUPS])[noise["gi"].to_numpy()]
                               & (noise["duration_h"].to_numpy() >= 4.0))
    n_logs = min(len(pers_rows), max(20, int(round(0.05 * n))))
    logs = pd.DataFrame({"measurement_id": [], "start": [], "laeq": []})
    if n_logs:
        keys = rng.random(len(pers_rows))
        lrows = np.sort(pers_rows[np.argsort(keys, kind="stable")[:n_logs]])
        n_min = np.round(noise["duration_h"].to_numpy()[lrows] * 60.0).astype(int)
        lid = np.repeat(np.arange(n_logs), n_min)
        offs = np.arange(len(lid)) - np.repeat(np.cumsum(n_min) - n_min, n_min)
        frac = offs / np.repeat(n_min, n_min)
        new_seg = (rng.random(len(lid)) < 1.0 / 40.0) | (offs == 0)
        seg = np.cumsum(new_seg) - 1
        seg_lvl = rng.normal(0.0, 3.0, seg[-1] + 1)[seg]
        lv = np.repeat(noise["laeq"].to_numpy()[lrows], n_min) + seg_lvl + rng.normal(0.0, 1.2, len(lid))
        lv = lv + np.where(rng.random(len(lid)) < 0.02, rng.uniform(4.0, 9.0, len(lid)), 0.0)
        brk = ((frac >= 0.25) & (frac < 0.25 + 0.25 / np.repeat(n_min / 60.0, n_min))) \
            | ((frac >= 0.5) & (frac < 0.5 + 0.5 / np.repeat(n_min / 60.0, n_min)))
        lv = np.where(brk, 64.0 + rng.normal(0.0, 2.0, len(lid)), lv)
        keep = np.ones(len(lid), dtype=bool)
        keep[(lid == 0) & (offs >= 150) & (offs < 162)] = False  # one deliberate gap in the first log
        target = noise["laeq"].to_numpy()[lrows]
        em = _energy_mean(lv[keep], lid[keep], n_logs)
        lv = np.round(lv + (target - em)[lid], 1)
        lv = np.clip(lv, 20.0, 140.0)
        em = _energy_mean(lv[keep], lid[keep], n_logs)
        noise.loc[lrows, "laeq"] = np.round(em, 1)
        dose = _osha_dose_from_minutes(lv[keep], lid[keep], n_logs)
        noise.loc[lrows, "osha_dose_pct"] = np.round(dose, 1)
        noise.loc[lrows, "osha_twa"] = np.round(_twa_from_dose(np.round(dose, 1)), 1)
        noise.loc[lrows[0], "notes"] = "logger paused for 12 minutes (battery change)"
        start_h = np.array([gm.start_hour for gm in GROUPS])[noise["gi"].to_numpy()[lrows]]
        t0 = (noise["date"].to_numpy()[lrows].astype(np.int64) * 86400 + (start_h * 3600).astype(np.int64))
        stamps = np.datetime_as_string((np.repeat(t0, n_min) + offs * 60).astype("datetime64[s]"), unit="s")
        mids = noise["measurement_id"].to_numpy()[lrows]
        logs = pd.DataFrame({"measurement_id": mids[lid][keep], "start": stamps[keep], "laeq": lv[keep]})

    # --- dosimeter-reported OSHA dose/TWA on some other personal runs
    rep = ((noise["kind"].to_numpy() == "personal") & noise["osha_dose_pct"].isna().to_numpy()
           & (noise["laeq"].to_numpy() >= 80.0) & (rng.random(n) < 0.4))
    lavg = noise["laeq"].to_numpy()[rep] - rng.uniform(0.5, 3.0, rep.sum())
    dose = 100.0 * (noise["duration_h"].to_numpy()[rep] / 8.0) * np.power(2.0, (lavg - 90.0) / 5.0)
    noise.loc[rep, "osha_dose_pct"] = np.round(dose, 1)
    noise.loc[rep, "osha_twa"] = np.round(_twa_from_dose(np.round(dose, 1)), 1)
    worn = (noise["kind"].to_numpy() == "personal") & (noise["notes"].to_numpy() == "") & (rng.random(n) < 0.03)
    noise.loc[worn, "notes"] = "microphone on the shoulder of the dominant side"

    # --- C-weighted Leq: from the bands where measured, else from the area's spectrum shape
    shapes = np.array([_SPECTRA[g.code] for g in GROUPS], dtype=float)
    c_minus_a = weighted_from_bands(shapes, weighting="C") - weighted_from_bands(shapes)
    has_lc = rng.random(n) < np.where(noise["kind"].to_numpy() == "personal", 0.6, 0.4)
    lceq = noise["laeq"].to_numpy() + c_minus_a[noise["gi"].to_numpy()] + rng.normal(0.0, 0.5, n)
    oct_cols = [f"oct_{f}" for f in OCTAVE_BANDS]
    with_bands = noise[oct_cols].notna().all(axis=1).to_numpy()
    if with_bands.any():
        lceq[with_bands] = weighted_from_bands(noise.loc[with_bands, oct_cols].to_numpy(dtype=float), weighting="C")
    noise["lceq"] = np.where(has_lc | with_bands, lceq, np.nan)

    noise["date"] = _date_str(noise["date"].to_numpy())
    for c in ("laeq", "lcpeak", "lceq", "osha_twa"):
        noise[c] = np.round(noise[c].to_numpy(dtype=float), 1)
    noise["instrument_class"] = _int_str(noise["instrument_class"].to_numpy())
    noise = noise.sort_values("measurement_id", kind="mergesort").reset_index(drop=True)
    return noise[_NOISE_COLS], logs


def _tasks(rng: np.random.Generator, start: int, end: int) -> pd.DataFrame:
    """Return task-based samples (3-5 per task, in the review year) of the groups in TASKS."""
    years = np.array([int(_year_of(np.array([end]))[0])])
    all_years = np.arange(int(_year_of(np.array([start]))[0]), int(_year_of(np.array([end]))[0]) + 1)
    mid_year = int(all_years[len(all_years) // 2])
    rows = []
    codes = [g.code for g in GROUPS]
    for code in sorted(TASKS):  # two groups
        gi = codes.index(code)
        for task, hours, laeq in TASKS[code]:  # a handful of tasks
            n_y = rng.integers(3, 6, len(years))
            yy = np.repeat(years, n_y)
            k = len(yy)
            d = _workday(np.array([_day(int(y), 4, 1) for y in yy]) + rng.integers(0, 150, k))
            d = np.minimum(d, end)
            trend = np.where(yy >= mid_year, GROUPS[gi].trend_db, 0.0)
            rows.append(pd.DataFrame({
                "group": code, "task": task,
                "task_hours": np.maximum(hours + rng.choice(np.array([-0.5, -0.25, 0.0, 0.25, 0.5]), k), 0.25),
                "laeq": np.round(laeq + trend + rng.normal(0.0, 0.8, k), 1), "date": d,
                "sample_minutes": rng.choice(np.array([10.0, 15.0, 20.0, 30.0]), k),
                "instrument_class": np.where(rng.random(k) < 0.7, "2", "1"),
            }))
    df = pd.concat(rows, ignore_index=True)
    df = df.sort_values(["group", "task", "date", "laeq"], kind="mergesort").reset_index(drop=True)
    df["date"] = _date_str(df["date"].to_numpy())
    return df


# ---------------------------------------------------------------------------------------
# programme records


def _training(rng: np.random.Generator, ppl: pd.DataFrame, start: int, end: int) -> pd.DataFrame:
    """Return training records: induction at hire and annual sessions, some people overdue."""
    enrolled = np.array([g.enrolled for g in GROUPS])[ppl["gi"].to_numpy()]
    idx = np.flatnonzero(enrolled)
    hire = ppl["hire"].to_numpy()[idx]
    leave = np.where(np.isnan(ppl["leave"].to_numpy()[idx]), np.inf, ppl["leave"].to_numpy()[idx])
    years = np.arange(int(_year_of(np.array([start]))[0]), int(_year_of(np.array([end]))[0]) + 1)
    jan1 = np.array([_day(int(y)) for y in years])
    m = len(idx)
    doy = rng.integers(20, 330, m)
    d = _workday((jan1[None, :] + doy[:, None] + rng.integers(-20, 21, (m, len(years)))).ravel()).reshape(m, len(years))
    skip = rng.random(d.shape) < 0.05
    skip[:, -1] |= rng.random(m) < 0.07
    ok = (d > hire[:, None] + 30) & (d < leave[:, None]) & (d <= end) & ~skip
    ind = _workday(hire + rng.integers(0, 10, m))
    ok_ind = (ind >= start) & (ind <= end) & (ind < leave)
    pi = np.concatenate([np.repeat(idx[:, None], len(years), axis=1)[ok], idx[ok_ind]])
    date = np.concatenate([d[ok], ind[ok_ind]])
    topic = np.concatenate([np.full(ok.sum(), "Annual hearing conservation training", dtype=object),
                            np.full(ok_ind.sum(), "Induction: noise and hearing protection", dtype=object)])
    df = pd.DataFrame({"pi": pi, "date": date, "topic": topic})
    df = df.sort_values(["pi", "date"], kind="mergesort").drop_duplicates(["pi", "date"])
    return pd.DataFrame({"person_id": ppl["person_id"].to_numpy()[df["pi"].to_numpy()],
                         "date": _date_str(df["date"].to_numpy()), "topic": df["topic"].to_numpy()})


def _fits(rng: np.random.Generator, ppl: pd.DataFrame, start: int, end: int, refits: pd.DataFrame) -> pd.DataFrame:
    """Return protector issue and fit-test records for most enrolled people, with refits after shifts."""
    gi = ppl["gi"].to_numpy()
    enrolled = np.array([g.enrolled for g in GROUPS])[gi]
    idx = np.flatnonzero(enrolled & (rng.random(len(ppl)) < 0.985))
    hire = ppl["hire"].to_numpy()[idx]
    leave = np.where(np.isnan(ppl["leave"].to_numpy()[idx]), np.inf, ppl["leave"].to_numpy()[idx])
    m = len(idx)
    codes = [g.code for g in GROUPS]
    pick = rng.integers(0, 3, m)
    prot = np.empty(m, dtype=object)
    for code, opts in _ISSUE.items():  # five groups
        sel = gi[idx] == codes.index(code)
        prot[sel] = np.array(opts, dtype=object)[pick[sel]]
    date = np.where(hire >= start, hire + rng.integers(0, 20, m), start + rng.integers(0, 300, m))
    date = np.minimum(_workday(date), end)
    nrr = {p[0]: p[2] for p in PROTECTORS}  # label NRR per protector
    nrr_v = pd.Series(prot, dtype=object).map(nrr).to_numpy(dtype=float)
    tested = rng.random(m) < 0.35
    # field fit (PAR): most of the label value for a good fit, less for a loose one
    par = np.round(np.clip(nrr_v * rng.uniform(0.45, 0.85, m) + rng.normal(0.0, 2.0, m), 1.0, 45.0), 0)
    df = pd.DataFrame({"pi": idx, "protector_id": prot, "date": date,
                       "par": np.where(tested, par, np.nan)})
    # a later re-fit with another protector for some
    re = (rng.random(m) < 0.2)
    d2 = _workday(date + rng.integers(300, 1500, m))
    re &= (d2 <= end) & (d2 < leave)
    # ... with another protector of the group's range
    alt_pick = (pick + rng.integers(1, 3, m)) % 3
    alt = np.empty(m, dtype=object)
    for code, opts in _ISSUE.items():  # five groups
        sel = gi[idx] == codes.index(code)
        alt[sel] = np.array(opts, dtype=object)[alt_pick[sel]]
    nrr2 = pd.Series(alt, dtype=object).map(nrr).to_numpy(dtype=float)
    df2 = pd.DataFrame({"pi": idx[re], "protector_id": alt[re], "date": d2[re],
                        "par": np.round(np.clip(nrr2[re] * rng.uniform(0.4, 0.85, re.sum()), 0.0, 45.0), 0)})
    parts = [df, df2] + ([refits[["pi", "protector_id", "date", "par"]]] if len(refits) else [])
    df = pd.concat(parts, ignore_index=True)
    df["pi"] = df["pi"].astype(np.int64)
    df = df.sort_values(["pi", "date"], kind="mergesort")
    df = df.drop_duplicates(["pi", "date"])
    # a fit test late in the review year shows a poor fit for the most exposed of the loudest group
    loud = int(np.argmax([g.laeq + 10.0 * np.log10(g.shift_hours / 8.0) for g in GROUPS]))
    last = df.drop_duplicates("pi", keep="last")
    still = np.isnan(ppl["leave"].to_numpy()[last["pi"].to_numpy()]) & (gi[last["pi"].to_numpy()] == loud)
    cand = last[still & (last["date"].to_numpy() < end - 30)]
    if len(cand):
        top = cand.iloc[np.argsort(-ppl["lex_person"].to_numpy()[cand["pi"].to_numpy()], kind="stable")
                        [:len(_POOR_FITS)]]
        poor_d = np.busday_offset(np.full(len(top), end - 25).astype("datetime64[D]"), 0, roll="backward")
        df = pd.concat([df, pd.DataFrame({"pi": top["pi"].to_numpy(), "protector_id": top["protector_id"].to_numpy(),
                                          "date": poor_d.astype(np.int64),
                                          "par": np.array(_POOR_FITS[:len(top)])})], ignore_index=True)
        df = df.sort_values(["pi", "date"], kind="mergesort").drop_duplicates(["pi", "date"], keep="last")
    return pd.DataFrame({"person_id": ppl["person_id"].to_numpy()[df["pi"].to_numpy()],
                         "protector_id": df["protector_id"].to_numpy(),
                         "date": _date_str(df["date"].to_numpy()), "par": df["par"].to_numpy()})


def _schedule(first: int, step: int, n: int) -> np.ndarray:
    """Return *n* work days, the first on or after *first*, each within *step* + 3 days of the last."""
    out = np.empty(n, dtype=np.int64)
    d = first
    for i in range(n):  # a handful of calibration dates
        d = int(_workday(np.array([d]))[0])
        out[i] = d
        d += step
    return out


#: Test days of the review years without a functional check (deliberate, for the action list).
_MISSED_FUNCTIONAL_DAYS = 4


def _audiometer_checks(rng: np.random.Generator, test_days: pd.DataFrame, start: int, end: int) -> pd.DataFrame:
    """Return daily functional checks on every test day (a deliberate handful missing), annual
    acoustic and booth checks and biennial exhaustive calibrations of the two audiometers from
    their commissioning on, and one failed booth check, re-checked."""
    td = test_days.sort_values(["date", "audiometer_id"], kind="mergesort").reset_index(drop=True)
    # the missed checks fall on quiet days (one or two people tested)
    in_records = np.flatnonzero((td["date"].to_numpy() >= start) & (td["n_tests"].to_numpy() <= 2))
    miss = np.zeros(len(td), dtype=bool)
    if len(in_records):
        miss[rng.choice(in_records, size=min(_MISSED_FUNCTIONAL_DAYS, len(in_records)), replace=False)] = True
    func = td[~miss]
    rows = [pd.DataFrame({"audiometer_id": func["audiometer_id"].to_numpy(), "date": func["date"].to_numpy(),
                          "check": "functional", "result": "pass"})]
    p0, p1 = _audiometers_from(start), end
    for a, am in enumerate(AUDIOMETERS):  # two audiometers
        n_y = int(np.ceil((p1 - p0) / _DAY)) + 2
        # commissioned with an exhaustive calibration and a booth check on the first day of
        # use, then each check a little within its interval (AM-02's cycle runs a year apart)
        acu = _schedule(p0, 358, n_y + 1)
        own = [pd.DataFrame({"audiometer_id": am, "date": acu, "check": "acoustic", "result": "pass"})]
        exh = _schedule(p0, 718, n_y // 2 + 2)
        if a % 2:
            exh = np.concatenate([[p0], _schedule(p0 + 358, 718, n_y // 2 + 2)])
        own.append(pd.DataFrame({"audiometer_id": am, "date": exh, "check": "exhaustive", "result": "pass"}))
        booth_d = _schedule(p0, 358, n_y + 1)
        ob = (np.array(_BOOTH)[None, :] + (a % 2) * 1.5
              + rng.normal(0.0, 1.5, (len(booth_d), len(BOOTH_BANDS))))
        b = pd.DataFrame({"audiometer_id": am, "date": booth_d, "check": "booth", "result": "pass"})
        if am == AUDIOMETERS[1]:
            fail_i = min(2, len(booth_d) - 1)
            ob[fail_i, 0] = 44.5  # above the 40 dB of 29 CFR 1910.95 App. D at 500 Hz
            b.loc[fail_i, "result"] = "fail"
            again = pd.DataFrame({"audiometer_id": am, "date": [int(_workday(np.array([booth_d[fail_i] + 9]))[0])],
                                  "check": "booth", "result": "pass"})
            ob_again = (np.array(_BOOTH) + rng.normal(0.0, 1.0, len(BOOTH_BANDS)))[None, :]
            for j, f in enumerate(BOOTH_BANDS):
                again[f"ob_{f}"] = np.round(ob_again[:, j], 1)
            own.append(again)
        for j, f in enumerate(BOOTH_BANDS):
            b[f"ob_{f}"] = np.round(ob[:, j], 1)
        own.append(b)
        rows.extend(own)
    df = pd.concat(rows, ignore_index=True)
    df = df[df["date"] <= end]
    df = df.sort_values(["audiometer_id", "date", "check"], kind="mergesort").drop_duplicates(
        ["audiometer_id", "date", "check"])
    df["date"] = _date_str(df["date"].to_numpy())
    return df[["audiometer_id", "date", "check", "result"] + [f"ob_{f}" for f in BOOTH_BANDS]]


# ---------------------------------------------------------------------------------------
# programme.yaml and narrative pages


def _yaml_value(value: Any) -> str:
    """Return a YAML flow representation of one option value."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return f"{value:g}" if isinstance(value, float) else str(value)
    if isinstance(value, list):
        return "[" + ", ".join(_yaml_value(v) for v in value) + "]"
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return json.dumps(str(value), ensure_ascii=False)


#: First line of a demo programme.yaml (says what the folder holds; it guards nothing).
_YAML_HEADER = f"# programme.yaml of the {ORGANISATION} demonstration programme (invented workplace)."

#: The list of files a demo wrote, one "sha256  path" line each (the format of sha256sum).
#: A non-empty folder is only written into when it holds exactly the files listed there.
MANIFEST = ".hcpsite-demo.sha256"
_MANIFEST_LINE = re.compile(r"^(?P<digest>[0-9a-f]{64})  (?P<rel>[A-Za-z0-9_][A-Za-z0-9_./-]*)$")


def _sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def _refuse(folder: Path, why: str) -> HcpsiteError:
    return HcpsiteError(f"demo: {folder}: {why}; nothing was written. A demo only writes into a new or "
                        f"empty folder, or over exactly what an earlier demo wrote (listed in {MANIFEST}); "
                        "name a new folder")


def _read_manifest(folder: Path) -> dict[str, str]:
    """Return path -> sha256 of the manifest in *folder*; raise when it is absent or malformed."""
    path = folder / MANIFEST
    if path.is_symlink() or not path.is_file():
        raise _refuse(folder, f"not empty and holds no {MANIFEST} (not a folder written by 'hcpsite demo')")
    if path.stat().st_size > 16 * 1024 * 1024:
        raise _refuse(folder, f"{MANIFEST} is too large to be a demo's list of files")
    listed: dict[str, str] = {}
    for n, line in enumerate(path.read_text(encoding="utf-8", errors="replace").splitlines(), 1):
        m = _MANIFEST_LINE.match(line)
        parts = m.group("rel").split("/") if m else []
        if not m or any(p in ("", ".", "..") for p in parts) or m.group("rel") == MANIFEST:
            raise _refuse(folder, f"{MANIFEST}:{n}: not a line the demo writes")
        listed[m.group("rel")] = m.group("digest")
    return listed


def _check_target(folder: Path) -> dict[str, str]:
    """Return the files of an earlier demo in *folder* (path -> sha256); raise unless safe to write.

    Safe: *folder* does not exist, is empty, or holds exactly files listed in its manifest,
    each unchanged (a listed file may be missing). Anything else (another file, a changed
    file, a folder the demo did not make, a link) refuses before anything is touched.
    """
    if folder.is_symlink():
        raise _refuse(folder, "is a symbolic link")
    if not folder.exists():
        return {}
    if not folder.is_dir():
        raise _refuse(folder, "exists and is not a folder")
    if not any(folder.iterdir()):
        return {}
    listed = _read_manifest(folder)
    folders = {"/".join(rel.split("/")[:i]) for rel in listed for i in range(1, rel.count("/") + 1)}
    for here, dirs, files in os.walk(folder):
        base = Path(here).relative_to(folder).as_posix()
        for name in sorted(dirs + files):
            path = Path(here) / name
            rel = name if base == "." else f"{base}/{name}"
            if path.is_symlink():
                raise _refuse(folder, f"{rel} is a symbolic link the demo did not write")
            if name in dirs:
                if rel not in folders:
                    raise _refuse(folder, f"{rel}/ is a folder the demo did not make")
            elif rel == MANIFEST:
                continue
            elif rel not in listed:
                raise _refuse(folder, f"{rel} was not written by the demo")
            elif not path.is_file() or _sha256_file(path) != listed[rel]:
                raise _refuse(folder, f"{rel} was changed after the demo wrote it")
    return listed


def _remove_earlier(folder: Path, listed: dict[str, str]) -> None:
    """Remove the files an earlier demo listed in its manifest (and folders left empty by that)."""
    (folder / MANIFEST).unlink(missing_ok=True)
    parents: set[Path] = set()
    for rel in sorted(listed):
        path = folder.joinpath(*rel.split("/"))
        path.unlink(missing_ok=True)
        parents.update(p for p in path.parents if p != folder and folder in p.parents)
    for p in sorted(parents, key=lambda q: len(q.parts), reverse=True):
        try:
            p.rmdir()
        except OSError:
            pass


class _DemoWriter:
    """Write new files below one folder and remember their digests for the manifest."""

    def __init__(self, folder: Path) -> None:
        self.folder = folder
        self.digests: dict[str, str] = {}

    def write(self, rel: str, data: bytes) -> None:
        """Write *data* to the new file *rel* (never over an existing file)."""
        path = self.folder.joinpath(*rel.split("/"))
        path.parent.mkdir(parents=True, exist_ok=True)
        try:
            with open(path, "xb") as fh:
                try:
                    fh.write(data)
                except BaseException:
                    path.unlink(missing_ok=True)  # made by this call: a partial file is not left behind
                    raise
        except OSError as exc:
            if exc.filename is None and exc.errno is not None:  # e.g. a full disk: say where
                raise OSError(exc.errno, exc.strerror or os.strerror(exc.errno), str(path)) from exc
            raise
        self.digests[rel] = hashlib.sha256(data).hexdigest()

    def write_manifest(self) -> None:
        """Write the manifest: one "sha256  path" line per written file, sorted by path."""
        text = "".join(f"{self.digests[rel]}  {rel}\n" for rel in sorted(self.digests))
        with open(self.folder / MANIFEST, "x", encoding="utf-8", newline="\n") as fh:
            fh.write(text)


def programme_yaml(end_year: int, hours_worked: float) -> str:
    """Return programme.yaml text showing every option, each with its documentation."""
    import datetime as dt

    values: dict[str, Any] = {
        "title": f"Hearing conservation review {end_year}",
        "organisation": ORGANISATION,
        "period.start": dt.date(end_year, 1, 1),
        "period.end": dt.date(end_year, 12, 31),
        "rules": "osha-1910.95",
        "compare_rules": ["niosh-rel", "eu-2003-10"],
        "audiometry.age_correction": True,
        "privacy.min_group_size": 5,
        "hours_worked": float(hours_worked),
        "site_url_note": "Synthetic demonstration data of an invented workplace.",
    }
    lines = [_YAML_HEADER,
             "# Every option is shown with its documentation; values not set here are the defaults.", ""]
    for name, kind, default, doc in iter_options(Config):
        depth = name.count(".")
        indent = "  " * depth
        key = name.rsplit(".", 1)[-1]
        if kind == "section":
            lines.append(f"{indent}# {doc}")
            lines.append(f"{indent}{key}:")
            continue
        lines.append(f"{indent}# {doc}")
        lines.append(f"{indent}{key}: {_yaml_value(values.get(name, default))}")
    return "\n".join(lines) + "\n"


_ABOUT = """---
title: About this site
order: 1
---
This review site was built from the demonstration records of **{org}**, a press shop and
finishing plant that does not exist. Every person, measurement, audiogram, protector and
decision in it was generated by a program; no record describes a real workplace or a
real person's hearing.

The site shows, for the review period {start} to {end}:

- noise exposure of each similar exposure group, from personal dosimetry, task-based
  sampling and an area survey of the plant floor;
- how the issued hearing protectors compare with the measured levels;
- audiometric results: baselines, periodic tests, retests and the shifts that the
  reviewer looked at;
- programme records: training, written notices, protector fits and audiometer checks.

## How to read the figures

The figures are computed from the records by fixed published methods and support the
people who run the programme. They do not replace review by a qualified audiologist or
physician, nor the judgement of a competent noise assessor. A flagged shift is a prompt
for professional review, not a finding about anyone's health.

Person codes on the public pages are pseudonyms; names and dates of birth are never
shown. Groups with fewer people than the privacy threshold show "suppressed" instead of
figures.
"""

_SCOPE = """---
title: Programme scope and responsibilities
order: 2
---
## Who is in the programme

Everyone whose work takes them into the assembly hall, the press shop, the grinding and
fettling shop, the warehouse or the maintenance workshop is enrolled: baseline audiogram
within six months of starting, a yearly audiogram, yearly training and issued hearing
protectors with a fit check. Office and planning staff are not enrolled; their work areas
are included in the area survey.

## Similar exposure groups

| group | work | shift |
| --- | --- | --- |
| ASM | assembly lines | 8 h |
| GRD | grinding and fettling | 8 h |
| MNT | maintenance crew (task-based sampling) | 8 h |
| OFF | offices and planning | 8 h |
| PRS | press shop | 12 h |
| WHS | forklift and warehouse | 10 h |

## Responsibilities

- **Site manager**: resources for noise control and for the programme.
- **Competent noise assessor**: the measurement plan, dosimetry, the area survey and the
  judgement of each group's exposure.
- **Occupational-health nurse**: audiometric tests, retests, notices to workers and the
  training records.
- **Reviewing audiologist or physician**: every shift flagged by the figures, the decision
  to confirm or cancel it, revised baselines and referrals.
- **Supervisors**: protector use on the floor and attendance at tests and training.

## Records kept

Records are kept for the duration of employment plus the period the applicable rules
require. This site is a review copy: the signed records stay in the occupational-health
office.
"""


def _pages(out: _DemoWriter, end_year: int) -> None:
    """Write the two narrative pages."""
    fmt = {"org": ORGANISATION, "start": f"{end_year}-01-01", "end": f"{end_year}-12-31"}
    out.write("pages/about.md", _ABOUT.format(**fmt).encode("utf-8"))
    out.write("pages/scope.md", _SCOPE.encode("utf-8"))


# ---------------------------------------------------------------------------------------
# the entry point


def write_demo(folder: Path | str, people: int = 250, years: int = 6, seed: int = 2026,
               end_year: int = 2025) -> dict:
    """Write a complete synthetic programme folder of the invented workplace; return counts.

    *people* is the headcount of the positions (leavers are replaced, so people.csv holds
    somewhat more rows); *years* the number of calendar years of records ending with
    *end_year*, the review period. The same arguments always write the same bytes. A
    folder that is not empty is only written into when it holds exactly the files an
    earlier demo wrote (its manifest, ``MANIFEST``); only those files are removed.
    """
    if people < len(GROUPS):
        raise UsageError(f"demo: --people must be at least {len(GROUPS)} (one per similar exposure group)")
    if years < 1:
        raise UsageError("demo: --years must be at least 1")
    folder = Path(folder)
    earlier = _check_target(folder)
    rng = np.random.default_rng(seed)
    start = _day(end_year - years + 1)
    end = _day(end_year, 12, 31)

    ppl = _people(rng, people, start, end)
    ev, hl, reviews, notices, refits, test_days = _audiograms(rng, ppl, start, end)
    noise, logs = _noise(rng, ppl, start, end, people)
    tasks = _tasks(rng, start, end)
    training = _training(rng, ppl, start, end)
    fits = _fits(rng, ppl, start, end, refits)
    checks = _audiometer_checks(rng, test_days, start, end)
    audiograms = _audiogram_frame(rng, ppl, ev, hl)

    pid = ppl["person_id"].to_numpy()
    people_df = pd.DataFrame({
        "person_id": pid, "group": ppl["group"].to_numpy(), "sex": ppl["sex"].to_numpy(),
        "birth_date": _date_str(ppl["birth"].to_numpy()), "hire_date": _date_str(ppl["hire"].to_numpy()),
        "leave_date": _date_str(ppl["leave"].to_numpy()), "department": ppl["department"].to_numpy(),
        "job_title": ppl["job_title"].to_numpy(), "name": ppl["name"].to_numpy(),
    })[_PEOPLE_COLS]
    groups_df = pd.DataFrame({
        "group": [g.code for g in GROUPS], "name": [g.name for g in GROUPS],
        "description": [g.description for g in GROUPS], "shift_hours": [g.shift_hours for g in GROUPS],
        "days_per_week": [g.days_per_week for g in GROUPS],
    }).sort_values("group", kind="mergesort")
    reviews = reviews.sort_values(["pi", "ear", "date", "decision"], kind="mergesort")
    reviews_df = pd.DataFrame({
        "person_id": pid[reviews["pi"].to_numpy()], "ear": reviews["ear"].to_numpy(),
        "date": _date_str(reviews["date"].to_numpy()), "decision": reviews["decision"].to_numpy(),
        "audiogram_date": _date_str(reviews["audiogram_date"].to_numpy()),
        "reviewer_role": reviews["reviewer_role"].to_numpy(), "note": reviews["note"].to_numpy(),
    })
    notices = notices.sort_values(["pi", "date"], kind="mergesort")
    notices_df = pd.DataFrame({"person_id": pid[notices["pi"].to_numpy()],
                               "date": _date_str(notices["date"].to_numpy()),
                               "about": notices["about"].to_numpy()})
    protectors_df = protector_catalogue()

    # hours worked in the review period: each person's days employed in it
    hire = ppl["hire"].to_numpy()
    leave = np.where(np.isnan(ppl["leave"].to_numpy()), end, ppl["leave"].to_numpy())
    p0 = _day(end_year)
    days_in = np.clip(np.minimum(leave, end) - np.maximum(hire, p0) + 1, 0, None)
    hours = float(np.round(days_in.sum() / 365.0 * HOURS_PER_PERSON_YEAR, -2))

    _remove_earlier(folder, earlier)
    folder.mkdir(parents=True, exist_ok=True)
    out = _DemoWriter(folder)
    try:
        _write_csv(people_df, out, "data/people.csv")
        _write_csv(groups_df, out, "data/groups.csv")
        _write_csv(noise, out, "data/noise.csv")
        _write_csv(tasks, out, "data/tasks.csv")
        _write_csv(audiograms, out, "data/audiograms.csv")
        _write_csv(reviews_df, out, "data/reviews.csv")
        _write_csv(notices_df, out, "data/notices.csv")
        _write_csv(training, out, "data/training.csv")
        _write_csv(protectors_df, out, "data/protectors.csv")
        _write_csv(fits, out, "data/protector_fits.csv")
        _write_csv(checks, out, "data/audiometers.csv")
        _write_logs(logs, out, "data/noise_logs")
        out.write("programme.yaml", programme_yaml(end_year, hours).encode("utf-8"))
        _pages(out, end_year)
    finally:  # the files written so far stay removable by the next demo
        out.write_manifest()

    counts = {
        "headcount": people, "years": years, "files": len(out.digests),
        "people": len(people_df), "groups": len(groups_df), "noise": len(noise),
        "noise_logs": int(logs["measurement_id"].nunique()),
        "noise_log_rows": len(logs), "tasks": len(tasks),
        "audiograms": len(audiograms), "reviews": len(reviews_df), "notices": len(notices_df),
        "training": len(training), "protectors": len(protectors_df), "protector_fits": len(fits),
        "audiometers": len(checks), "hours_worked": hours,
    }
    log.info("demo programme written to %s: %s", folder, counts)
    return counts
