"""Unit tests of prespec.stats.adjusted: Adjusted.test (nulls, alternatives, ratio scales),
argument checks and the frozen results. The reference checks (statsmodels, the variance
formulas written out) are in tests/reference/test_ref_adjusted.py."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from scipy import stats

from prespec.stats.adjusted import (
    Adjusted,
    ModelFailure,
    WorkingModel,
    design_matrix,
    g_computation,
)
from prespec.stats.results import Estimate, TestResult

# An invented two-group trial: 60 units a group, a numeric covariate (a 0-3 score)
SCORE = np.tile(np.array([0.0, 1.0, 2.0, 3.0]), 30)
TREATED = np.repeat([1, 0], 60)
OUTCOME = np.array([(i * 7) % 10 < 2 + SCORE[i] + (2 if TREATED[i] else 0)
                    for i in range(120)], dtype=int)


def fitted(measure: str = "risk-difference", **kwargs: object) -> Adjusted:
    return g_computation(OUTCOME, TREATED, SCORE.reshape(-1, 1), ("score",), measure=measure,
                         **kwargs)  # type: ignore[arg-type]


def made(measure: str, value: float, se: float) -> Adjusted:
    """An Adjusted with a chosen value and standard error (the test reads only those)."""
    model = WorkingModel((), Estimate("odds-ratio", 1.0, 0.5, 2.0, "conditional (working "
                                      "model)", 0.95), 4)
    return Adjusted(measure, "ye", (0.3, 0.2), ((1e-3, 0.0), (0.0, 1e-3)), value, se,
                    Estimate(measure, value, 0.0, 1.0, "g-computation", 0.95), model,
                    (50.0, 50.0))


def test_the_test_of_a_risk_difference_is_a_z_on_the_identity_scale() -> None:
    result = made("risk-difference", 0.1, 0.04)
    test = result.test()
    assert test == TestResult("g-computation", pytest.approx(2.5), None,
                              pytest.approx(0.012419330651552318), "two-sided")
    # 2·Φ(−2.5) = 0.012419330651552318  # scipy.stats.norm.sf(2.5) * 2
    assert result.test("greater").p_value == pytest.approx(stats.norm.sf(2.5), rel=1e-12)
    assert result.test("less").p_value == pytest.approx(stats.norm.cdf(2.5), rel=1e-12)
    shifted = result.test("greater", null=-0.05)  # a non-inferiority margin of 0.05
    assert shifted.statistic == pytest.approx(0.15 / 0.04)
    assert shifted.p_value == pytest.approx(stats.norm.sf(3.75), rel=1e-12)


@pytest.mark.parametrize("measure", ["risk-ratio", "odds-ratio"])
def test_the_test_of_a_ratio_is_on_the_log_scale(measure: str) -> None:
    result = made(measure, 1.5, 0.2)
    assert result.test().statistic == pytest.approx(math.log(1.5) / 0.2, rel=1e-14)
    against = result.test("less", null=2.0)
    assert against.statistic == pytest.approx((math.log(1.5) - math.log(2.0)) / 0.2, rel=1e-14)
    assert against.p_value == pytest.approx(stats.norm.cdf(math.log(0.75) / 0.2), rel=1e-12)
    assert result.test(null=1.5).statistic == 0.0
    assert result.test(null=1.5).p_value == 1.0


@pytest.mark.parametrize(("measure", "null", "words"), [
    ("risk-ratio", 0.0, "must be > 0"), ("odds-ratio", -1.0, "must be > 0"),
    ("risk-difference", 1.0, r"must lie in \(-1, 1\)"),
    ("risk-difference", math.nan, "must be a finite number"),
    ("risk-ratio", True, "must be a finite number")])
def test_a_null_off_the_scale_is_refused(measure: str, null: float, words: str) -> None:
    with pytest.raises(ValueError, match=words):
        made(measure, 1.2, 0.1).test(null=null)


def test_an_unknown_alternative_is_refused() -> None:
    with pytest.raises(ValueError, match="alternative must be one of"):
        made("risk-difference", 0.1, 0.1).test("both")


def test_the_interval_is_symmetric_on_the_test_scale() -> None:
    z = stats.norm.ppf(0.95)  # level 0.90
    difference = fitted(level=0.90)
    assert difference.estimate.level == 0.90
    assert difference.estimate.low == pytest.approx(difference.value
                                                    - z * difference.standard_error, rel=1e-12)
    ratio = fitted("risk-ratio", level=0.90)
    assert math.log(ratio.estimate.high) - math.log(ratio.value) == pytest.approx(
        z * ratio.standard_error, rel=1e-12)
    assert math.log(ratio.value) - math.log(ratio.estimate.low) == pytest.approx(
        z * ratio.standard_error, rel=1e-12)
    odds = fitted("odds-ratio")
    p_a, p_b = odds.risks
    assert odds.value == pytest.approx(p_a * (1 - p_b) / ((1 - p_a) * p_b), rel=1e-14)
    assert ratio.value == pytest.approx(p_a / p_b, rel=1e-14)
    assert difference.value == pytest.approx(p_a - p_b, rel=1e-14)


def test_the_groups_swap_the_sign_of_the_difference() -> None:
    forward = fitted()
    backward = g_computation(OUTCOME, 1 - TREATED, SCORE.reshape(-1, 1), ("score",))
    assert backward.value == pytest.approx(-forward.value, rel=1e-10)
    assert backward.standard_error == pytest.approx(forward.standard_error, rel=1e-10)
    assert backward.test().p_value == pytest.approx(forward.test().p_value, rel=1e-9)
    assert backward.n == forward.n[::-1] == (60.0, 60.0)


def test_the_results_are_frozen() -> None:
    result = fitted()
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.value = 0.0  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        result.model.terms[0].coefficient = 0.0  # type: ignore[misc]
    assert isinstance(result.value, float) and isinstance(result.risks[0], float)
    assert all(isinstance(v, float) for row in result.risk_covariance for v in row)


@pytest.mark.parametrize(("kwargs", "words"), [
    ({"y": np.array([0, 1, 2] * 40)}, "y must hold 0 and 1 only"),
    ({"treated": np.array([1, 0] * 59)}, "treated has 118 values, y 120"),
    ({"treated": np.array(["a", "b"] * 60)}, "treated must hold 0 and 1 only"),
    ({"measure": "hazard-ratio"}, "measure must be one of"),
    ({"variance": "hc3"}, "variance must be one of"),
    ({"level": 95}, "level must be strictly between 0 and 1"),
    ({"weights": np.full(120, 1.5)}, "weights must be positive integers"),
    ({"weights": np.zeros(120)}, "weights must be positive integers"),
    ({"weights": np.ones(3)}, r"weights must be one per unit \(120\)"),
    ({"strata": np.zeros(120, dtype=int), "variance": "ge"}, "strata apply to variance 'ye'"),
    ({"strata": np.zeros(120)}, r"strata must be one int code per unit \(120\)"),
    ({"covariates": np.ones((120, 2))}, r"covariates must be a 120×1 matrix"),
    ({"covariates": np.full((120, 1), np.nan)}, "covariates hold a missing or infinite value"),
    ({"max_iterations": 0}, "max_iterations must be an integer >= 1"),
])
def test_bad_arguments_are_a_value_error_not_a_model_failure(kwargs: dict, words: str) -> None:
    arguments: dict = {"y": OUTCOME, "treated": TREATED, "covariates": SCORE.reshape(-1, 1),
                       "names": ("score",)}
    arguments.update(kwargs)
    with pytest.raises(ValueError, match=words) as caught:
        g_computation(arguments.pop("y"), arguments.pop("treated"),
                      arguments.pop("covariates"), arguments.pop("names"), **arguments)
    assert not isinstance(caught.value, ModelFailure)


def test_model_failure_is_a_value_error_of_one_line() -> None:
    with pytest.raises(ModelFailure) as caught:
        g_computation(np.zeros(120, dtype=int), TREATED, SCORE.reshape(-1, 1), ("score",))
    assert isinstance(caught.value, ValueError)
    assert "\n" not in str(caught.value) and str(caught.value).startswith("separation: ")


@pytest.mark.parametrize(("columns", "words"), [
    ([("a", "numeric", np.array([1.0, np.nan]))], "numeric covariate 'a' holds a missing"),
    ([("a", "numeric", np.array(["x", "y"]))], "'a' holds a value that is not a number"),
    ([("a", "categorical", np.array([1, 2]))], "categorical covariate 'a' must hold str"),
    ([("a", "ordinal", np.array([1, 2]))], "covariate 'a' has kind 'ordinal'"),
    ([("a", "numeric", np.ones(2)), ("a", "numeric", np.ones(2))], "'a' is given twice"),
    ([("a", "numeric", np.ones(2)), ("b", "numeric", np.ones(3))],
     "covariate 'b' has 3 values, the first 2"),
])
def test_design_matrix_refuses_bad_columns(columns: list, words: str) -> None:
    with pytest.raises(ValueError, match=words):
        design_matrix(columns)


def test_a_categorical_covariate_of_one_level_adds_no_term() -> None:
    matrix, names, levels = design_matrix([("site", "categorical", np.array(["x", "x"])),
                                           ("age", "numeric", np.array([40.0, 50.0]))])
    assert names == ("age",) and levels == {"site": ("x",)}
    assert matrix.tolist() == [[40.0], [50.0]]


def test_a_variance_that_is_not_positive_is_a_model_failure(
        monkeypatch: pytest.MonkeyPatch) -> None:
    """A guard for small samples: the variance of the effect must be positive to test."""
    from prespec.stats import adjusted

    monkeypatch.setattr(adjusted, "_ye_matrix", lambda *args: np.zeros((2, 2)))
    with pytest.raises(ModelFailure, match=r"^the ye variance of the risk-ratio is not "
                                           r"positive$"):
        fitted("risk-ratio")


def test_a_covariate_shifted_far_from_zero_changes_only_the_intercept() -> None:
    """A calendar-like covariate (1e6 plus a spread of a few units) is neither constant nor
    the intercept (the rank check centres the covariates), and the effect is unchanged."""
    near = fitted()
    far = g_computation(OUTCOME, TREATED, (1e6 + SCORE).reshape(-1, 1), ("score",))
    assert far.value == pytest.approx(near.value, rel=1e-6)
    assert far.model.terms[2].coefficient == pytest.approx(near.model.terms[2].coefficient,
                                                           rel=1e-6)
