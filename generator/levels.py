"""Decibel arithmetic: energetic sums and means, Leq, LEX, dose, A/C weightings, octave bands.

Everything here is a pure, numpy-vectorised function of arrays (scalars work too). Levels
are in dB; durations in hours unless a name says otherwise. Nothing here knows about the
programme's files, pages or rule sets (callers pass the numbers of a rule set in).
"""
from __future__ import annotations

import math
from typing import Sequence

import numpy as np
import numpy.typing as npt

ArrayLike = npt.ArrayLike

#: Reference sound pressure p0 (Pa), ISO/TR 25417:2007.
P0 = 20e-6
#: Reference sound intensity I0 (W/m^2), ISO/TR 25417:2007.
I0 = 1e-12
#: Reference sound power W0 (W), ISO/TR 25417:2007.
W0 = 1e-12
#: Reference duration T0 of LEX,8h (hours).
T0_HOURS = 8.0
#: Days of the nominal week of LEX,w (five 8-h days).
NOMINAL_WEEK_DAYS = 5.0

#: Octave-band centres (nominal, Hz) of the octave-band inputs.
OCTAVE_NOMINAL = (63, 125, 250, 500, 1000, 2000, 4000, 8000)


# ---------------------------------------------------------------------------------------
# energy <-> level


def energy(levels: ArrayLike) -> np.ndarray:
    """Return relative energies 10^(L/10) of levels *levels* (NaN stays NaN)."""
    return np.power(10.0, 0.1 * np.asarray(levels, dtype=float))


def level(energies: ArrayLike) -> np.ndarray:
    """Return levels 10 lg(E) of relative energies (0 -> -inf)."""
    e = np.asarray(energies, dtype=float)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(e)


def db_sum(levels: ArrayLike, axis: int | None = None) -> np.ndarray:
    """Return the energetic sum 10 lg Σ 10^(L/10) over *axis* (NaNs ignored)."""
    return level(np.nansum(energy(levels), axis=axis))


def db_mean(levels: ArrayLike, weights: ArrayLike | None = None, axis: int | None = None) -> np.ndarray:
    """Return the energetic (optionally weighted) mean 10 lg[Σ w 10^(L/10) / Σ w] (NaNs ignored)."""
    L = np.asarray(levels, dtype=float)
    w = np.ones_like(L) if weights is None else np.broadcast_to(np.asarray(weights, dtype=float), L.shape)
    ok = ~np.isnan(L) & ~np.isnan(w)
    e = np.where(ok, energy(np.where(ok, L, 0.0)) * w, 0.0)
    ws = np.where(ok, w, 0.0).sum(axis=axis)
    with np.errstate(invalid="ignore", divide="ignore"):
        return level(e.sum(axis=axis) / ws)


def leq(levels: ArrayLike, durations: ArrayLike | None = None) -> float:
    """Return the Leq of interval levels with equal (None) or given durations."""
    return float(db_mean(levels, durations))


def db_add(a: ArrayLike, b: ArrayLike) -> np.ndarray:
    """Return the energetic sum of two levels, element-wise."""
    return level(energy(a) + energy(b))


def db_subtract(total: ArrayLike, part: ArrayLike) -> np.ndarray:
    """Return the level left after removing *part* from *total* (NaN where part >= total)."""
    with np.errstate(invalid="ignore"):
        diff = energy(total) - energy(part)
        return np.where(diff > 0, level(np.where(diff > 0, diff, 1.0)), np.nan)


