"""Population models of hearing: age effect (ISO 7029:2017), noise-induced permanent
threshold shift (ISO 1999:2013) and the 29 CFR 1910.95 Appendix F age-correction tables.

All functions are numpy-vectorised: every argument may be a scalar or an array, and the
arguments broadcast against each other. Results are ``float64`` arrays (0-d for scalar
input), ``NaN`` where a value is not defined (unknown sex, a frequency the model does not
cover, a missing age).

Fractions follow the ISO 1999 convention: ``q`` is the fraction of the population whose
hearing is *worse* than the returned value, so ``q = 0.1`` is the most susceptible tenth
(a larger threshold) and ``q = 0.9`` the least susceptible (a smaller one); ``q = 0.5`` is
the median. The standard-normal multiplier is ``k = z(1 - q)`` (ISO 1999:2013 Table 2).

These are population statistics. They describe groups, not whether a particular person's
hearing is or is not normal, and they never replace a qualified professional's review.
"""
from __future__ import annotations

import logging
from statistics import NormalDist
from typing import Any

import numpy as np

log = logging.getLogger(__name__)

__all__ = [
    "ISO7029_FREQS", "ISO1999_FREQS", "APPF_FREQS", "APPF_AGES",
    "iso7029_median", "iso7029_percentile", "iso7029_spread",
    "iso1999_nipts", "iso1999_combine", "appf_correction", "normal_quantile",
]

# ---------------------------------------------------------------------------------------
# ISO 7029:2017 — statistical distribution of hearing thresholds related to age and sex

#: Frequencies (Hz) of ISO 7029:2017 Table 1.
ISO7029_FREQS = (125, 250, 500, 750, 1000, 1500, 2000, 3000, 4000, 6000, 8000)

# ISO 7029:2017 coefficients as transcribed from the standard by a third party (one source);
# the printed check values (male 60 y, 4 kHz median 20.2085 dB; 1 kHz s_u 10.1533 dB) are
# reproduced by the tests.

#: ISO 7029:2017 Table 1: median deviation from age 18, ΔH = a·(Y − 18)^b; (a, b) per
#: frequency for males and females.
_ISO7029_AB = {
    "M": np.array([
        (2.50e-6, 3.841), (1.39e-4, 2.832), (4.59e-4, 2.537), (5.70e-4, 2.512),
        (7.02e-4, 2.494), (1.09e-3, 2.446), (1.56e-3, 2.404), (2.54e-3, 2.350),
        (3.40e-3, 2.325), (4.53e-3, 2.315), (5.06e-3, 2.328),
    ]),
    "F": np.array([
        (6.16e-4, 2.451), (3.98e-4, 2.568), (2.61e-4, 2.708), (2.25e-4, 2.775),
        (2.21e-4, 2.805), (2.53e-4, 2.813), (3.12e-4, 2.792), (4.88e-4, 2.728),
        (7.37e-4, 2.660), (1.47e-3, 2.539), (2.53e-3, 2.439),
    ]),
}

