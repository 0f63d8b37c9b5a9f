"""Reference checks of g-computation (prespec.stats.adjusted) against statsmodels and against
the variance formulas written out again here, in plain numpy, from the text of issue 16.

The data are invented for the test (numpy's generator, fixed seeds): a trial of about 400
units with a numeric covariate (age), a second numeric one (a 0-4 severity score) and a
categorical one (site). Library checks name the function that computed the reference value.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import special, stats
from statsmodels.stats.proportion import confint_proportions_2indep

from prespec.stats.adjusted import (
    Adjusted,
    ModelFailure,
    _sandwich,
    design_matrix,
    g_computation,
)

MEASURES = ("risk-difference", "risk-ratio", "odds-ratio")


def invented_trial(seed: int = 16, n: int = 400) -> pd.DataFrame:
    """An invented trial: 1:1 simple randomisation; the risk rises with age, severity and at
    the site "west"; the first group (treated = 1) lowers it."""
    rng = np.random.default_rng(seed)
    age = rng.normal(60, 12, n).round(1)
    severity = rng.integers(0, 5, n).astype(float)
    site = rng.choice(["west", "east", "north", "south"], n, p=[0.3, 0.3, 0.2, 0.2])
    treated = rng.integers(0, 2, n)
    eta = -1.2 - 0.6 * treated + 0.04 * (age - 60) + 0.3 * severity + 0.8 * (site == "west")
    y = (rng.random(n) < special.expit(eta)).astype(int)
    stratum = (severity >= 2).astype(int) * 2 + (site == "west").astype(int)
    return pd.DataFrame({"y": y, "treated": treated, "age": age, "severity": severity,
                         "site": site, "stratum": stratum})


@pytest.fixture(scope="module")
def trial() -> pd.DataFrame:
    return invented_trial()


def ours(data: pd.DataFrame, **kwargs: object) -> Adjusted:
    x, names, _ = design_matrix([("age", "numeric", data["age"].to_numpy()),
                                 ("severity", "numeric", data["severity"].to_numpy()),
                                 ("site", "categorical", data["site"].to_numpy())])
    return g_computation(data["y"].to_numpy(), data["treated"].to_numpy(), x, names,
                         **kwargs)  # type: ignore[arg-type]


def library_fit(data: pd.DataFrame, **fit: object):
    """statsmodels.formula.api.glm: patsy's treatment coding takes the first level in sorted
    order as the reference, so the terms line up with ours."""
    model = smf.glm("y ~ treated + age + severity + C(site)", data,
                    family=sm.families.Binomial())
    return model.fit(**fit)


def predictions(data: pd.DataFrame, result) -> tuple[np.ndarray, np.ndarray]:
    """statsmodels' predictions of every unit's risk with the group set to 1, then to 0."""
    return (np.asarray(result.predict(data.assign(treated=1))),
            np.asarray(result.predict(data.assign(treated=0))))


def effect_and_gradient(measure: str, pa: float, pb: float) -> tuple[float, float, np.ndarray]:
    """Written out again from the issue: the effect, g(effect) and the gradient of g."""
    if measure == "risk-difference":
        return pa - pb, pa - pb, np.array([1.0, -1.0])
    if measure == "risk-ratio":
        return pa / pb, math.log(pa / pb), np.array([1 / pa, -1 / pb])
    value = (pa / (1 - pa)) / (pb / (1 - pb))
    return value, math.log(value), np.array([1 / (pa * (1 - pa)), -1 / (pb * (1 - pb))])


def ye_by_hand(y: np.ndarray, t: np.ndarray, ma: np.ndarray, mb: np.ndarray) -> np.ndarray:
    """Ye et al.'s simple-randomisation matrix before dividing by n, as issue 16 writes it: a
    moment with subscript a over group a with divisor n_a, one of predictions alone over all
    n units with divisor n (numpy's var and cov with ddof 0 / bias)."""
    a, b = t == 1, t == 0
    pi_a, pi_b = a.mean(), b.mean()

    def cov(u: np.ndarray, v: np.ndarray) -> float:
        return float(np.cov(u, v, bias=True)[0, 1])

    v_aa = np.var(y[a] - ma[a]) / pi_a + 2 * cov(y[a], ma[a]) - np.var(ma)
    v_bb = np.var(y[b] - mb[b]) / pi_b + 2 * cov(y[b], mb[b]) - np.var(mb)
    v_ab = cov(y[a], mb[a]) + cov(ma[b], y[b]) - cov(ma, mb)
    return np.array([[v_aa, v_ab], [v_ab, v_bb]])


def stratified_correction(y: np.ndarray, t: np.ndarray, ma: np.ndarray, mb: np.ndarray,
                          z: np.ndarray) -> np.ndarray:
    """Σ_z p_z [diag(e_{z,a}²/π_a, e_{z,b}²/π_b) − e_z e_zᵀ], written out per stratum."""
    n = len(y)
    pi_a, pi_b = (t == 1).mean(), (t == 0).mean()
    total = np.zeros((2, 2))
    for code in sorted(set(z.tolist())):
        cell_a = (z == code) & (t == 1)
        cell_b = (z == code) & (t == 0)
        e_a = float(np.mean(y[cell_a] - ma[cell_a])) if cell_a.any() else 0.0
        e_b = float(np.mean(y[cell_b] - mb[cell_b])) if cell_b.any() else 0.0
        p_z = (z == code).sum() / n
        total += p_z * np.array([[e_a**2 / pi_a - e_a * e_a, -e_a * e_b],
                                 [-e_a * e_b, e_b**2 / pi_b - e_b * e_b]])
    return total


def assert_inference(result: Adjusted, measure: str, pa: float, pb: float,
                     cov: np.ndarray) -> None:
    """The effect (1e-8), its interval and p-values (1e-6) from (p_a, p_b) and their
    covariance, by the delta method written out here; z quantile by scipy.stats.norm."""
    value, centre, grad = effect_and_gradient(measure, pa, pb)
    se = math.sqrt(grad @ cov @ grad)
    assert result.value == pytest.approx(value, rel=1e-8, abs=1e-12)
    assert result.standard_error == pytest.approx(se, rel=1e-6)
    half = stats.norm.ppf(0.975) * se
    low, high = centre - half, centre + half
    if measure != "risk-difference":
        low, high = math.exp(low), math.exp(high)
    assert result.estimate.low == pytest.approx(low, rel=1e-6, abs=1e-9)
    assert result.estimate.high == pytest.approx(high, rel=1e-6, abs=1e-9)
    z = centre / se
    assert result.test().p_value == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-6)
    assert result.test("less").p_value == pytest.approx(stats.norm.cdf(z), rel=1e-6)


