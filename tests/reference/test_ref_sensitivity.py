"""Reference checks of the tipping-point grid: every cell recomputed directly by scipy and
statsmodels on its completed 2×2 table, and the boundary of a small case worked by hand.

The grid of ``prespec.analysis.sensitivity`` is computed on whole arrays (closed forms, and Fisher's
exact test by one hypergeometric law per anti-diagonal); here each cell's table is handed to
the library function on its own, so the two share nothing but the counts.
"""

from __future__ import annotations

import math
import warnings
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.stats
from statsmodels.stats import proportion as sm_proportion

from prespec.analysis import sensitivity
from prespec.analysis.sensitivity import Observed, grid_p_values, tipping_point, tipping_point_json
from prespec.stats.margins import farrington_manning

REL = 1e-9


def options(**kwargs: object) -> SimpleNamespace:
    base = {"test": "pearson-chi-square", "alternative": "two-sided", "continuity": False,
            "comparison": "superiority", "margin": None, "measure": "risk-difference",
            "sparse": None}
    return SimpleNamespace(**{**base, **kwargs})


# complete cases and missing per group: a 7/31 with 6 missing, b 12/29 with 5 missing
A = Observed("a", 7, 31, 6)
B = Observed("b", 12, 29, 5)


def cells() -> list[tuple[int, int, int, int, int, int]]:
    """(i, j, x1, n1, x2, n2) of every cell of the A × B grid."""
    n1, n2 = A.total + A.missing, B.total + B.missing
    return [(i, j, A.events + i, n1, B.events + j, n2)
            for i in range(A.missing + 1) for j in range(B.missing + 1)]


def table(x1: int, n1: int, x2: int, n2: int) -> list[list[int]]:
    return [[x1, n1 - x1], [x2, n2 - x2]]


def close(got: float, want: float) -> bool:
    return math.isclose(got, want, rel_tol=REL, abs_tol=1e-300)


@pytest.mark.parametrize("continuity", [False, True])
def test_pearson_grid_against_chi2_contingency(continuity: bool) -> None:
    grid = tipping_point(A, B, options(continuity=continuity), 0.05)
    assert grid.p_values.shape == (A.missing + 1, B.missing + 1)
    for i, j, x1, n1, x2, n2 in cells():
        # scipy.stats.chi2_contingency with and without Yates' correction
        want = scipy.stats.chi2_contingency(table(x1, n1, x2, n2), correction=continuity)
        assert close(grid.p_values[i, j], want.pvalue), (i, j)


