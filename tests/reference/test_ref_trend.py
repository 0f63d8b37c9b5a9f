"""Reference checks of the Cochran-Armitage trend test against published values and statsmodels.

Published values are marked ``# from memory`` where they were recalled rather than looked up.
"""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.contingency_tables import Table

from prespec.stats.trend import cochran_armitage

# Agresti A. Categorical Data Analysis (2nd ed. 2002, section 3.4; 3rd ed. 2013, chapter 3):
# infant malformation by the mother's alcohol consumption (average drinks per day: 0, < 1,
# 1-2, 3-5, >= 6), scored 0, 0.5, 1.5, 4.0, 7.0. # from memory
MALFORMED = [48, 38, 5, 1, 1]
NOT_MALFORMED = [17066, 14464, 788, 126, 37]
ALCOHOL_SCORES = [0.0, 0.5, 1.5, 4.0, 7.0]


def _linear_by_linear(events: list[int], totals: list[int], scores: list[float]) -> float:
    """statsmodels' z of the linear-by-linear association test (variance with N - 1).

    ``shift_zeros=False``: by default statsmodels adds 0.5 to every cell of a table with a zero.
    """
    table = np.column_stack([events, np.subtract(totals, events)])
    result = Table(table, shift_zeros=False).test_ordinal_association(
        row_scores=np.asarray(scores, float), col_scores=np.array([1.0, 0.0])
    )
    return float(result.zscore)


def test_maternal_alcohol_example() -> None:
    # Agresti (above): r = 0.0142, M^2 = (N - 1) r^2 = 6.57 with df 1, P = 0.0104 two-sided;
    # as a one-sided z, M = 2.56. # from memory. Our z has the N denominator, so
    # z^2 = M^2 N / (N - 1), the same to the printed digits.
    totals = [e + f for e, f in zip(MALFORMED, NOT_MALFORMED)]
    result = cochran_armitage(MALFORMED, totals, scores=ALCOHOL_SCORES)
    n = sum(totals)
    m2 = result.statistic**2 * (n - 1) / n  # type: ignore[operator]
    assert round(m2, 2) == 6.57
    assert round(result.statistic, 2) == 2.56  # type: ignore[arg-type]
    assert round(result.p_value, 4) == 0.0104
    rising = cochran_armitage(MALFORMED, totals, scores=ALCOHOL_SCORES, alternative="greater")
    assert round(rising.p_value, 4) == 0.0052


def test_tonsil_example() -> None:
    # Armitage P. Tests for linear trends in proportions and frequencies. Biometrics
    # 1955;11:375-386: carriers of Streptococcus pyogenes by tonsil size (not enlarged,
    # enlarged, greatly enlarged), 19 of 516, 29 of 589 and 24 of 293; chi-square for trend
    # 7.19 on 1 df. # from memory
    result = cochran_armitage([19, 29, 24], [516, 589, 293])
    assert round(result.statistic**2, 2) == 7.19  # type: ignore[operator]
    assert result.statistic > 0  # type: ignore[operator]


def test_n_over_n_minus_1_relation_with_statsmodels() -> None:
    # statsmodels.stats.contingency_tables.Table(...).test_ordinal_association: the
    # linear-by-linear z, whose null variance uses N - 1 where Armitage's uses N. So
    # z_CA^2 = M^2 N / (N - 1), and z_CA = M sqrt(N / (N - 1)) with the same sign when the
    # event column is scored 1. Checked to 1e-9 relative on random tables with zeros, tiny and
    # large totals and random distinct scores.
    rng = np.random.default_rng(43)
    checked = 0
    for i in range(200):
        k = int(rng.integers(2, 7))
        high = [3, 40, 2000][i % 3]
        totals = [int(n) for n in rng.integers(1, high + 1, size=k)]
        events = [int(rng.integers(0, n + 1)) if i % 4 else 0 for n in totals]
        if i % 10 == 5:
            events = list(totals)
        scores = list(np.arange(k, dtype=float)) if i % 2 else list(rng.permutation(k) * 1.5)
        ours = cochran_armitage(events, totals, scores=scores)
        with np.errstate(divide="ignore", invalid="ignore"):
            m = _linear_by_linear(events, totals, scores)
        if sum(events) in (0, sum(totals)):
            assert np.isnan(ours.statistic) and np.isnan(m)  # 0 / 0 in both
            continue
        n = sum(totals)
        assert ours.statistic == pytest.approx(m * np.sqrt(n / (n - 1)), rel=1e-9, abs=1e-12)
        checked += 1
    assert checked > 100


def test_alcohol_example_against_statsmodels() -> None:
    # statsmodels' M for the alcohol table is 2.5632 (N - 1); ours, 2.5632 (N): the factor
    # sqrt(N / (N - 1)) = 1.0000154 for N = 32574.
    totals = [e + f for e, f in zip(MALFORMED, NOT_MALFORMED)]
    m = _linear_by_linear(MALFORMED, totals, ALCOHOL_SCORES)
    ours = cochran_armitage(MALFORMED, totals, scores=ALCOHOL_SCORES).statistic
    n = sum(totals)
    assert ours == pytest.approx(m * np.sqrt(n / (n - 1)), rel=1e-12)
    assert ours != pytest.approx(m, rel=1e-6)  # the two denominators do differ
