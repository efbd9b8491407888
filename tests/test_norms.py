"""Checks of generator.norms against published tables, formulas and worked examples."""
from __future__ import annotations

import numpy as np
import pytest

from generator import norms

# ---------------------------------------------------------------------------------------
# 29 CFR 1910.95 Appendix F, Tables F-1 (males) and F-2 (females), 2000/3000/4000 Hz.
# Values as printed in the tables (the same columns are reprinted in 30 CFR 62 Tables
# 62-3/62-4). (age, 2000, 3000, 4000)
F1_MALE = [
    (20, 3, 4, 5), (23, 3, 4, 6), (25, 3, 5, 7), (27, 4, 6, 7), (30, 4, 6, 9), (32, 5, 7, 10),
    (35, 5, 8, 11), (39, 6, 10, 14), (42, 7, 11, 16), (45, 7, 13, 18), (48, 8, 14, 20),
    (50, 9, 16, 22), (53, 10, 18, 25), (55, 11, 19, 27), (58, 12, 22, 31), (60, 13, 23, 33),
]
F2_FEMALE = [
    (20, 4, 3, 3), (22, 4, 4, 4), (26, 5, 5, 4), (30, 6, 5, 5), (32, 6, 6, 6), (35, 6, 7, 7),
    (39, 7, 8, 8), (41, 8, 8, 8), (45, 8, 10, 10), (47, 9, 10, 11), (50, 10, 11, 12),
    (54, 11, 13, 14), (57, 11, 15, 15), (60, 12, 16, 17),
]


@pytest.mark.parametrize("age,f2,f3,f4", F1_MALE)
def test_appf_table_f1_male(age, f2, f3, f4):
    # 29 CFR 1910.95 App. F, Table F-1 (males)
    got = norms.appf_correction(age, [2000, 3000, 4000], "M")
    assert got.tolist() == [f2, f3, f4]


@pytest.mark.parametrize("age,f2,f3,f4", F2_FEMALE)
def test_appf_table_f2_female(age, f2, f3, f4):
    # 29 CFR 1910.95 App. F, Table F-2 (females)
    got = norms.appf_correction(age, [2000, 3000, 4000], "F")
    assert got.tolist() == [f2, f3, f4]


def test_appf_end_rows_and_unknowns():
    # 29 CFR 1910.95 App. F: rows "20 or younger" and "60 or older"
    assert norms.appf_correction([16, 19.9, 20], 4000, "M").tolist() == [5, 5, 5]
    assert norms.appf_correction([60, 64, 80], 4000, "M").tolist() == [33, 33, 33]
    assert norms.appf_correction([17, 75], 3000, "F").tolist() == [3, 16]
    # ages are whole years: 33.99 reads the 33 row (Table F-1 age 33 at 4000 Hz = 10; age 34 = 11)
    assert norms.appf_correction([33.99, 34.0], 4000, "M").tolist() == [10, 11]
    # unknown sex, missing age, or a frequency outside the tables: no value
    got = norms.appf_correction([30, np.nan, 30, 30], [4000, 4000, 500, 8000], ["", "M", "M", "F"])
    assert np.isnan(got).all()


def test_appf_worked_example_difference():
    # 29 CFR 1910.95 App. F worked example: male, baseline at 27, most recent at 32;
    # Table F-1 rows 32 (6, 5, 7, 10 at 1000-4000 Hz) and 27 (5, 4, 6, 7 at 1000-4000 Hz);
    # the 4000 Hz difference is 3 dB.
    a32 = norms.appf_correction(32, [1000, 2000, 3000, 4000], "M")
    a27 = norms.appf_correction(27, [1000, 2000, 3000, 4000], "M")
    assert a32.tolist() == [6, 5, 7, 10]
    assert a27.tolist() == [5, 4, 6, 7]
    assert (a32 - a27).tolist() == [1, 1, 1, 3]


# ---------------------------------------------------------------------------------------
# ISO 1999:2013


def test_iso1999_median_by_hand():
    # ISO 1999:2013 Formula (2) with Table 1 at 4 kHz (u = 0.025, v = 0.025, L0 = 75 dB):
    # (0.025 + 0.025 lg 20) * 15^2 = 12.94 dB for LEX,8h 90 dB over 20 years
    assert float(norms.iso1999_nipts(4000, 90, 20)) == pytest.approx(12.94, abs=0.01)


# ISO 1999:2013 Annex D (Tables D.1-D.4) as transcribed (one source, every cell reproduced by
# Formulae (2)-(7)), values printed as whole dB, columns Q = 0.90 / 0.50
# / 0.10 at 500, 1000, 2000, 3000, 4000, 6000 Hz.
ANNEX_D = {
    (85.0, 40.0): [(0, 0, 0), (0, 0, 0), (1, 2, 2), (3, 5, 7), (5, 7, 9), (2, 4, 6)],
    (90.0, 20.0): [(0, 0, 0), (0, 0, 0), (2, 4, 8), (7, 10, 16), (9, 13, 18), (4, 8, 14)],
}


@pytest.mark.parametrize("case", sorted(ANNEX_D))
def test_iso1999_annex_d_fractiles(case):
    # ISO 1999:2013 Annex D, Tables D.1-D.4 (rounded to whole dB, half up)
    lex, years = case
    freqs = np.array(norms.ISO1999_FREQS, dtype=float)
    qs = np.array([[0.9], [0.5], [0.1]])
    got = norms.iso1999_nipts(freqs, lex, years, qs)
    rounded = np.floor(got + 0.5).astype(int).T.tolist()
    assert [tuple(r) for r in rounded] == ANNEX_D[case]