#: ISO 7029:2017 Tables 2-5: spread polynomials s(Y) = Σ c_i·(Y − 18)^i, i = 0..5,
#: upper (worse-than-median side) and lower (better side), per sex and frequency.
_ISO7029_SPREAD = {
    ("M", "u"): np.array([
        (4.63, 0.645, -8.85e-2, 3.69e-3, -5.98e-5, 3.39e-7),
        (5.27, 0.710, -9.13e-2, 3.64e-3, -5.74e-5, 3.22e-7),
        (4.98, 0.751, -9.20e-2, 3.68e-3, -5.84e-5, 3.28e-7),
        (4.65, 0.733, -8.81e-2, 3.59e-3, -5.76e-5, 3.24e-7),
        (4.42, 0.714, -8.54e-2, 3.57e-3, -5.82e-5, 3.29e-7),
        (4.14, 0.679, -8.04e-2, 3.52e-3, -5.89e-5, 3.35e-7),
        (4.10, 0.632, -7.53e-2, 3.46e-3, -5.94e-5, 3.40e-7),
        (4.29, 0.530, -6.28e-2, 3.09e-3, -5.37e-5, 2.95e-7),
        (4.68, 0.455, -5.52e-2, 2.95e-3, -5.30e-5, 2.92e-7),
        (5.61, 0.363, -4.72e-2, 2.92e-3, -5.58e-5, 3.12e-7),
        (6.62, 0.291, -4.16e-2, 2.92e-3, -5.85e-5, 3.33e-7),
    ]),
    ("M", "l"): np.array([
        (3.34, 0.131, -2.02e-2, 1.12e-3, -2.28e-5, 1.57e-7),
        (3.32, 0.230, -2.54e-2, 1.20e-3, -2.27e-5, 1.46e-7),
        (3.43, 0.362, -4.11e-2, 1.87e-3, -3.44e-5, 2.21e-7),
        (3.60, 0.384, -4.43e-2, 1.98e-3, -3.55e-5, 2.22e-7),
        (3.77, 0.363, -4.19e-2, 1.82e-3, -3.14e-5, 1.89e-7),
        (3.93, 0.365, -4.22e-2, 1.79e-3, -2.96e-5, 1.70e-7),
        (4.01, 0.387, -4.47e-2, 1.87e-3, -3.02e-5, 1.69e-7),
        (4.11, 0.405, -4.56e-2, 1.86e-3, -2.83e-5, 1.46e-7),
        (4.09, 0.439, -4.78e-2, 1.92e-3, -2.84e-5, 1.40e-7),
        (4.01, 0.497, -4.97e-2, 1.93e-3, -2.67e-5, 1.18e-7),
        (3.90, 0.559, -5.62e-2, 2.40e-3, -3.92e-5, 2.29e-7),
    ]),
    ("F", "u"): np.array([
        (5.05, 0.400, -4.60e-2, 1.73e-3, -2.75e-5, 1.71e-7),
        (5.01, 0.481, -4.88e-2, 1.80e-3, -2.81e-5, 1.67e-7),
        (4.68, 0.510, -5.16e-2, 1.95e-3, -3.07e-5, 1.77e-7),
        (4.45, 0.511, -5.25e-2, 2.03e-3, -3.18e-5, 1.81e-7),
        (4.34, 0.492, -5.15e-2, 2.03e-3, -3.18e-5, 1.78e-7),
        (4.23, 0.479, -5.12e-2, 2.07e-3, -3.26e-5, 1.80e-7),
        (4.26, 0.456, -4.91e-2, 2.01e-3, -3.16e-5, 1.70e-7),
        (4.36, 0.476, -5.15e-2, 2.19e-3, -3.51e-5, 1.91e-7),
        (4.61, 0.477, -5.07e-2, 2.19e-3, -3.51e-5, 1.88e-7),
        (5.22, 0.483, -4.83e-2, 2.13e-3, -3.39e-5, 1.74e-7),
        (5.84, 0.516, -4.89e-2, 2.18e-3, -3.49e-5, 1.77e-7),
    ]),
    ("F", "l"): np.array([
        (3.64, 0.047, 2.28e-3, -6.68e-5, -8.72e-7, 2.30e-8),
        (3.11, 0.226, -7.71e-3, 9.83e-5, -7.11e-7, 9.02e-9),
        (2.98, 0.338, -1.74e-2, 3.53e-4, -2.78e-6, 1.01e-8),
        (3.03, 0.378, -2.24e-2, 5.20e-4, -4.60e-6, 1.50e-8),
        (3.15, 0.382, -2.39e-2, 5.62e-4, -4.60e-6, 9.87e-9),
        (3.32, 0.387, -2.64e-2, 6.71e-4, -5.76e-6, 1.07e-8),
        (3.47, 0.392, -2.84e-2, 7.79e-4, -7.35e-6, 1.71e-8),
        (3.69, 0.392, -2.96e-2, 8.44e-4, -7.55e-6, 8.16e-9),
        (3.84, 0.402, -3.17e-2, 9.99e-4, -1.08e-5, 2.99e-8),
        (4.04, 0.403, -3.15e-2, 1.06e-3, -1.21e-5, 3.44e-8),
        (4.15, 0.413, -3.01e-2, 1.00e-3, -9.97e-6, 8.74e-9),
    ]),
}

#: Age range of ISO 7029:2017 (years). Ages below 18 are taken as 18 (deviation 0);
#: ages above 80 are held at 80 (the model is not extrapolated).
ISO7029_AGE_RANGE = (18.0, 80.0)

# ---------------------------------------------------------------------------------------
# ISO 1999:2013 — estimation of noise-induced hearing loss