def grouped_db_mean(levels: ArrayLike, ids: ArrayLike, n: int | None = None,
                    weights: ArrayLike | None = None) -> np.ndarray:
    """Return the energetic mean of *levels* per integer id 0..n-1 (NaN for empty ids)."""
    L = np.asarray(levels, dtype=float)
    i = np.asarray(ids, dtype=np.int64)
    w = np.ones_like(L) if weights is None else np.asarray(weights, dtype=float)
    n = int(i.max()) + 1 if n is None and i.size else (n or 0)
    num = np.bincount(i, weights=energy(L) * w, minlength=n)
    den = np.bincount(i, weights=w, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return level(num / den)


# ---------------------------------------------------------------------------------------
# daily and weekly exposure


def lex_8h(laeq: ArrayLike, hours: ArrayLike) -> np.ndarray:
    """Return LEX,8h = LAeq,Te + 10 lg(Te / 8 h)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(laeq, dtype=float) + 10.0 * np.log10(np.asarray(hours, dtype=float) / T0_HOURS)


def laeq_from_lex(lex: ArrayLike, hours: ArrayLike) -> np.ndarray:
    """Return the LAeq over *hours* that gives LEX,8h *lex* (the inverse of lex_8h)."""
    return np.asarray(lex, dtype=float) - 10.0 * np.log10(np.asarray(hours, dtype=float) / T0_HOURS)


def lex_8h_of_parts(laeqs: ArrayLike, hours: ArrayLike) -> float:
    """Return the LEX,8h of a day made of parts (LAeq, duration): 10 lg Σ (T/8) 10^(L/10)."""
    L = np.asarray(laeqs, dtype=float)
    t = np.asarray(hours, dtype=float)
    return float(level(np.nansum(t / T0_HOURS * energy(L))))


def lex_weekly(daily_lex: ArrayLike, nominal_days: float = NOMINAL_WEEK_DAYS) -> float:
    """Return LEX,w = 10 lg[(1/5) Σ_k 10^(LEX,8h,k / 10)] over the days worked in one week."""
    return float(level(np.nansum(energy(daily_lex)) / nominal_days))


# ---------------------------------------------------------------------------------------
# dose and TWA (criterion level, criterion time, exchange rate, threshold)


def reference_duration(levels: ArrayLike, criterion_level: float, criterion_hours: float,
                       exchange_rate: float) -> np.ndarray:
    """Return the allowed duration T = Tc / 2^((L - Lc)/q) in hours for each level."""
    L = np.asarray(levels, dtype=float)
    return criterion_hours / np.power(2.0, (L - criterion_level) / exchange_rate)


def dose_rate(levels: ArrayLike, criterion_level: float, criterion_hours: float, exchange_rate: float,
              threshold: float | None = None, upper_limit: float | None = None,
              clip_upper: bool = False) -> np.ndarray:
    """Return dose in percent per hour at each level (0 below the threshold)."""
    L = np.asarray(levels, dtype=float)
    if clip_upper and upper_limit is not None:
        L = np.minimum(L, upper_limit)
    # 100 / T(L) = (100 / Tc) · 2^((L - Lc)/q), computed in place on one temporary array
    rate = np.array(L - criterion_level, dtype=float)
    rate *= 1.0 / exchange_rate
    np.exp2(rate, out=rate)
    rate *= 100.0 / criterion_hours
    keep = ~np.isnan(L) if threshold is None else (L >= threshold)
    rate[~keep] = 0.0
    return rate


def dose_pct(levels: ArrayLike, hours: ArrayLike, criterion_level: float, criterion_hours: float,
             exchange_rate: float, threshold: float | None = None, upper_limit: float | None = None,
             clip_upper: bool = False) -> float:
    """Return the dose D = 100 Σ C_i / T_i (percent) of intervals at *levels* lasting *hours*."""
    r = dose_rate(levels, criterion_level, criterion_hours, exchange_rate, threshold, upper_limit, clip_upper)
    return float(np.sum(r * np.broadcast_to(np.asarray(hours, dtype=float), r.shape)))


def grouped_dose_pct(levels: ArrayLike, hours: ArrayLike, ids: ArrayLike, n: int,
                     criterion_level: float, criterion_hours: float, exchange_rate: float,
                     threshold: float | None = None, upper_limit: float | None = None,
                     clip_upper: bool = False) -> np.ndarray:
    """Return the dose (percent) per integer id 0..n-1 of intervals (level, hours, id)."""
    r = dose_rate(levels, criterion_level, criterion_hours, exchange_rate, threshold, upper_limit, clip_upper)
    h = np.broadcast_to(np.asarray(hours, dtype=float), r.shape)
    return np.bincount(np.asarray(ids, dtype=np.int64), weights=r * h, minlength=n)


def steady_dose_pct(laeq: ArrayLike, hours: ArrayLike, criterion_level: float, criterion_hours: float,
                    exchange_rate: float, threshold: float | None = None) -> np.ndarray:
    """Return the dose of a steady level *laeq* held for *hours* (element-wise)."""
    return dose_rate(laeq, criterion_level, criterion_hours, exchange_rate, threshold) * \
        np.asarray(hours, dtype=float)


def twa_from_dose(dose: ArrayLike, criterion_level: float, exchange_rate: float) -> np.ndarray:
    """Return the TWA = q/lg2 · lg(D/100) + Lc (29 CFR 1910.95 App. A for q = 5, Lc = 90)."""
    d = np.asarray(dose, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return exchange_rate / math.log10(2.0) * np.log10(d / 100.0) + criterion_level


def dose_from_twa(twa: ArrayLike, criterion_level: float, exchange_rate: float) -> np.ndarray:
    """Return the dose (percent) of TWA *twa*: the inverse of twa_from_dose."""
    return 100.0 * np.power(2.0, (np.asarray(twa, dtype=float) - criterion_level) / exchange_rate)


# ---------------------------------------------------------------------------------------
# pressure, intensity


def pressure_to_level(p: ArrayLike, p0: float = P0) -> np.ndarray:
    """Return the sound pressure level 20 lg(p/p0) of an r.m.s. or peak pressure in Pa."""
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.asarray(p, dtype=float) / p0)


def level_to_pressure(L: ArrayLike, p0: float = P0) -> np.ndarray:
    """Return the pressure (Pa) of sound pressure level *L*."""
    return p0 * np.power(10.0, np.asarray(L, dtype=float) / 20.0)


def intensity_to_level(i: ArrayLike, i0: float = I0) -> np.ndarray:
    """Return the intensity (or power, with W0) level 10 lg(I/I0)."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.asarray(i, dtype=float) / i0)


def level_to_intensity(L: ArrayLike, i0: float = I0) -> np.ndarray:
    """Return the intensity (W/m^2) of intensity level *L*."""
    return i0 * np.power(10.0, np.asarray(L, dtype=float) / 10.0)


# ---------------------------------------------------------------------------------------
# IEC 61672-1 frequency weightings


def weighting_poles() -> tuple[float, float, float, float]:
    """Return the exact pole frequencies f1, f2, f3, f4 (Hz) derived as in IEC 61672-1 Annex E."""
    fr = 1000.0
    fl = 10.0 ** 1.5
    fh = 10.0 ** 3.9
    fa = 10.0 ** 2.45
    d = math.sqrt(0.5)
    c = fl ** 2 * fh ** 2
    b = (1.0 / (1.0 - d)) * (fr ** 2 + fl ** 2 * fh ** 2 / fr ** 2 - d * (fl ** 2 + fh ** 2))
    root = math.sqrt(b * b - 4.0 * c)
    f1 = math.sqrt((-b - root) / 2.0)
    f4 = math.sqrt((-b + root) / 2.0)
    f2 = (3.0 - math.sqrt(5.0)) / 2.0 * fa
    f3 = (3.0 + math.sqrt(5.0)) / 2.0 * fa
    return f1, f2, f3, f4


_F1, _F2, _F3, _F4 = weighting_poles()
#: Normalisation constants of IEC 61672-1 Annex E (dB): the weightings are 0 dB at 1 kHz.
A1000 = -2.000
C1000 = -0.062

#: (name, value, unit, source) of the constants used here, for the methods page.
PARAMETERS: list[tuple[str, object, str, str]] = [
    ("reference sound pressure p0", P0, "Pa", "ISO/TR 25417:2007"),
    ("reference sound intensity I0 and power W0", I0, "W/m², W", "ISO/TR 25417:2007"),
    ("reference duration T0 of LEX,8h", T0_HOURS, "h", "ISO 1999:2013 3.6; ISO 9612:2009 Eq. (12)"),
    ("nominal week of LEX,w", f"{NOMINAL_WEEK_DAYS:g} days of 8 h", "", "ISO 1999:1990 3.6 note 2"),
    ("weighting poles f1, f2, f3, f4", f"{_F1:.4f}, {_F2:.4f}, {_F3:.4f}, {_F4:.3f}", "Hz",
     "IEC 61672-1:2013 Annex E (exact derivation)"),
    ("normalisation A1000, C1000", f"{A1000:.3f}, {C1000:.3f}", "dB", "IEC 61672-1:2013 Annex E.4.2"),
    ("octave band weightings", "formula at the exact base-10 mid-band frequency, rounded to 0.1 dB", "dB",
     "IEC 61672-1:2013 Table 3"),
    ("reference duration", "T = Tc / 2^((L − Lc)/q)", "h", "29 CFR 1910.95 App. A, Table G-16a (q = 5)"),
    ("dose", "D = 100 Σ C_i / T_i (levels below the threshold count 0)", "%", "29 CFR 1910.95 App. A"),
]


def c_weighting(freq: ArrayLike) -> np.ndarray:
    """Return the C-weighting (dB) at frequencies *freq* (Hz), IEC 61672-1 Eq. E.1."""
    f2 = np.asarray(freq, dtype=float) ** 2
    return 20.0 * np.log10(_F4 ** 2 * f2 / ((f2 + _F1 ** 2) * (f2 + _F4 ** 2))) - C1000


def a_weighting(freq: ArrayLike) -> np.ndarray:
    """Return the A-weighting (dB) at frequencies *freq* (Hz), IEC 61672-1 Eq. E.6."""
    f2 = np.asarray(freq, dtype=float) ** 2
    num = _F4 ** 2 * f2 ** 2
    den = (f2 + _F1 ** 2) * np.sqrt(f2 + _F2 ** 2) * np.sqrt(f2 + _F3 ** 2) * (f2 + _F4 ** 2)
    return 20.0 * np.log10(num / den) - A1000


def exact_band_centres(nominal: Sequence[float], fraction: int = 1) -> np.ndarray:
    """Return base-10 exact mid-band frequencies 1000·10^(x/10) for nominal centres (1 or 1/3 octave)."""
    nom = np.asarray(nominal, dtype=float)
    # nearest band index x on the 1/3-octave grid (x = 3n for octaves)
    x = np.round(10.0 * np.log10(nom / 1000.0))
    if fraction == 1:
        x = 3.0 * np.round(x / 3.0)
    return 1000.0 * np.power(10.0, x / 10.0)


def weighted_from_bands(band_levels: ArrayLike, nominal: Sequence[float] = OCTAVE_NOMINAL,
                        weighting: str = "A", fraction: int = 1) -> np.ndarray:
    """Return the weighted level from band levels (last axis = bands, NaN bands ignored).

    The weighting is the IEC 61672-1 formula at the exact base-10 mid-band frequency,
    rounded to 0.1 dB as in Table 3. Rows with no band at all give NaN.
    """
    f = exact_band_centres(nominal, fraction)
    w = np.round(a_weighting(f) if weighting.upper() == "A" else c_weighting(f), 1)
    L = np.asarray(band_levels, dtype=float)
    e = np.where(np.isnan(L), 0.0, energy(L + w))
    total = e.sum(axis=-1)
    has = (~np.isnan(L)).any(axis=-1)
    return np.where(has, level(np.where(has, total, 1.0)), np.nan)