def test_the_working_model_is_statsmodels_maximum_likelihood_fit(trial: pd.DataFrame) -> None:
    result = ours(trial)
    reference = library_fit(trial)  # statsmodels.formula.api.glm(...).fit()
    names = ["Intercept", "treated", "age", "severity",
             "C(site)[T.north]", "C(site)[T.south]", "C(site)[T.west]"]
    assert [term.name for term in result.model.terms] == [
        "intercept", "group", "age", "severity", "site=north", "site=south", "site=west"]
    for term, name in zip(result.model.terms, names):
        assert term.coefficient == pytest.approx(reference.params[name], rel=1e-8, abs=1e-10)
        assert term.standard_error == pytest.approx(reference.bse[name], rel=1e-8)
    group = reference.params["treated"]
    half = stats.norm.ppf(0.975) * reference.bse["treated"]
    conditional = result.model.conditional_odds_ratio
    assert conditional.measure == "odds-ratio"
    assert conditional.method == "conditional (working model)"
    assert conditional.value == pytest.approx(math.exp(group), rel=1e-8)
    assert conditional.low == pytest.approx(math.exp(group - half), rel=1e-8)
    assert conditional.high == pytest.approx(math.exp(group + half), rel=1e-8)
    assert result.model.iterations == reference.fit_history["iteration"]
    ma, mb = predictions(trial, reference)
    assert result.risks == pytest.approx((ma.mean(), mb.mean()), rel=1e-8)
    assert result.n == ((trial["treated"] == 1).sum(), (trial["treated"] == 0).sum())