def test_iso1999_fractiles_ordered_and_k():
    # ISO 1999:2013 Table 2: k = 1.282 at Q = 0.10 (standard-normal quantiles; the printed
    # digits of Table 2 from memory, unverified); Formulae (4)
    # and (6) at 4 kHz, 90 dB, 20 years: N0.10 = N0.50 + 1.282 * (0.005 + 0.009 lg 20) * 225
    du = (0.005 + 0.009 * np.log10(20)) * 225
    n50 = (0.025 + 0.025 * np.log10(20)) * 225
    assert float(norms.iso1999_nipts(4000, 90, 20, 0.10)) == pytest.approx(n50 + 1.2816 * du, abs=0.01)
    # and Q = 0.05 -> k = 1.645 (Table 2)
    assert float(norms.iso1999_nipts(4000, 90, 20, 0.05)) == pytest.approx(n50 + 1.645 * du, abs=0.01)


def test_iso1999_below_10_years_and_below_l0():
    # ISO 1999:2013 Formula (3): below 10 years N = lg(θ + 1)/lg 11 * N(10 years);
    # at 4 kHz, 90 dB, N(10) = (0.025 + 0.025) * 225 = 11.25 dB
    assert float(norms.iso1999_nipts(4000, 90, 10)) == pytest.approx(11.25, abs=1e-9)
    assert float(norms.iso1999_nipts(4000, 90, 5)) == pytest.approx(np.log10(6) / np.log10(11) * 11.25,
                                                                     abs=1e-9)
    assert float(norms.iso1999_nipts(4000, 90, 0)) == 0.0
    # ISO 1999:2013 clause 6.3: LEX,8h below L0 (75 dB at 4 kHz) gives no shift
    assert float(norms.iso1999_nipts(4000, 74, 30)) == 0.0
    assert np.isnan(norms.iso1999_nipts(8000, 95, 30))


def test_iso1999_combination_annex_c():
    # ISO 1999:2013 Formula (1): H' = H + N - H N / 120; Annex C example at 4 kHz, H = 36,
    # N = 19 -> 19 - 36 * 19 / 120 = 13.3 dB added to H
    assert float(norms.iso1999_combine(36, 19)) - 36 == pytest.approx(13.3, abs=0.01)


# ---------------------------------------------------------------------------------------
# ISO 7029:2017


def test_iso7029_median_table1_values():
    # ISO 7029:2017 Table 1 (coefficients as transcribed: one source), ΔH = a (Y - 18)^b:
    # male 60 y at 4 kHz = 3.40e-3 * 42^2.325
    assert float(norms.iso7029_median(60, 4000, "M")) == pytest.approx(20.2085, abs=1e-3)
    # ISO 7029:2017 Table 1, male medians at 1/2/4/6 kHz (computed from the table)
    want = {40: (1.56, 2.63, 4.49, 5.81), 50: (3.98, 6.48, 10.74, 13.82), 70: (13.37, 20.82, 33.20, 42.53)}
    for age, vals in want.items():
        got = norms.iso7029_median(age, [1000, 2000, 4000, 6000], "M")
        assert got == pytest.approx(vals, abs=0.01)
    # female: 7.37e-4 * 42^2.660 at 4 kHz, 60 y
    assert float(norms.iso7029_median(60, 4000, "F")) == pytest.approx(7.37e-4 * 42 ** 2.660, rel=1e-9)
    # age 18 and below: no deviation; unknown sex: no value
    assert norms.iso7029_median([18, 15], 4000, "F").tolist() == [0.0, 0.0]
    assert np.isnan(norms.iso7029_median(50, 4000, ""))


def test_iso7029_spread_and_percentiles():
    # ISO 7029:2017 Table 2 (upper spread, males): s_u at 1 kHz, 60 y = 10.1533 dB
    assert float(norms.iso7029_spread(60, 1000, "M", "u")) == pytest.approx(10.1533, abs=1e-3)
    # ISO 7029:2017 clause 4: fractile = median + z s_u (worse side) / median - z s_l
    md = float(norms.iso7029_median(60, 1000, "M"))
    su = float(norms.iso7029_spread(60, 1000, "M", "u"))
    sl = float(norms.iso7029_spread(60, 1000, "M", "l"))
    assert float(norms.iso7029_percentile(60, 1000, "M", 0.10)) == pytest.approx(md + 1.2816 * su, abs=1e-3)
    assert float(norms.iso7029_percentile(60, 1000, "M", 0.90)) == pytest.approx(md - 1.2816 * sl, abs=1e-3)
    assert float(norms.iso7029_percentile(60, 1000, "M", 0.5)) == pytest.approx(md, abs=1e-9)
    # spreads at age 18 are the constant terms c0 (Tables 2-5): male 4 kHz s_u = 4.68
    assert float(norms.iso7029_spread(18, 4000, "M", "u")) == pytest.approx(4.68)
    assert float(norms.iso7029_spread(18, 4000, "F", "l")) == pytest.approx(3.84)


def test_normal_quantile_against_scipy():
    # oracle: scipy.stats.norm.ppf (used in tests only)
    from scipy.stats import norm

    p = np.array([0.01, 0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95, 0.99])
    assert norms.normal_quantile(p) == pytest.approx(norm.ppf(p), abs=1e-9)
    assert np.isnan(norms.normal_quantile([0.0, 1.0, np.nan])).all()


def test_vectorised_shapes():
    ages = np.array([25.0, 45.0, 65.0])
    sexes = np.array(["M", "F", "M"], dtype=object)
    out = norms.iso7029_percentile(ages[:, None], np.array([1000, 4000]), sexes[:, None], 0.25)
    assert out.shape == (3, 2)
    assert np.all(np.diff(out[:, 1][[0, 2]]) > 0)  # older male worse than younger male