def test_likelihood_ratio_grid_against_chi2_contingency() -> None:
    grid = tipping_point(A, B, options(test="likelihood-ratio"), 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        # scipy.stats.chi2_contingency(lambda_="log-likelihood"): the G² test
        want = scipy.stats.chi2_contingency(table(x1, n1, x2, n2), correction=False,
                                            lambda_="log-likelihood")
        assert close(grid.p_values[i, j], want.pvalue), (i, j)


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_fisher_grid_against_fisher_exact(alternative: str) -> None:
    grid = tipping_point(A, B, options(test="fisher-exact", alternative=alternative), 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        # scipy.stats.fisher_exact; "greater" is an odds ratio above 1, p1 > p2
        want = scipy.stats.fisher_exact(table(x1, n1, x2, n2), alternative=alternative)
        assert close(grid.p_values[i, j], want.pvalue), (i, j)


def test_fisher_grid_over_every_table_of_small_groups() -> None:
    # every (x1, x2) of groups of 9 and 7, the zero margins included (p = 1 there)
    x1, x2 = np.arange(10)[:, None], np.arange(8)[None, :]
    got = grid_p_values("fisher-exact", x1, 9, x2, 7, options())
    for a in range(10):
        for b in range(8):
            want = scipy.stats.fisher_exact(table(a, 9, b, 7)).pvalue  # scipy.stats.fisher_exact
            assert close(got[a, b], want), (a, b)


@pytest.mark.parametrize("alternative", ["two-sided", "greater", "less"])
def test_z_grid_against_proportions_ztest(alternative: str) -> None:
    grid = tipping_point(A, B, options(test="two-proportion-z", alternative=alternative), 0.05)
    sm_alt = {"two-sided": "two-sided", "greater": "larger", "less": "smaller"}[alternative]
    for i, j, x1, n1, x2, n2 in cells():
        # statsmodels.stats.proportion.proportions_ztest, pooled variance
        _, want = sm_proportion.proportions_ztest([x1, x2], [n1, n2], alternative=sm_alt)
        assert close(grid.p_values[i, j], want), (i, j)


def test_one_sided_pearson_is_the_signed_root_on_the_normal() -> None:
    grid = tipping_point(A, B, options(alternative="less"), 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        # statsmodels proportions_ztest: z² is the uncorrected X², so the same p-value
        _, want = sm_proportion.proportions_ztest([x1, x2], [n1, n2], alternative="smaller")
        assert close(grid.p_values[i, j], want), (i, j)


def _statsmodels_2indep(x1: int, n1: int, x2: int, n2: int, **kwargs: object) -> float:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return float(sm_proportion.test_proportions_2indep(x1, n1, x2, n2, **kwargs).pvalue)


def test_farrington_manning_ratio_grid_against_statsmodels() -> None:
    hyp = options(test="farrington-manning", comparison="non-inferiority", alternative="less",
                  margin=1.5, measure="risk-ratio")
    grid = tipping_point(A, B, hyp, 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        # statsmodels test_proportions_2indep(method="score", compare="ratio",
        # correction=False): the Farrington–Manning / Miettinen–Nurminen score test
        want = _statsmodels_2indep(x1, n1, x2, n2, value=1.5, method="score", compare="ratio",
                                   alternative="smaller", correction=False)
        assert close(grid.p_values[i, j], want), (i, j)


def test_farrington_manning_difference_grid_against_the_scalar_test() -> None:
    # statsmodels 0.15 disagrees with the score test of a difference away from 0 (see
    # tests/reference/test_ref_margins.py); the scalar function is checked there against
    # Farrington and Manning (1990) and a direct maximisation, so it is the reference here.
    hyp = options(test="farrington-manning", comparison="non-inferiority",
                  alternative="greater", margin=-0.15)
    grid = tipping_point(A, B, hyp, 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        want = farrington_manning(x1, n1, x2, n2, margin=-0.15, measure="risk-difference",
                                  alternative="greater").p_value
        assert close(grid.p_values[i, j], want), (i, j)


@pytest.mark.parametrize("measure,margin,method", [("risk-difference", 0.1, "wald"),
                                                    ("risk-ratio", 1.3, "log")])
def test_wald_margin_grid_against_statsmodels(measure: str, margin: float, method: str) -> None:
    hyp = options(test="two-proportion-z", comparison="non-inferiority", alternative="less",
                  margin=margin, measure=measure)
    grid = tipping_point(A, B, hyp, 0.05)
    compare = "diff" if measure == "risk-difference" else "ratio"
    for i, j, x1, n1, x2, n2 in cells():
        # statsmodels test_proportions_2indep: method="wald" (difference, unpooled variance)
        # and method="log" (log ratio, the Katz variance)
        want = _statsmodels_2indep(x1, n1, x2, n2, value=margin, method=method,
                                   compare=compare, alternative="smaller")
        assert close(grid.p_values[i, j], want), (i, j)


def test_equivalence_grid_is_the_larger_one_sided_p_value() -> None:
    hyp = options(test="two-proportion-z", comparison="equivalence", margin=[-0.2, 0.2])
    grid = tipping_point(A, B, hyp, 0.05)
    for i, j, x1, n1, x2, n2 in cells():
        # two one-sided tests (Schuirmann 1987), each by statsmodels
        # test_proportions_2indep(method="wald", compare="diff"); p is the larger
        lower = _statsmodels_2indep(x1, n1, x2, n2, value=-0.2, method="wald", compare="diff",
                                    alternative="larger")
        upper = _statsmodels_2indep(x1, n1, x2, n2, value=0.2, method="wald", compare="diff",
                                    alternative="smaller")
        assert close(grid.p_values[i, j], max(lower, upper)), (i, j)


def test_boundary_of_a_small_case_worked_by_hand() -> None:
    # Complete cases: a 0 of 3, b 3 of 3; one missing outcome in each group, so every table
    # has n1 = n2 = 4 and x1 = i, x2 = 3 + j. Fisher's two-sided p by hand, from the
    # hypergeometric law of x1 given s = x1 + x2 (probabilities C(4,k)C(4,s-k)/C(8,s)):
    #   (0, 0): s = 3, P = (4, 24, 24, 4)/56 for k = 0..3; tables as probable as k = 0:
    #           k = 0 and 3, p = 8/56 = 1/7
    #   (0, 1): s = 4, P = (1, 16, 36, 16, 1)/70; k = 0 and 4, p = 2/70 = 1/35
    #   (1, 0): s = 4; P(k) <= 16/70 for k = 0, 1, 3, 4, p = 34/70
    #   (1, 1): s = 5, P = (4, 24, 24, 4)/56 for k = 1..4; p = 8/56 = 1/7
    # The primary (complete-case) table: s = 3 of N = 6, P = (1, 9, 9, 1)/20, p = 2/20.
    # At alpha 0.05 only (0, 1) rejects; the primary does not, so one cell changes and the
    # boundary is j = 1 on row 0 and none on row 1. Observed point: 1·0/3 and 1·3/3.
    a, b = Observed("a", 0, 3, 1), Observed("b", 3, 3, 1)
    grid = tipping_point(a, b, options(test="fisher-exact"), 0.05)
    assert grid.p_values.ravel().tolist() == pytest.approx([1 / 7, 1 / 35, 34 / 70, 1 / 7],
                                                           rel=1e-12)
    assert scipy.stats.fisher_exact([[0, 3], [3, 0]]).pvalue == pytest.approx(0.1)  # 2/20
    entry = tipping_point_json(grid, primary_rejects=False)
    assert entry["boundary"] == [[0, 1], [1, None]]
    assert entry["cells_changing"] == 1
    assert entry["observed_point"] == [0.0, 1.0]
    assert entry["p_values"][0][1] == pytest.approx(1 / 35, rel=1e-12)


def test_boundary_against_a_rejected_primary_worked_by_hand() -> None:
    # Complete cases a 2 of 20, b 10 of 20, two missing in each group (n = 22 each); the
    # uncorrected X² = N(x1(n2 − x2) − x2(n1 − x1))²/(n1·n2·s·(N − s)) by hand:
    #   (i, j) = (0, 0): x = 2, 10: 44·(2·12 − 10·20)²/(22·22·12·32) = 44·30976/185856 = 7.333
    #   (2, 0): x = 4, 10: 44·(4·12 − 10·18)²/(22·22·14·30) = 44·17424/203280 = 3.771
    #   (2, 2): x = 4, 12: 44·(4·10 − 12·18)²/(22·22·16·28) = 44·30976/216832 = 6.286
    # against the 5% critical value 3.841 (chi-square, 1 df; common practice).
    a, b = Observed("a", 2, 20, 2), Observed("b", 10, 20, 2)
    grid = tipping_point(a, b, options(), 0.05)
    x2_by_hand = {(0, 0): 44 * 30976 / 185856, (2, 0): 44 * 17424 / 203280,
                  (2, 2): 44 * 30976 / 216832}
    for (i, j), x2 in x2_by_hand.items():
        assert grid.p_values[i, j] == pytest.approx(scipy.stats.chi2.sf(x2, 1), rel=1e-12)
    # Row 2 (a: 4 of 22): j = 0 gives X² = 3.771 < 3.841, not rejected; j = 1 (x2 = 11):
    # 44·(4·11 − 11·18)²/(22·22·15·29) = 44·23716/210540 = 4.956, rejected. The smallest X²
    # of row 1 is at j = 0 (x = 3, 10): 44·(3·12 − 10·19)²/(22·22·13·31) = 44·23716/195052
    # = 5.350, rejected, and row 0 differs more still: rows 0 and 1 reject everywhere.
    assert 44 * 23716 / 210540 > 3.841 > 44 * 17424 / 203280
    assert 44 * 23716 / 195052 > 3.841
    entry = tipping_point_json(grid, primary_rejects=True)
    assert entry["boundary"] == [[0, None], [1, None], [2, 0]]
    assert entry["cells_changing"] == 1
    assert grid.reject.tolist() == [[True] * 3, [True] * 3, [False, True, True]]


def test_every_pair_test_has_a_grid_or_a_reason() -> None:
    from prespec.plan import vocabulary

    assert sensitivity.GRID_TESTS | set(vocabulary.NO_TIPPING_POINT_TESTS) == \
        set(vocabulary.KNOWN_TESTS_BY_KIND["pair"])
    assert not sensitivity.GRID_TESTS & set(vocabulary.NO_TIPPING_POINT_TESTS)