def test_the_sandwich_is_statsmodels_hc0(trial: pd.DataFrame) -> None:
    reference = library_fit(trial, cov_type="HC0")  # statsmodels GLM fit(cov_type="HC0")
    design = np.asarray(reference.model.exog)
    fitted = np.asarray(reference.fittedvalues)
    y = trial["y"].to_numpy(dtype=float)
    sandwich = _sandwich(design, y, fitted, np.ones(len(y)))
    assert np.allclose(sandwich, np.asarray(reference.cov_params()), rtol=1e-8, atol=1e-14)


@pytest.mark.parametrize("measure", MEASURES)
def test_ge_is_the_delta_method_over_statsmodels_hc0(trial: pd.DataFrame, measure: str) -> None:
    """V = G Σ_HC0 Gᵀ with Σ from statsmodels and G written out (1e-8), and again with G by
    central finite differences of the marginal risks in the coefficients (1e-5: the
    differences' own error)."""
    result = ours(trial, measure=measure, variance="ge")
    reference = library_fit(trial, cov_type="HC0")
    sigma = np.asarray(reference.cov_params())
    beta = np.asarray(reference.params)
    design = np.asarray(reference.model.exog)
    group = reference.model.exog_names.index("treated")  # patsy puts C(site) first
    set_a, set_b = design.copy(), design.copy()
    set_a[:, group], set_b[:, group] = 1.0, 0.0

    def risks(b: np.ndarray) -> np.ndarray:
        return np.array([special.expit(set_a @ b).mean(), special.expit(set_b @ b).mean()])

    ma, mb = special.expit(set_a @ beta), special.expit(set_b @ beta)
    gradient = np.vstack([(ma * (1 - ma)) @ set_a, (mb * (1 - mb)) @ set_b]) / len(ma)
    cov = gradient @ sigma @ gradient.T
    assert np.allclose(result.risk_covariance, cov, rtol=1e-8, atol=0)
    step = 1e-6
    numeric = np.column_stack([(risks(beta + step * e) - risks(beta - step * e)) / (2 * step)
                               for e in np.eye(len(beta))])
    assert np.allclose(result.risk_covariance, numeric @ sigma @ numeric.T, rtol=1e-5, atol=0)
    pa, pb = risks(beta)
    assert_inference(result, measure, pa, pb, cov)


@pytest.mark.parametrize("measure", MEASURES)
def test_ye_is_the_formula_of_the_issue_written_out(trial: pd.DataFrame, measure: str) -> None:
    result = ours(trial, measure=measure)  # variance "ye" is the default
    assert result.variance == "ye"
    assert result.estimate.method == "g-computation"
    reference = library_fit(trial)
    ma, mb = predictions(trial, reference)
    y, t = trial["y"].to_numpy(dtype=float), trial["treated"].to_numpy()
    cov = ye_by_hand(y, t, ma, mb) / len(y)
    assert np.allclose(result.risk_covariance, cov, rtol=1e-8, atol=0)
    assert_inference(result, measure, ma.mean(), mb.mean(), cov)


@pytest.mark.parametrize("measure", MEASURES)
def test_ye_stratified_is_the_correction_written_out(trial: pd.DataFrame, measure: str) -> None:
    z = trial["stratum"].to_numpy()
    result = ours(trial, measure=measure, strata=z)
    reference = library_fit(trial)
    ma, mb = predictions(trial, reference)
    y, t = trial["y"].to_numpy(dtype=float), trial["treated"].to_numpy()
    cov = (ye_by_hand(y, t, ma, mb) - stratified_correction(y, t, ma, mb, z)) / len(y)
    assert np.allclose(result.risk_covariance, cov, rtol=1e-8, atol=0)
    assert_inference(result, measure, ma.mean(), mb.mean(), cov)
    simple = ours(trial, measure=measure)
    assert result.value == simple.value
    # the strata here are prognostic: the stratified variance is the smaller one
    assert result.standard_error < simple.standard_error


