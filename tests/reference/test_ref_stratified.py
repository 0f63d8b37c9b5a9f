"""Reference checks of the stratified methods against published examples, statsmodels and hand work.

Published values are marked ``# from memory`` where they were recalled rather than looked up.
Library checks name the function that computed the reference value. Where statsmodels and we
differ, the test says which is right and why.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats.contingency_tables import StratifiedTable, Table2x2
from statsmodels.stats.proportion import confint_proportions_2indep

from prespec.stats.stratified import (
    breslow_day_tarone,
    cochran_mantel_haenszel,
    mantel_haenszel_odds_ratio,
    mantel_haenszel_risk_difference,
    mantel_haenszel_risk_ratio,
)

Stratum = tuple[int, int, int, int]

# Agresti A. Categorical Data Analysis (2nd ed. 2002, chapter 6): penicillin level and cure of
# rabbits, after Mantel 1963. Per penicillin level (1/8, 1/4, 1/2, 1, 4), the first group is
# treatment without delay, the second after a 1.5 h delay; the event is cure. # from memory
PENICILLIN: list[Stratum] = [(0, 6, 0, 5), (3, 6, 0, 6), (6, 6, 2, 6), (5, 6, 6, 6), (2, 2, 5, 5)]

# Agresti A. An Introduction to Categorical Data Analysis (chapter on three-way tables):
# delinquency (event) among boy scouts (first group) and non-scouts by socioeconomic status
# (low, medium, high). Every conditional odds ratio is exactly 1. # from memory
SCOUTS: list[Stratum] = [(10, 50, 40, 200), (18, 150, 18, 150), (8, 200, 2, 50)]

# Rothman KJ, Greenland S, Lash TL. Modern Epidemiology, 3rd ed. 2008, chapter 15: deaths
# among tolbutamide (first group) and placebo (second) patients of the University Group
# Diabetes Program, by age < 55 and >= 55. # from memory
TOLBUTAMIDE: list[Stratum] = [(8, 106, 5, 120), (22, 98, 16, 85)]


def _tables(strata: list[Stratum]) -> list[np.ndarray]:
    """Our (x1, n1, x2, n2) as the 2×2 arrays [[x1, n1 − x1], [x2, n2 − x2]] statsmodels takes."""
    return [np.array([[x1, n1 - x1], [x2, n2 - x2]]) for x1, n1, x2, n2 in strata]


def _grid(seed: int, count: int, max_n: int, sparse_every: int = 3) -> list[list[Stratum]]:
    """Random series of 1-6 strata, every third sparse (0 to 2 events a group), with zeros,
    all-events and strata of one member a group; each stratum has both groups present."""
    rng = np.random.default_rng(seed)
    series = []
    for i in range(count):
        strata = []
        for _ in range(int(rng.integers(1, 7))):
            n1, n2 = (int(v) for v in rng.integers(1, max_n + 1, 2))
            if i % sparse_every == 0:
                x1, x2 = int(rng.integers(0, min(2, n1) + 1)), int(rng.integers(0, min(2, n2) + 1))
            else:
                x1, x2 = int(rng.integers(0, n1 + 1)), int(rng.integers(0, n2 + 1))
            strata.append((x1, n1, x2, n2))
        series.append(strata)
    return series


GRID = _grid(11, 150, 12) + _grid(12, 100, 400) + _grid(13, 40, 5000, sparse_every=4)


def _informative_for_odds(strata: list[Stratum]) -> bool:
    """Both sums of the Mantel–Haenszel odds ratio (Σad/N, Σbc/N) are positive."""
    r = sum(x1 * (n2 - x2) / (n1 + n2) for x1, n1, x2, n2 in strata)
    s = sum((n1 - x1) * x2 / (n1 + n2) for x1, n1, x2, n2 in strata)
    return r > 0 and s > 0


# --- Cochran–Mantel–Haenszel --------------------------------------------------------------


def test_cmh_penicillin_published() -> None:
    # Agresti, Categorical Data Analysis, 2nd ed., chapter 6, penicillin data: CMH = 3.93 with
    # 1 df, P = 0.047. # from memory. That is the continuity-corrected statistic (statsmodels
    # StratifiedTable(...).test_null_odds(correction=True) gives 3.9286 too); the uncorrected
    # one is 5.657 (worked by hand in the next test).
    corrected = cochran_mantel_haenszel(PENICILLIN, continuity=True)
    assert round(corrected.statistic, 2) == 3.93
    assert round(corrected.p_value, 3) == 0.047
    assert corrected.df == 1
    plain = cochran_mantel_haenszel(PENICILLIN)
    ref = StratifiedTable(_tables(PENICILLIN)).test_null_odds(correction=False)
    assert plain.statistic == pytest.approx(float(ref.statistic), rel=1e-12)
    assert round(plain.statistic, 3) == 5.657


def test_cmh_by_hand_on_the_penicillin_data() -> None:
    # common practice, the CMH statistic worked by hand. Informative strata (1/4, 1/2, 1):
    # a = 3, 6, 5; E a = n1·m1/N = 6·3/12, 6·8/12, 6·11/12 = 1.5, 4, 5.5; Σ(a − Ea) = 3.
    # Var a = n1·n2·m1·m0/(N²(N − 1)) = 36·27/1584, 36·32/1584, 36·11/1584, sum 2520/1584
    # = 35/22. X² = 9 / (35/22) = 198/35 = 5.657142857; corrected (3 − 0.5)² / (35/22)
    # = 6.25·22/35 = 55/14 = 3.928571429. The uninformative strata 1/8 and 4 add nothing.
    assert cochran_mantel_haenszel(PENICILLIN).statistic == pytest.approx(198 / 35, rel=1e-15)
    corrected = cochran_mantel_haenszel(PENICILLIN, continuity=True)
    assert corrected.statistic == pytest.approx(55 / 14, rel=1e-15)
    assert cochran_mantel_haenszel(PENICILLIN[1:4]).statistic == pytest.approx(198 / 35)


def test_cmh_scouts_published() -> None:
    # Agresti, An Introduction to Categorical Data Analysis: scouting and delinquency are
    # conditionally independent given socioeconomic status (each conditional odds ratio 1),
    # though the marginal odds ratio is 0.56. # from memory. So Σ(a − Ea) = 0 exactly.
    result = cochran_mantel_haenszel(SCOUTS)
    assert result.statistic == 0.0 and result.p_value == 1.0
    # the pooled table hides it: odds ratio 36·340/(364·60) = 0.56
    assert round(36 * 340 / (364 * 60), 2) == 0.56
    # one-sided: a signed root of 0 gives one half either way (common practice)
    assert cochran_mantel_haenszel(SCOUTS, alternative="greater").p_value == 0.5


@pytest.mark.parametrize("continuity", [False, True])
def test_cmh_matches_statsmodels_on_a_grid(continuity: bool) -> None:
    # statsmodels.stats.contingency_tables.StratifiedTable(tables).test_null_odds(correction)
    # .statistic, 1e-9 relative. Two documented differences:
    # - with the correction and |Σ(a − Ea)| < 0.5, statsmodels squares (|Σ(a − Ea)| − 0.5),
    #   a negative number, so its statistic grows as the evidence shrinks; we take the
    #   corrected difference as 0 there (the correction must not make the statistic larger
    #   than the uncorrected one, as for Yates' correction). Ours is right; skipped here and
    #   checked in test_cmh_correction_below_one_half.
    # - statsmodels' p-value is 1 − chi2.cdf, which loses all relative precision below about
    #   1e-16; we use chi2.sf. So our p-value is checked against scipy.stats.chi2.sf of the
    #   statsmodels statistic, and against statsmodels' own p-value to 1e-14 absolute.
    checked = 0
    for strata in GRID:
        ours = cochran_mantel_haenszel(strata, continuity=continuity)
        deviation = sum(x1 - n1 * (x1 + x2) / (n1 + n2) for x1, n1, x2, n2 in strata)
        if continuity and abs(deviation) < 0.5 + 1e-9:
            continue
        with np.errstate(divide="ignore", invalid="ignore"):
            ref = StratifiedTable(_tables(strata)).test_null_odds(correction=continuity)
        if not np.isfinite(ref.statistic):
            # every stratum has a zero margin: the variance is 0 and both are undefined
            assert math.isnan(ours.statistic) and math.isnan(ours.p_value), strata
            continue
        assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-9), strata
        sf = float(scipy.stats.chi2.sf(float(ref.statistic), 1))
        assert ours.p_value == pytest.approx(sf, rel=1e-9, abs=1e-300), strata
        assert ours.p_value == pytest.approx(float(ref.pvalue), abs=1e-14), strata
        checked += 1
    assert checked > 200


def test_cmh_correction_below_one_half() -> None:
    # The stratum (2, 4, 1, 4): a − Ea = 2 − 4·3/8 = 0.5, so the corrected difference is 0;
    # (1, 3, 1, 4): a − Ea = 1 − 3·2/7 = 1/7 < 0.5 and statsmodels gives (1/7 − 1/2)²/Var > 0,
    # more than its own uncorrected (1/7)²/Var. Ours is 0 (p = 1): the correction only shrinks.
    assert cochran_mantel_haenszel([(2, 4, 1, 4)], continuity=True).statistic == 0.0
    ours = cochran_mantel_haenszel([(1, 3, 1, 4)], continuity=True)
    assert ours.statistic == 0.0 and ours.p_value == 1.0
    table = StratifiedTable(_tables([(1, 3, 1, 4)]))
    assert table.test_null_odds(correction=True).statistic > table.test_null_odds().statistic


def test_cmh_one_stratum_is_pearson_times_n_minus_one_over_n() -> None:
    # common practice (Mantel and Haenszel 1959): with one stratum the CMH statistic is
    # (N − 1)/N times Pearson's X², because it uses the hypergeometric variance with N − 1.
    # scipy.stats.chi2_contingency(correction=False) gives X².
    for strata in _grid(21, 200, 60):
        x1, n1, x2, n2 = strata[0]
        if x1 + x2 in (0, n1 + n2):
            continue
        x2_pearson = scipy.stats.chi2_contingency(_tables([strata[0]])[0], correction=False)[0]
        n = n1 + n2
        ours = cochran_mantel_haenszel([strata[0]]).statistic
        assert ours == pytest.approx((n - 1) / n * x2_pearson, rel=1e-9), strata[0]


# --- Mantel–Haenszel odds ratio, Robins–Breslow–Greenland interval -------------------------


def test_odds_ratio_penicillin_published() -> None:
    # Agresti, Categorical Data Analysis, 2nd ed., chapter 6: the Mantel-Haenszel estimate of
    # the common odds ratio for the penicillin data is 7.0. # from memory. By hand, common
    # practice: Σad/N = (3·6 + 6·4 + 5·0)/12 = 42/12 = 3.5, Σbc/N = (0 + 0 + 1·6)/12 = 0.5.
    estimate = mantel_haenszel_odds_ratio(PENICILLIN, 0.95)
    assert estimate.value == pytest.approx(7.0, rel=1e-15)
    assert estimate.measure == "odds-ratio" and estimate.method == "robins-breslow-greenland"


def test_odds_ratio_rbg_by_hand_on_the_penicillin_data() -> None:
    # common practice, the Robins-Breslow-Greenland variance by hand. Informative strata:
    #   (a, b, c, d, N) = (3, 3, 0, 6, 12), (6, 0, 2, 4, 12), (5, 1, 6, 0, 12)
    #   R_k = ad/N = 1.5, 2, 0;  S_k = bc/N = 0, 0, 0.5;  P_k = (a + d)/N = 0.75, 5/6, 5/12;
    #   Q_k = (b + c)/N = 0.25, 1/6, 7/12;  R = 3.5, S = 0.5.
    #   ΣP·R = 1.125 + 5/3 = 2.791667;  Σ(P·S + Q·R) = 0.375 + 1/3 + 5/24 = 0.916667;
    #   ΣQ·S = 7/24 = 0.291667.
    #   Var = 2.791667/(2·12.25) + 0.916667/(2·1.75) + 0.291667/(2·0.25)
    #       = 0.113946 + 0.261905 + 0.583333 = 0.959184;  se = 0.979379.
    #   95 %: exp(log 7 ± 1.959964·0.979379) = 1.0267, 47.725.
    variance = (
        (1.125 + 5 / 3) / (2 * 12.25) + (0.375 + 1 / 3 + 5 / 24) / (2 * 1.75) + (7 / 24) / 0.5
    )
    z = float(scipy.stats.norm.isf(0.025))
    estimate = mantel_haenszel_odds_ratio(PENICILLIN, 0.95)
    assert estimate.low == pytest.approx(7 * math.exp(-z * math.sqrt(variance)), rel=1e-12)
    assert estimate.high == pytest.approx(7 * math.exp(z * math.sqrt(variance)), rel=1e-12)
    assert (round(estimate.low, 4), round(estimate.high, 3)) == (1.0267, 47.725)


def test_odds_ratio_scouts_published() -> None:
    # Agresti, An Introduction to Categorical Data Analysis: conditional odds ratios all 1
    # (# from memory), so the Mantel-Haenszel estimate is exactly 1.
    assert mantel_haenszel_odds_ratio(SCOUTS, 0.95).value == pytest.approx(1.0, rel=1e-15)


@pytest.mark.parametrize("level", [0.80, 0.90, 0.95, 0.99])
def test_odds_ratio_matches_statsmodels_on_a_grid(level: float) -> None:
    # statsmodels StratifiedTable(tables).oddsratio_pooled and .oddsratio_pooled_confint(alpha)
    # (which uses the Robins-Breslow-Greenland variance, logodds_pooled_se), 1e-9 relative,
    # wherever both Σad/N and Σbc/N are positive. Otherwise statsmodels divides by zero and
    # returns 0, inf or nan with warnings; we give 0 or inf with the interval [0, inf], or all
    # nan when both sums are 0 (checked in the unit tests).
    checked = 0
    for strata in GRID:
        if not _informative_for_odds(strata):
            continue
        table = StratifiedTable(_tables(strata))
        low, high = table.oddsratio_pooled_confint(alpha=1 - level)
        ours = mantel_haenszel_odds_ratio(strata, level)
        assert ours.value == pytest.approx(float(table.oddsratio_pooled), rel=1e-9), strata
        assert ours.low == pytest.approx(float(low), rel=1e-9), strata
        assert ours.high == pytest.approx(float(high), rel=1e-9), strata
        assert ours.level == level
        checked += 1
    assert checked > 200


def test_odds_ratio_one_stratum_is_woolf() -> None:
    # common practice (Robins, Breslow and Greenland 1986): with one stratum the RBG variance
    # reduces to Woolf's 1/a + 1/b + 1/c + 1/d. statsmodels Table2x2(table, shift_zeros=False)
    # .oddsratio_confint(alpha) computes Woolf's interval; 1e-9 relative.
    for strata in _grid(22, 150, 80):
        x1, n1, x2, n2 = strata[0]
        if 0 in (x1, n1 - x1, x2, n2 - x2):
            continue
        table = Table2x2(_tables([strata[0]])[0], shift_zeros=False)
        low, high = table.oddsratio_confint(alpha=0.05)
        ours = mantel_haenszel_odds_ratio([strata[0]], 0.95)
        assert ours.value == pytest.approx(float(table.oddsratio), rel=1e-9)
        assert ours.low == pytest.approx(float(low), rel=1e-9)
        assert ours.high == pytest.approx(float(high), rel=1e-9)


# --- Mantel–Haenszel risk ratio, Greenland–Robins interval ---------------------------------


def test_risk_ratio_tolbutamide_published() -> None:
    # Rothman, Greenland and Lash, Modern Epidemiology, 3rd ed., chapter 15, tolbutamide
    # example: RR_MH = 1.33 (stratum risk ratios 1.81 and 1.19; crude 1.44). # from memory.
    # The 90 per cent limits 0.87 and 2.0 are recalled less surely (# from memory); the hand
    # computation below is the firm check.
    estimate = mantel_haenszel_risk_ratio(TOLBUTAMIDE, 0.90)
    assert round(estimate.value, 2) == 1.33
    assert (round(estimate.low, 2), round(estimate.high, 1)) == (0.87, 2.0)
    assert round((8 / 106) / (5 / 120), 2) == 1.81 and round((22 / 98) / (16 / 85), 2) == 1.19
    assert round((30 / 204) / (21 / 205), 2) == 1.44
    assert estimate.measure == "risk-ratio" and estimate.method == "greenland-robins"


def test_risk_ratio_greenland_robins_by_hand_on_tolbutamide() -> None:
    # common practice, the Greenland-Robins (1985) variance worked by hand on the two strata:
    #   stratum (a, n1, c, n2, N): (8, 106, 5, 120, 226) and (22, 98, 16, 85, 183)
    #   R_k = a·n2/N = 960/226 = 4.247788 and 1870/183 = 10.218579;   R = 14.466367
    #   S_k = c·n1/N = 530/226 = 2.345133 and 1568/183 =  8.568306;   S = 10.913439
    #   (n1·n2·m1 − a·c·N)/N² = (165360 − 9040)/51076 = 3.060537
    #                          and (316540 − 64416)/33489 = 7.528562;  sum 10.589099
    #   RR = R/S = 1.325555;  Var(log RR) = 10.589099/(14.466367·10.913439) = 0.0670715
    #   se = 0.258982;  95 %: 1.325555·exp(∓1.959964·0.258982) = 0.7979, 2.2021.
    estimate = mantel_haenszel_risk_ratio(TOLBUTAMIDE, 0.95)
    r = 960 / 226 + 1870 / 183
    s = 530 / 226 + 1568 / 183
    variance = (156320 / 51076 + 252124 / 33489) / (r * s)
    assert estimate.value == pytest.approx(r / s, rel=1e-12)
    assert math.log(estimate.high / estimate.value) == pytest.approx(
        float(scipy.stats.norm.isf(0.025)) * math.sqrt(variance), rel=1e-12
    )
    assert variance == pytest.approx(0.0670715, abs=5e-8)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == (0.7979, 2.2021)


def test_risk_ratio_matches_statsmodels_estimate_on_a_grid() -> None:
    # statsmodels StratifiedTable(tables).riskratio_pooled, 1e-9 relative, where defined
    # (statsmodels has no interval for it; the variance is checked by hand above and against
    # Katz's in the one-stratum case below).
    checked = 0
    for strata in GRID:
        ours = mantel_haenszel_risk_ratio(strata, 0.95)
        with np.errstate(divide="ignore", invalid="ignore"):
            ref = float(StratifiedTable(_tables(strata)).riskratio_pooled)
        if not (np.isfinite(ref) and ref > 0):
            continue
        assert ours.value == pytest.approx(ref, rel=1e-9), strata
        checked += 1
    assert checked > 200


def test_risk_ratio_one_stratum_is_katz() -> None:
    # common practice: with one stratum the Greenland-Robins variance is Katz's
    # 1/a − 1/n1 + 1/c − 1/n2 (Katz D et al., Biometrics 1978;34:469-474).
    # statsmodels Table2x2(table, shift_zeros=False).riskratio_confint(alpha) gives it (its
    # default adds 0.5 to every cell of a table with a zero, e.g. when everyone has the event).
    for strata in _grid(23, 150, 80):
        x1, _, x2, _ = strata[0]
        if 0 in (x1, x2):
            continue
        table = Table2x2(_tables([strata[0]])[0], shift_zeros=False)
        low, high = table.riskratio_confint(alpha=0.10)
        ours = mantel_haenszel_risk_ratio([strata[0]], 0.90)
        assert ours.value == pytest.approx(float(table.riskratio), rel=1e-9)
        assert ours.low == pytest.approx(float(low), rel=1e-9)
        assert ours.high == pytest.approx(float(high), rel=1e-9)


# --- Mantel–Haenszel risk difference, Sato variance ----------------------------------------


def test_risk_difference_tolbutamide_published() -> None:
    # Rothman, Greenland and Lash, Modern Epidemiology, 3rd ed., chapter 15, tolbutamide
    # example: RD_MH = 0.035 (stratum differences 0.034 and 0.036, crude 0.045). # from memory.
    # The 90 per cent limits −0.018 and 0.087 are recalled less surely (# from memory).
    estimate = mantel_haenszel_risk_difference(TOLBUTAMIDE, 0.90)
    assert round(estimate.value, 3) == 0.035
    assert (round(estimate.low, 3), round(estimate.high, 3)) == (-0.018, 0.087)
    assert estimate.measure == "risk-difference" and estimate.method == "sato"


def test_risk_difference_sato_by_hand_on_tolbutamide() -> None:
    # common practice, the Mantel-Haenszel weighted difference and Sato's (1989) variance by
    # hand. Strata (a, n1, c, n2, N) = (8, 106, 5, 120, 226), (22, 98, 16, 85, 183):
    #   W_k = n1·n2/N = 12720/226 = 56.283186 and 8330/183 = 45.519126;  ΣW = 101.802312
    #   (a·n2 − c·n1)/N = 430/226 = 1.902655 and 302/183 = 1.650273;   sum 3.552928
    #   RD = 3.552928/101.802312 = 0.0349003  (the W-weighted mean of 0.0338 and 0.0362)
    #   P_k = (n1²c − n2²a + n1·n2·(n2 − n1)/2)/N²
    #       = (56180 − 115200 + 89040)/51076 = 0.587752
    #         and (153664 − 158950 − 54145)/33489 = −1.774642;   ΣP = −1.186891
    #   Q_k = (a(n2 − c) + c(n1 − a))/(2N) = 1410/452 = 3.119469 and 2734/366 = 7.469945;
    #   ΣQ = 10.589414
    #   Var = (RD·ΣP + ΣQ)/(ΣW)² = (−0.041423 + 10.589414)/10363.711 = 0.00101778
    #   se = 0.0319027;  95 %: 0.0349003 ∓ 1.959964·0.0319027 = −0.0276, 0.0974.
    w = 12720 / 226 + 8330 / 183
    rd = (430 / 226 + 302 / 183) / w
    p = 30020 / 51076 - 59431 / 33489
    q = 1410 / 452 + 2734 / 366
    variance = (rd * p + q) / w**2
    estimate = mantel_haenszel_risk_difference(TOLBUTAMIDE, 0.95)
    assert estimate.value == pytest.approx(rd, rel=1e-12)
    z = float(scipy.stats.norm.isf(0.025))
    assert estimate.high - estimate.value == pytest.approx(z * math.sqrt(variance), rel=1e-12)
    assert variance == pytest.approx(0.00101778, abs=5e-9)
    assert (round(estimate.low, 4), round(estimate.high, 4)) == (-0.0276, 0.0974)
    # the estimate is the weighted mean of the stratum differences (Mantel-Haenszel weights)
    d1, d2 = 8 / 106 - 5 / 120, 22 / 98 - 16 / 85
    assert estimate.value == pytest.approx((56.283186 * d1 + 45.519126 * d2) / w, rel=1e-7)


def test_risk_difference_weighted_mean_on_a_grid() -> None:
    # common practice (Greenland and Robins 1985): RD_MH = Σ W_k·(p1k − p2k) / Σ W_k with
    # W_k = n1·n2/N, computed here directly from the stratum proportions.
    for strata in GRID:
        weights = [n1 * n2 / (n1 + n2) for _, n1, _, n2 in strata]
        differences = [x1 / n1 - x2 / n2 for x1, n1, x2, n2 in strata]
        expected = sum(w * d for w, d in zip(weights, differences)) / sum(weights)
        ours = mantel_haenszel_risk_difference(strata, 0.95).value
        assert ours == pytest.approx(expected, rel=1e-9, abs=1e-14), strata


def test_risk_difference_one_stratum_is_wald() -> None:
    # With one stratum RD_MH = p1 − p2 and Sato's variance reduces to the unpooled
    # p1(1 − p1)/n1 + p2(1 − p2)/n2 (common practice; by algebra: with W = n1·n2/N,
    # (RD·P + Q)/W² = (n2·p1q1 + n1·p2q2)/(n1·n2)). statsmodels
    # confint_proportions_2indep(method="wald", compare="diff") is that Wald interval; ours
    # is clipped to [−1, 1], so the check is on tables where the Wald limits lie inside.
    checked = 0
    for strata in _grid(24, 300, 90):
        x1, n1, x2, n2 = strata[0]
        low, high = confint_proportions_2indep(
            x1, n1, x2, n2, method="wald", compare="diff", alpha=0.05
        )
        if not -1.0 < low <= high < 1.0:
            continue
        ours = mantel_haenszel_risk_difference([strata[0]], 0.95)
        assert ours.value == x1 / n1 - x2 / n2 or ours.value == pytest.approx(
            x1 / n1 - x2 / n2, rel=1e-15, abs=1e-16
        )
        assert ours.low == pytest.approx(float(low), rel=1e-9, abs=1e-15), strata[0]
        assert ours.high == pytest.approx(float(high), rel=1e-9, abs=1e-15), strata[0]
        checked += 1
    assert checked > 200


# --- Breslow–Day with Tarone's correction --------------------------------------------------


def test_breslow_day_tarone_matches_statsmodels_on_a_grid() -> None:
    # statsmodels StratifiedTable(tables).test_equal_odds(adjust=True), 1e-9 relative on the
    # statistic (absolute 1e-12 near 0) and on chi2.sf of it. Compared on series whose every
    # stratum has both an event and a non-event, and a finite non-zero common odds ratio;
    # statsmodels counts every table it is given in the df, and returns nan on a stratum with a
    # zero margin (0/0) and when the pooled odds ratio is exactly 1 (its quadratic then has a
    # zero leading coefficient, and it divides by it). We drop the uninformative strata from
    # the sum and the df (their first cell is fixed by the margins), and solve the quadratic in
    # the form that stays finite at 1: see test_breslow_day_at_odds_ratio_exactly_one.
    checked = 0
    for strata in GRID:
        if len(strata) < 2 or not _informative_for_odds(strata):
            continue
        if any(x1 + x2 in (0, n1 + n2) for x1, n1, x2, n2 in strata):
            continue
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            ref = StratifiedTable(_tables(strata)).test_equal_odds(adjust=True)
        if not np.isfinite(ref.statistic):
            continue
        ours = breslow_day_tarone(strata)
        assert ours.df == len(strata) - 1
        assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-9, abs=1e-12)
        sf = float(scipy.stats.chi2.sf(max(float(ref.statistic), 0.0), len(strata) - 1))
        assert ours.p_value == pytest.approx(sf, rel=1e-9, abs=1e-12), strata
        checked += 1
    assert checked > 150


def test_breslow_day_penicillin_matches_statsmodels_on_the_informative_strata() -> None:
    # The penicillin data: strata 1/8 and 4 have no cure or no death; on the other three,
    # statsmodels StratifiedTable(...).test_equal_odds(adjust=True) gives the statistic we
    # give for all five (df 2), while on all five it returns nan.
    ref = StratifiedTable(_tables(PENICILLIN[1:4])).test_equal_odds(adjust=True)
    ours = breslow_day_tarone(PENICILLIN)
    assert ours.df == 2
    assert ours.statistic == pytest.approx(float(ref.statistic), rel=1e-12)
    assert ours.p_value == pytest.approx(float(ref.pvalue), rel=1e-9)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        assert math.isnan(StratifiedTable(_tables(PENICILLIN)).test_equal_odds(True).statistic)


def test_breslow_day_at_odds_ratio_exactly_one() -> None:
    # The scouts data (Agresti, from memory): every stratum odds ratio is 1 and so is the
    # pooled one; each expected count is then n1·m1/N and equals the observed a, so the
    # statistic is 0 (p = 1). statsmodels' test_equal_odds returns nan here (0/0 in its
    # quadratic); ours is right, as the by-hand expected counts show:
    # 50·50/250 = 10, 150·36/300 = 18, 200·10/250 = 8, the observed a.
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        assert math.isnan(StratifiedTable(_tables(SCOUTS)).test_equal_odds(True).statistic)
    ours = breslow_day_tarone(SCOUTS)
    assert ours.statistic == pytest.approx(0.0, abs=1e-20) and ours.p_value == 1.0
    assert ours.df == 2
    # Near 1 the stable root agrees with statsmodels' form (1e-9 relative)
    near = [(10, 50, 40, 200), (18, 150, 18, 150), (9, 200, 2, 50)]
    ref = StratifiedTable(_tables(near)).test_equal_odds(adjust=True)
    assert breslow_day_tarone(near).statistic == pytest.approx(float(ref.statistic), rel=1e-9)


def test_breslow_day_by_hand_two_strata() -> None:
    # common practice, worked by hand: strata (a, n1, c, n2) = (4, 10, 1, 10), (1, 10, 4, 10).
    # By symmetry Σad/N = (4·9 + 1·6)/20 = 2.1 and Σbc/N = (6·1 + 9·4)/20 = 2.1, so ψ = 1;
    # both strata have m1 = 5, N = 20, so E = 10·5/20 = 2.5 in each, and
    # V = 1/(1/2.5 + 1/7.5 + 1/2.5 + 1/7.5) = 1/(16/15) = 0.9375.
    # Breslow-Day: (1.5² + 1.5²)/0.9375 = 4.8; Tarone's term (5 − 5)²/1.875 = 0; df 1.
    result = breslow_day_tarone([(4, 10, 1, 10), (1, 10, 4, 10)])
    assert result.statistic == pytest.approx(4.8, rel=1e-12)
    assert result.p_value == pytest.approx(float(scipy.stats.chi2.sf(4.8, 1)), rel=1e-12)
    assert result.df == 1 and result.method == "breslow-day-tarone"