#: Frequencies (Hz) of ISO 1999:2013 Tables 1 and 3.
ISO1999_FREQS = (500, 1000, 2000, 3000, 4000, 6000)
#: Table 1 (u, v, L0) and Table 3 (Xu, Yu, Xl, Yl) per frequency.
_ISO1999 = np.array([
    # u       v      L0    Xu     Yu      Xl     Yl
    (-0.033, 0.110, 93.0, 0.044, 0.016, 0.033, 0.002),
    (-0.020, 0.070, 89.0, 0.022, 0.016, 0.020, 0.000),
    (-0.045, 0.066, 80.0, 0.031, -0.002, 0.016, 0.000),
    (0.012, 0.037, 77.0, 0.007, 0.016, 0.029, -0.010),
    (0.025, 0.025, 75.0, 0.005, 0.009, 0.016, -0.002),
    (0.019, 0.024, 77.0, 0.013, 0.008, 0.028, -0.007),
])
#: Exposure durations (years) covered by the formulas; longer exposure is held at 40.
ISO1999_YEARS_MAX = 40.0

# ---------------------------------------------------------------------------------------
# 29 CFR 1910.95 Appendix F, Tables F-1 (males) and F-2 (females)

#: Frequencies (Hz) of the Appendix F tables.
APPF_FREQS = (1000, 2000, 3000, 4000, 6000)
#: Ages of the table rows: the 20 row is "20 or younger", the 60 row "60 or older".
APPF_AGES = tuple(range(20, 61))

# The 2000/3000/4000 Hz columns (the ones the STS uses) were checked against two printings of
# the tables (App. F and 30 CFR 62 Tables 62-3/62-4; female age 51 at 3000 Hz is 11 as printed
# there). The 1000 and 6000 Hz columns for males from age 32/33 and for all females were not
# checked against a printing: nothing in this program uses them (the STS and its age
# correction use 2000, 3000 and 4000 Hz only), and no page shows them.

#: Table F-1, males, rows age 20..60, columns 1000/2000/3000/4000/6000 Hz (dB).
_APPF_MALE = np.array([
    (5, 3, 4, 5, 8), (5, 3, 4, 5, 8), (5, 3, 4, 5, 8), (5, 3, 4, 6, 9), (5, 3, 5, 6, 9),  # 20-24
    (5, 3, 5, 7, 10), (5, 4, 5, 7, 10), (5, 4, 6, 7, 11), (6, 4, 6, 8, 11), (6, 4, 6, 8, 12),  # 25-29
    (6, 4, 6, 9, 12), (6, 4, 7, 9, 13), (6, 5, 7, 10, 14), (6, 5, 7, 10, 14), (6, 5, 8, 11, 15),  # 30-34
    (7, 5, 8, 11, 15), (7, 5, 9, 12, 16), (7, 6, 9, 12, 17), (7, 6, 9, 13, 17), (7, 6, 10, 14, 18),  # 35-39
    (7, 6, 10, 14, 19), (7, 6, 10, 14, 20), (8, 7, 11, 16, 20), (8, 7, 12, 16, 21), (8, 7, 12, 17, 22),  # 40-44
    (8, 7, 13, 18, 23), (8, 8, 13, 19, 24), (8, 8, 14, 19, 24), (9, 8, 14, 20, 25), (9, 9, 15, 21, 26),  # 45-49
    (9, 9, 16, 22, 27), (9, 9, 16, 23, 28), (9, 10, 17, 24, 29), (9, 10, 18, 25, 30), (10, 10, 18, 26, 31),  # 50-54
    (10, 11, 19, 27, 32), (10, 11, 20, 28, 34), (10, 11, 21, 29, 35), (10, 12, 22, 31, 36),  # 55-58
    (11, 12, 22, 32, 37), (11, 13, 23, 33, 38),  # 59-60
], dtype=float)