def test_an_empty_stratum_cell_contributes_zero(trial: pd.DataFrame) -> None:
    """A stratum with units of one group only: e of the empty cell is 0."""
    z = trial["stratum"].to_numpy().copy()
    lone = int(np.flatnonzero(trial["treated"].to_numpy() == 1)[0])
    z[lone] = 9  # a stratum of one unit, of the first group
    result = ours(trial, strata=z)
    ma, mb = predictions(trial, library_fit(trial))
    y, t = trial["y"].to_numpy(dtype=float), trial["treated"].to_numpy()
    cov = (ye_by_hand(y, t, ma, mb) - stratified_correction(y, t, ma, mb, z)) / len(y)
    assert np.allclose(result.risk_covariance, cov, rtol=1e-8, atol=0)


@pytest.mark.parametrize("variance", ["ye", "ge"])
def test_with_no_covariates_the_estimate_is_the_unadjusted_difference(
        trial: pd.DataFrame, variance: str) -> None:
    """The logistic model with the group alone reproduces the two observed proportions: the
    estimate is their difference exactly, and both variances are the Wald variance
    (statsmodels.stats.proportion.confint_proportions_2indep, method "wald")."""
    y, t = trial["y"].to_numpy(), trial["treated"].to_numpy()
    x1, n1 = int(y[t == 1].sum()), int((t == 1).sum())
    x2, n2 = int(y[t == 0].sum()), int((t == 0).sum())
    result = g_computation(y, t, np.zeros((0, 0)), (), variance=variance)
    assert result.risks[0] == pytest.approx(x1 / n1, abs=1e-12)
    assert result.risks[1] == pytest.approx(x2 / n2, abs=1e-12)
    assert abs(result.value - (x1 / n1 - x2 / n2)) <= 1e-12
    low, high = confint_proportions_2indep(x1, n1, x2, n2, method="wald", compare="diff")
    assert result.estimate.low == pytest.approx(low, abs=1e-10)
    assert result.estimate.high == pytest.approx(high, abs=1e-10)


def aggregated(data: pd.DataFrame) -> pd.DataFrame:
    """One row per distinct (group, outcome, covariates, stratum) with its count."""
    keys = ["y", "treated", "severity", "site", "stratum"]
    return data.groupby(keys, as_index=False).size()


@pytest.mark.parametrize("measure", MEASURES)
@pytest.mark.parametrize(("variance", "stratified"), [("ye", False), ("ye", True),
                                                      ("ge", False)])
def test_weighted_rows_equal_the_expanded_units(measure: str, variance: str,
                                                stratified: bool) -> None:
    data = invented_trial(seed=7, n=600)
    rows = aggregated(data)
    assert len(rows) < len(data) / 2  # the patterns repeat: the weights matter

    def run(frame: pd.DataFrame, weights: np.ndarray | None) -> Adjusted:
        x, names, _ = design_matrix([("severity", "numeric", frame["severity"].to_numpy()),
                                     ("site", "categorical", frame["site"].to_numpy())])
        return g_computation(frame["y"].to_numpy(), frame["treated"].to_numpy(), x, names,
                             weights=weights, measure=measure, variance=variance,
                             strata=frame["stratum"].to_numpy() if stratified else None)

    weighted = run(rows, rows["size"].to_numpy())
    expanded = run(rows.loc[rows.index.repeat(rows["size"])].reset_index(drop=True), None)
    units = run(data, None)
    for other in (expanded, units):
        assert other.n == weighted.n
        for field in ("value", "standard_error"):
            assert getattr(weighted, field) == pytest.approx(getattr(other, field), rel=1e-10)
        assert np.allclose(weighted.risks, other.risks, rtol=1e-10, atol=0)
        assert np.allclose(weighted.risk_covariance, other.risk_covariance, rtol=1e-10, atol=0)
        for mine, theirs in zip(weighted.model.terms, other.model.terms):
            assert mine.name == theirs.name
            assert mine.coefficient == pytest.approx(theirs.coefficient, rel=1e-10, abs=1e-12)
            assert mine.standard_error == pytest.approx(theirs.standard_error, rel=1e-10)
        for lo_hi in ("low", "high"):
            assert getattr(weighted.estimate, lo_hi) == pytest.approx(
                getattr(other.estimate, lo_hi), rel=1e-10)
        assert weighted.test().p_value == pytest.approx(other.test().p_value, rel=1e-9)