#: Table F-2, females, rows age 20..60, columns 1000/2000/3000/4000/6000 Hz (dB).
_APPF_FEMALE = np.array([
    (7, 4, 3, 3, 6), (7, 4, 4, 3, 6), (7, 4, 4, 4, 6), (7, 5, 4, 4, 7), (7, 5, 4, 4, 7),  # 20-24
    (8, 5, 4, 4, 7), (8, 5, 5, 4, 8), (8, 5, 5, 5, 8), (8, 5, 5, 5, 8), (8, 5, 5, 5, 9),  # 25-29
    (8, 6, 5, 5, 9), (8, 6, 6, 5, 9), (9, 6, 6, 6, 10), (9, 6, 6, 6, 10), (9, 6, 6, 6, 10),  # 30-34
    (9, 6, 7, 7, 11), (9, 7, 7, 7, 11), (9, 7, 7, 7, 12), (10, 7, 7, 7, 12), (10, 7, 8, 8, 12),  # 35-39
    (10, 7, 8, 8, 13), (10, 8, 8, 8, 13), (10, 8, 9, 9, 13), (11, 8, 9, 9, 14), (11, 8, 9, 9, 14),  # 40-44
    (11, 8, 10, 10, 15), (11, 9, 10, 10, 15), (11, 9, 10, 11, 16), (12, 9, 11, 11, 16),  # 45-48
    (12, 9, 11, 11, 16), (12, 10, 11, 12, 17), (12, 10, 11, 12, 18), (12, 10, 12, 13, 18),  # 49-52
    (13, 10, 13, 13, 18), (13, 11, 13, 14, 19), (13, 11, 14, 14, 19), (13, 11, 14, 15, 20),  # 53-56
    (13, 11, 15, 15, 20), (14, 12, 15, 16, 21), (14, 12, 16, 16, 21), (14, 12, 16, 17, 22),  # 57-60
], dtype=float)

# ---------------------------------------------------------------------------------------
# helpers