def test_the_design_matrix_codes_as_pandas_dummies() -> None:
    """pandas.get_dummies(drop_first=True) over the levels in sorted order: the reference
    level is the first in Python's sorted() of the labels (so "B" before "a", "10" before
    "9"), one indicator per other level, named name=level."""
    site = np.array(["north", "B", "a", "north", "10", "9", "B"])
    dose = np.array([1.5, 2.0, 0.0, 3.25, 1.0, 2.0, 0.5])
    matrix, names, levels = design_matrix([("dose", "numeric", dose),
                                           ("site", "categorical", site)])
    assert levels == {"site": ("10", "9", "B", "a", "north")}
    assert names == ("dose", "site=9", "site=B", "site=a", "site=north")
    categories = pd.Categorical(site, categories=sorted(set(site.tolist())))
    dummies = pd.get_dummies(pd.Series(categories), prefix="site", prefix_sep="=",
                             drop_first=True, dtype=float)
    assert tuple(dummies.columns) == names[1:]
    assert np.array_equal(matrix, np.column_stack([dose, dummies.to_numpy()]))
    empty, none, no_levels = design_matrix([])
    assert empty.shape == (0, 0) and none == () and no_levels == {}


def test_separation_is_a_model_failure(trial: pd.DataFrame) -> None:
    quasi = trial.copy()
    quasi.loc[quasi["site"] == "north", "y"] = 0  # no event at one site: its risk goes to 0
    with pytest.raises(ModelFailure, match=r"^separation: a fitted risk is 0 or 1 for \d+ of "
                                           r"the 400 analysed units \(all with site=north\)$"):
        ours(quasi)
    complete = trial.assign(y=(trial["age"] > 60).astype(int))  # age decides the outcome
    with pytest.raises(ModelFailure, match=r"^separation: "):
        ours(complete)


def test_non_convergence_is_a_model_failure(trial: pd.DataFrame) -> None:
    with pytest.raises(ModelFailure,
                       match=r"^the working model did not converge in 1 iterations$"):
        ours(trial, max_iterations=1)


def test_a_constant_covariate_is_a_model_failure(trial: pd.DataFrame) -> None:
    y, t = trial["y"].to_numpy(), trial["treated"].to_numpy()
    x, names, _ = design_matrix([("age", "numeric", trial["age"].to_numpy()),
                                 ("visit", "numeric", np.full(len(y), 3.0))])
    with pytest.raises(ModelFailure, match=r"^the design is rank-deficient: covariate 'visit' "
                                           r"is constant among the analysed units$"):
        g_computation(y, t, x, names)
    x, names, _ = design_matrix([("arm_code", "numeric", 2.0 * t + 1)])
    with pytest.raises(ModelFailure, match=r"covariate 'arm_code' is constant within each "
                                           r"group among the analysed units$"):
        g_computation(y, t, x, names)
    x, names, _ = design_matrix([("age", "numeric", trial["age"].to_numpy()),
                                 ("months", "numeric", 12 * trial["age"].to_numpy() + 6)])
    with pytest.raises(ModelFailure, match=r"covariate 'months' is a linear combination of "
                                           r"the intercept, the group and the covariates "
                                           r"before it$"):
        g_computation(y, t, x, names)


def test_an_empty_group_is_a_model_failure(trial: pd.DataFrame) -> None:
    y = trial["y"].to_numpy()
    with pytest.raises(ModelFailure, match=r"^the first group has no analysed units$"):
        g_computation(y, np.zeros(len(y)), np.zeros((0, 0)), ())
    with pytest.raises(ModelFailure, match=r"^the second group has no analysed units$"):
        g_computation(y, np.ones(len(y)), np.zeros((0, 0)), ())