def _freq_index(freq: Any, table: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Return (index into *table*, mask of frequencies found) for an array of Hz values."""
    f = np.asarray(freq, dtype=float)
    tab = np.asarray(table, dtype=float)
    idx = np.searchsorted(tab, f)
    idx_c = np.clip(idx, 0, len(tab) - 1)
    ok = np.isfinite(f) & (tab[idx_c] == f)
    return idx_c, ok


def _sex_codes(sex: Any) -> tuple[np.ndarray, np.ndarray]:
    """Return boolean masks (male, female) for an array of sex codes."""
    s = np.asarray(sex, dtype=object)
    return (s == "M") | (s == "m"), (s == "F") | (s == "f")


_NORMAL = NormalDist()
_inv_cdf = np.vectorize(_NORMAL.inv_cdf, otypes=[float])


def normal_quantile(p: Any) -> np.ndarray:
    """Return the standard-normal quantile z(p) for 0 < p < 1 (NaN outside)."""
    p = np.asarray(p, dtype=float)
    ok = np.isfinite(p) & (p > 0) & (p < 1)
    out = np.full(p.shape, np.nan)
    if ok.any():
        if p.ndim == 0:
            out = np.asarray(_NORMAL.inv_cdf(float(p)))
        else:
            uniq, inv = np.unique(p[ok], return_inverse=True)
            out[ok] = _inv_cdf(uniq)[inv]
    return out


# ---------------------------------------------------------------------------------------
# ISO 7029:2017


def iso7029_median(age: Any, freq: Any, sex: Any) -> np.ndarray:
    """Return the ISO 7029:2017 median threshold deviation (dB) re age 18."""
    age_a, freq_a, sex_a = np.broadcast_arrays(np.asarray(age, dtype=float), np.asarray(freq, dtype=float),
                                               np.asarray(sex, dtype=object))
    idx, ok = _freq_index(freq_a, ISO7029_FREQS)
    male, female = _sex_codes(sex_a)
    a = np.where(male, _ISO7029_AB["M"][idx, 0], np.where(female, _ISO7029_AB["F"][idx, 0], np.nan))
    b = np.where(male, _ISO7029_AB["M"][idx, 1], np.where(female, _ISO7029_AB["F"][idx, 1], np.nan))
    y = np.clip(age_a, *ISO7029_AGE_RANGE) - 18.0
    with np.errstate(invalid="ignore"):
        out = a * np.power(y, b)
    return np.where(ok, out, np.nan)


def iso7029_spread(age: Any, freq: Any, sex: Any, side: str) -> np.ndarray:
    """Return the ISO 7029:2017 spread s_u (side 'u', worse side) or s_l (side 'l'), dB."""
    if side not in ("u", "l"):
        raise ValueError("side must be 'u' or 'l'")
    age_a, freq_a, sex_a = np.broadcast_arrays(np.asarray(age, dtype=float), np.asarray(freq, dtype=float),
                                               np.asarray(sex, dtype=object))
    idx, ok = _freq_index(freq_a, ISO7029_FREQS)
    male, female = _sex_codes(sex_a)
    y = np.clip(age_a, *ISO7029_AGE_RANGE) - 18.0
    powers = np.stack([y ** i for i in range(6)], axis=-1)
    s_m = np.sum(_ISO7029_SPREAD[("M", side)][idx] * powers, axis=-1)
    s_f = np.sum(_ISO7029_SPREAD[("F", side)][idx] * powers, axis=-1)
    out = np.where(male, s_m, np.where(female, s_f, np.nan))
    return np.where(ok, out, np.nan)


def iso7029_percentile(age: Any, freq: Any, sex: Any, q: Any) -> np.ndarray:
    """Return the ISO 7029:2017 threshold deviation (dB) exceeded by the fraction *q*."""
    z = normal_quantile(1.0 - np.asarray(q, dtype=float))
    md = iso7029_median(age, freq, sex)
    su = iso7029_spread(age, freq, sex, "u")
    sl = iso7029_spread(age, freq, sex, "l")
    return np.where(z >= 0, md + z * su, md + z * sl)


# ---------------------------------------------------------------------------------------
# ISO 1999:2013


def iso1999_nipts(freq: Any, lex_8h: Any, years: Any, q: Any = 0.5) -> np.ndarray:
    """Return the ISO 1999:2013 noise-induced permanent threshold shift (dB) at fraction *q*.

    Formula (2) for 10-40 years, Formula (3) below 10 years (applied to the median and,
    as this program's reading, to the spreads du/dl too), durations over 40 years held at
    40, LEX,8h below L0 gives 0, negative results are 0. Frequencies outside 500-6000 Hz
    give NaN.
    """
    f, lex, yrs, qq = np.broadcast_arrays(np.asarray(freq, dtype=float), np.asarray(lex_8h, dtype=float),
                                          np.asarray(years, dtype=float), np.asarray(q, dtype=float))
    idx, ok = _freq_index(f, ISO1999_FREQS)
    u, v, l0, xu, yu, xl, yl = (_ISO1999[idx, i] for i in range(7))
    dl2 = np.square(np.maximum(lex, l0) - l0)
    theta = np.clip(yrs, 0.0, ISO1999_YEARS_MAX)
    theta_f = np.maximum(theta, 10.0)  # formula (2) evaluated at >= 10 years
    lg = np.log10(theta_f)
    scale = np.where(theta < 10.0, np.log10(theta + 1.0) / np.log10(11.0), 1.0)
    n50 = (u + v * lg) * dl2 * scale
    du = (xu + yu * lg) * dl2 * scale
    dlo = (xl + yl * lg) * dl2 * scale
    k = normal_quantile(1.0 - qq)
    n = np.where(k >= 0, n50 + k * du, n50 + k * dlo)
    n = np.maximum(n, 0.0)
    return np.where(ok & np.isfinite(lex) & np.isfinite(yrs), n, np.nan)


def iso1999_combine(h: Any, n: Any) -> np.ndarray:
    """Return the ISO 1999:2013 Formula (1) threshold H' = H + N - H·N/120 (dB)."""
    h = np.asarray(h, dtype=float)
    n = np.asarray(n, dtype=float)
    return h + n - h * n / 120.0


# ---------------------------------------------------------------------------------------
# 29 CFR 1910.95 Appendix F


def appf_correction(age: Any, freq: Any, sex: Any) -> np.ndarray:
    """Return the 29 CFR 1910.95 App. F age-correction value (dB) (Tables F-1/F-2).

    Ages are whole years (fractions are cut off); 20 or younger use the 20 row, 60 or older
    the 60 row. NaN for an unknown sex, a missing age or a frequency not in the tables.
    """
    age_a, freq_a, sex_a = np.broadcast_arrays(np.asarray(age, dtype=float), np.asarray(freq, dtype=float),
                                               np.asarray(sex, dtype=object))
    fidx, ok = _freq_index(freq_a, APPF_FREQS)
    male, female = _sex_codes(sex_a)
    a_ok = np.isfinite(age_a)
    row = (np.clip(np.floor(np.where(a_ok, age_a, 20.0)), 20, 60) - 20).astype(int)
    out = np.where(male, _APPF_MALE[row, fidx], np.where(female, _APPF_FEMALE[row, fidx], np.nan))
    return np.where(ok & a_ok, out, np.nan)

