"""Covariate-adjusted marginal effects of a binary endpoint: standardisation (g-computation).

A logistic working model ``outcome ~ 1 + group + covariates`` is fitted by maximum likelihood
(statsmodels GLM, Binomial family, logit link). Every analysed unit's risk is predicted twice,
with the group set to the first group (a) and to the second (b); their means are the marginal
risks p_a and p_b, and the effect is p_a − p_b, p_a / p_b or the marginal odds ratio
[p_a/(1 − p_a)] / [p_b/(1 − p_b)]. Two variances of (p̂_a, p̂_b) are offered:

- ``"ye"``: the variance of Ye et al. (2023), for the population (unconditional) effect
  under simple randomisation, valid whether or not the working model is right; with
  ``strata``, the form for stratified (permuted-block) randomisation.
- ``"ge"``: the delta method over the HC0 sandwich covariance of the coefficients (Ge et al.
  2011). The sandwich keeps the coefficients' variance right under a wrong model, but the
  observed covariates are held fixed: it leaves out the variance of the mean of
  m_a(X) − m_b(X) over the population, so for the population effect it can understate the
  variance when the effect differs between covariate patterns (the point Ye et al. 2023 make
  in Statistical Theory and Related Fields; from memory).

The estimate is the marginal effect, not the model's conditional odds ratio (reported beside
it, labelled conditional): the marginal effect keeps its meaning when the model is wrong.

Frequency weights let a caller pass one row per distinct (group, outcome, covariates)
combination with its count: every moment and the fit then equal those of the expanded data.

The module is pure: numbers in, frozen results out.

References (titles, authors and pages from memory)
----------
Ge M, Durham LK, Meyer RD, Xie W, Thomas N. Covariate-adjusted difference in proportions from
clinical trials using logistic regression and weighted risk differences. Drug Information
Journal 2011;45:481–493.

Ye T, Shao J, Yi Y, Zhao Q. Toward better practice of covariate adjustment in analyzing
randomized clinical trials. Journal of the American Statistical Association 2023;118.

Ye T et al. Robust variance estimation for covariate-adjusted unconditional treatment effect
in randomized clinical trials with binary outcomes. Statistical Theory and Related Fields
2023;7:159–163.

US Food and Drug Administration. Adjusting for Covariates in Randomized Clinical Trials for
Drugs and Biological Products. Guidance for industry, 2023.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from numbers import Integral, Real

import numpy as np
from scipy import special

from prespec.stats import _checks
from prespec.stats._normal import normal_p_value, upper_quantile
from prespec.stats.results import Estimate, TestResult

MEASURES: tuple[str, ...] = ("risk-difference", "risk-ratio", "odds-ratio")
VARIANCES: tuple[str, ...] = ("ye", "ge")

#: A fitted risk this close to 0 or 1 is taken as (quasi-complete) separation.
SEPARATION_TOLERANCE = 1e-10


class ModelFailure(ValueError):
    """The working model cannot be used; str(exc) is one line saying why (for the report's
    fallback note), e.g. "the working model did not converge in 100 iterations",
    "separation: a fitted risk is 0 or 1 for 82 of the 400 analysed units (all with
    site=north)", "the design is rank-deficient: covariate 'x' is constant among the analysed
    units"."""


def design_matrix(
    columns: Sequence[tuple[str, str, np.ndarray]],
) -> tuple[np.ndarray, tuple[str, ...], dict[str, tuple[str, ...]]]:
    """Covariates coded for the working model, without the intercept and the group.

    columns: (name, kind, values) with kind "numeric" (float array, no NaN) or "categorical"
    (array of str). A categorical covariate gets one indicator per level except the first
    level in sorted order (Python's sorted() on the str labels), named "name=level".
    Returns (matrix n×k float, term names, levels per categorical name in sorted order).
    With no columns the matrix has shape (0, 0): :func:`g_computation` reads it as n×0.
    """
    blocks: list[np.ndarray] = []
    names: list[str] = []
    levels: dict[str, tuple[str, ...]] = {}
    seen: set[str] = set()
    length: int | None = None
    for name, kind, values in columns:
        if name in seen:
            raise ValueError(f"covariate {name!r} is given twice")
        seen.add(name)
        array = np.asarray(values)
        if array.ndim != 1:
            raise ValueError(f"covariate {name!r} must be one value per unit")
        if length is None:
            length = len(array)
        elif len(array) != length:
            raise ValueError(f"covariate {name!r} has {len(array)} values, the first {length}")
        if kind == "numeric":
            try:
                numbers = array.astype(float)
            except (TypeError, ValueError):
                raise ValueError(f"numeric covariate {name!r} holds a value that is not a "
                                 "number") from None
            if not np.all(np.isfinite(numbers)):
                raise ValueError(f"numeric covariate {name!r} holds a missing or infinite value")
            blocks.append(numbers.reshape(-1, 1))
            names.append(name)
        elif kind == "categorical":
            labels = array.tolist()
            if not all(isinstance(label, str) for label in labels):
                raise ValueError(f"categorical covariate {name!r} must hold str labels")
            ordered = tuple(sorted(set(labels)))
            levels[name] = ordered
            codes = np.array(labels, dtype=object)
            for level in ordered[1:]:
                blocks.append((codes == level).astype(float).reshape(-1, 1))
                names.append(f"{name}={level}")
        else:
            raise ValueError(f"covariate {name!r} has kind {kind!r}; expected numeric or "
                             "categorical")
    if not blocks:
        return np.zeros((length or 0, 0)), (), levels
    return np.hstack(blocks), tuple(names), levels


@dataclass(frozen=True)
class Term:
    """One coefficient of the working model with its model-based standard error."""

    name: str
    coefficient: float
    standard_error: float


@dataclass(frozen=True)
class WorkingModel:
    """The fitted logistic working model.

    ``terms`` are "intercept", "group" (the first group against the second), then the
    covariate terms. ``conditional_odds_ratio`` is exp(group coefficient) with its Wald interval
    on the log scale: an effect conditional on the covariates, not the marginal effect.
    ``iterations`` counts statsmodels' IRLS iterations; one Newton step follows them (see
    :func:`g_computation`).
    """

    terms: tuple[Term, ...]
    conditional_odds_ratio: Estimate
    iterations: int


@dataclass(frozen=True)
class Adjusted:
    """A g-computation estimate of a marginal effect, its variance and its working model.

    ``risks`` are the marginal risks (p_a, p_b) and ``risk_covariance`` their estimated
    covariance (already divided by n). ``standard_error`` is on the test scale: the identity
    for the risk difference, the log for the risk ratio and the odds ratio. ``n`` holds the
    analysed units per group (sums of the weights).
    """

    measure: str
    variance: str
    risks: tuple[float, float]
    risk_covariance: tuple[tuple[float, float], tuple[float, float]]
    value: float
    standard_error: float
    estimate: Estimate
    model: WorkingModel
    n: tuple[float, float]

    def test(self, alternative: str = "two-sided", null: float | None = None) -> TestResult:
        """z = (g(value) − g(null)) / standard_error, g identity for RD and log for ratios;
        null defaults to 0 (RD) or 1 (ratios); method "g-computation", statistic z, df None.
        ``greater`` means the first group's risk (or odds) is the larger."""
        alternative = _checks.alternative(alternative)
        ratio = self.measure != "risk-difference"
        if null is None:
            null = 1.0 if ratio else 0.0
        if isinstance(null, bool) or not isinstance(null, Real) or not math.isfinite(null):
            raise ValueError(f"null must be a finite number, got {null!r}")
        if ratio and null <= 0:
            raise ValueError(f"the null of a {self.measure} must be > 0, got {null!r}")
        if not ratio and not -1.0 < null < 1.0:
            raise ValueError(f"the null of a risk-difference must lie in (-1, 1), got {null!r}")
        z = (_scale(self.measure, self.value) - _scale(self.measure, float(null))) \
            / self.standard_error
        return TestResult("g-computation", z, None, normal_p_value(z, alternative), alternative)


def g_computation(
    y: np.ndarray,
    treated: np.ndarray,
    covariates: np.ndarray,
    names: Sequence[str],
    *,
    weights: np.ndarray | None = None,
    measure: str = "risk-difference",
    variance: str = "ye",
    level: float = 0.95,
    strata: np.ndarray | None = None,
    max_iterations: int = 100,
) -> Adjusted:
    """The marginal effect of the first group against the second by g-computation.

    ``y`` is the 0/1 outcome, ``treated`` 1 for the first group (a) and 0 for the second (b),
    ``covariates`` the n×k matrix of :func:`design_matrix` with its term ``names`` (k may be
    0), ``weights`` optional positive integer frequency weights (each row stands for that many
    units). The working model is fitted by statsmodels' IRLS (``max_iterations`` at most),
    followed by one Newton step from its result, which brings the coefficients to the maximum
    of the likelihood to rounding error: with no covariates the marginal risks are then the
    two observed proportions.

    Variances of (p̂_a, p̂_b), with m_a(x), m_b(x) the predictions under each group:

    - ``"ge"``: V = G Σ Gᵀ, Σ the HC0 sandwich covariance of the coefficients,
      Σ = A⁻¹ B A⁻¹ with A = Σ_i m_i(1 − m_i) d_i d_iᵀ and B = Σ_i (y_i − m_i)² d_i d_iᵀ
      (d_i the unit's design row, m_i its fitted risk), and G's rows
      mean_i m(1 − m) d_i with the group set to a, then to b.
    - ``"ye"`` (simple randomisation), π_a the share of units in group a:
      V_aa = var_a(Y − m_a)/π_a + 2 cov_a(Y, m_a) − var(m_a),
      V_ab = cov_a(Y, m_b) + cov_b(m_a, Y) − cov(m_a, m_b), all divided by n.
      A moment with a subscript a is taken over the units of group a with divisor n_a; a
      moment of predictions alone over all n units with divisor n.
    - ``"ye"`` with ``strata`` (an int code per unit: the randomisation strata of a stratified,
      permuted-block randomisation): from the simple-randomisation matrix (before dividing by
      n) is subtracted Σ_z p_z [diag(e_{z,a}²/π_a, e_{z,b}²/π_b) − e_z e_zᵀ], where p_z = n_z/n
      and e_{z,a} is the mean of (Y − m_a(X)) over the units of stratum z in group a (0 when
      that cell is empty). This is the covariate-adaptive-randomisation correction
      V_SR − E[R(Z) Ω_SR R(Z)] with R(Z) = diag(E[Y(a) − m_a(X) | Z]/π_a) and
      Ω_SR = diag(π) − ππᵀ (Ye, Shao, Yi, Zhao, JASA 2023, "Toward better practice of
      covariate adjustment…", Theorem 1, from memory).

    Effects and their variance on the test scale (delta method): risk difference
    V_aa + V_bb − 2V_ab; log risk ratio V_aa/p_a² + V_bb/p_b² − 2V_ab/(p_a p_b); log marginal
    odds ratio with gradient (1/(p_a(1 − p_a)), −1/(p_b(1 − p_b))). The interval at ``level``
    is g(value) ± z_{(1+level)/2}·SE, back-transformed for the ratios.

    Raises ModelFailure (one line) when the working model cannot be used: a group without
    units, a rank-deficient design, separation (statsmodels' perfect-separation error or
    warning, or a fitted risk within 1e-10 of 0 or 1), no convergence in ``max_iterations``,
    or a variance that is not positive. Bad arguments raise ValueError.

    References
    ----------
    Ge M et al. Drug Information Journal 2011;45:481. Ye T et al. Statistical Theory and
    Related Fields 2023;7:159. Ye T, Shao J, Yi Y, Zhao Q. JASA 2023 (Theorem 1). See the
    module's docstring.
    """
    y, t, x, w, zs = _validated(y, treated, covariates, names, weights, strata, variance)
    if measure not in MEASURES:
        raise ValueError(f"measure must be one of {', '.join(MEASURES)}; got {measure!r}")
    if variance not in VARIANCES:
        raise ValueError(f"variance must be one of {', '.join(VARIANCES)}; got {variance!r}")
    lvl = _checks.level(level)
    if isinstance(max_iterations, bool) or not isinstance(max_iterations, Integral) \
            or max_iterations < 1:
        raise ValueError(f"max_iterations must be an integer >= 1, got {max_iterations!r}")

    n_a, n_b = float(w[t == 1].sum()), float(w[t == 0].sum())
    for label, size in (("first", n_a), ("second", n_b)):
        if size == 0:
            raise ModelFailure(f"the {label} group has no analysed units")
    design = np.column_stack([np.ones(len(y)), t, x])
    _check_rank(design, tuple(names))
    beta, iterations = _fit(y, design, w, int(max_iterations))
    _check_separation(special.expit(design @ beta), t, x, tuple(names), w)
    beta = _newton_step(y, design, w, beta)
    fitted = special.expit(design @ beta)
    _check_separation(fitted, t, x, tuple(names), w)
    bread = _information_inverse(design, fitted, w)

    design_a, design_b = design.copy(), design.copy()
    design_a[:, 1], design_b[:, 1] = 1.0, 0.0
    m_a, m_b = special.expit(design_a @ beta), special.expit(design_b @ beta)
    total = n_a + n_b
    p_a, p_b = float(w @ m_a / total), float(w @ m_b / total)

    if variance == "ge":
        sandwich = _sandwich(design, y, fitted, w)
        gradient = np.vstack([(w * m_a * (1 - m_a)) @ design_a,
                              (w * m_b * (1 - m_b)) @ design_b]) / total
        cov = gradient @ sandwich @ gradient.T
    else:
        cov = _ye_matrix(y, t, w, m_a, m_b, zs) / total

    value, se = _effect(measure, p_a, p_b, cov)
    if not (math.isfinite(se) and se > 0):
        raise ModelFailure(f"the {variance} variance of the {measure} is not positive")
    half = float(upper_quantile((1.0 - lvl) / 2.0)) * se
    centre = _scale(measure, value)
    low, high = centre - half, centre + half
    if measure != "risk-difference":
        low, high = math.exp(low), math.exp(high)
    model = _working_model(beta, bread, ("intercept", "group", *names), iterations, lvl)
    return Adjusted(
        measure=measure,
        variance=variance,
        risks=(p_a, p_b),
        risk_covariance=((float(cov[0, 0]), float(cov[0, 1])),
                         (float(cov[1, 0]), float(cov[1, 1]))),
        value=value,
        standard_error=se,
        estimate=Estimate(measure, value, low, high, "g-computation", lvl),
        model=model,
        n=(n_a, n_b),
    )


def _validated(
    y: object, treated: object, covariates: object, names: Sequence[str],
    weights: object, strata: object, variance: str,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    """The arguments as float arrays (strata as int codes), or a ValueError saying what is
    wrong with them."""
    outcome = _binary("y", y)
    group = _binary("treated", treated)
    n = len(outcome)
    if len(group) != n:
        raise ValueError(f"treated has {len(group)} values, y {n}")
    names = tuple(names)
    matrix = np.asarray(covariates, dtype=float)
    if not names and matrix.size == 0:
        matrix = np.zeros((n, 0))
    if matrix.ndim != 2 or matrix.shape != (n, len(names)):
        raise ValueError(f"covariates must be a {n}×{len(names)} matrix (one column per name), "
                         f"got shape {matrix.shape}")
    if not np.all(np.isfinite(matrix)):
        raise ValueError("covariates hold a missing or infinite value")
    if weights is None:
        w = np.ones(n)
    else:
        w = np.asarray(weights, dtype=float)
        if w.shape != (n,):
            raise ValueError(f"weights must be one per unit ({n}), got shape {w.shape}")
        if not (np.all(np.isfinite(w)) and np.all(w > 0) and np.all(w == np.round(w))):
            raise ValueError("weights must be positive integers (frequency weights)")
    codes = None
    if strata is not None:
        if variance != "ye":
            raise ValueError("strata apply to variance 'ye' only")
        codes = np.asarray(strata)
        if codes.shape != (n,) or not np.issubdtype(codes.dtype, np.integer):
            raise ValueError(f"strata must be one int code per unit ({n})")
    return outcome, group, matrix, w, codes


def _binary(name: str, values: object) -> np.ndarray:
    array = np.asarray(values)
    if array.ndim != 1:
        raise ValueError(f"{name} must be one value per unit")
    try:
        numbers = array.astype(float)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must hold 0 and 1 only") from None
    if not np.all((numbers == 0) | (numbers == 1)):
        raise ValueError(f"{name} must hold 0 and 1 only")
    return numbers


def _check_rank(design: np.ndarray, names: tuple[str, ...]) -> None:
    """ModelFailure naming the first covariate that adds nothing to the intercept, the group
    and the covariates before it."""
    centred = design.copy()  # the covariates about their means: the same column space
    centred[:, 2:] -= centred[:, 2:].mean(axis=0)
    norms = np.linalg.norm(centred, axis=0)
    scaled = centred / np.where(norms > 0, norms, 1.0)
    if np.linalg.matrix_rank(scaled) == design.shape[1]:
        return
    for j, name in enumerate(names):
        column = design[:, 2 + j]
        if np.ptp(column) == 0:
            reason = "is constant among the analysed units"
        elif np.linalg.matrix_rank(scaled[:, [0, 1, 2 + j]]) < 3:
            reason = "is constant within each group among the analysed units"
        elif np.linalg.matrix_rank(scaled[:, : 3 + j]) < 3 + j:
            reason = ("is a linear combination of the intercept, the group and the "
                      "covariates before it")
        else:
            continue
        raise ModelFailure(f"the design is rank-deficient: covariate {name!r} {reason}")
    raise ModelFailure("the design is rank-deficient: fewer analysed units than terms")


def _fit(y: np.ndarray, design: np.ndarray, w: np.ndarray,
         max_iterations: int) -> tuple[np.ndarray, int]:
    """Maximum likelihood by statsmodels' IRLS: the coefficients and the iteration count."""
    # imported here: statsmodels takes a while to load and only this path needs it
    from statsmodels.genmod import families
    from statsmodels.genmod.generalized_linear_model import GLM
    from statsmodels.tools.sm_exceptions import (
        ConvergenceWarning,
        PerfectSeparationError,
        PerfectSeparationWarning,
    )

    model = GLM(y, design, family=families.Binomial(), freq_weights=w)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = model.fit(maxiter=max_iterations)
        except PerfectSeparationError:
            raise ModelFailure("separation: the working model predicts every outcome "
                               "perfectly") from None
        except np.linalg.LinAlgError as exc:
            raise ModelFailure(f"the working model could not be fitted: {exc}") from None
    categories = {item.category for item in caught}
    if any(issubclass(c, PerfectSeparationWarning) for c in categories):
        raise ModelFailure("separation: the working model predicts every outcome perfectly")
    if not result.converged or any(issubclass(c, ConvergenceWarning) for c in categories):
        raise ModelFailure(f"the working model did not converge in {max_iterations} iterations")
    return np.asarray(result.params, dtype=float), int(result.fit_history["iteration"])


def _newton_step(y: np.ndarray, design: np.ndarray, w: np.ndarray,
                 beta: np.ndarray) -> np.ndarray:
    """One Newton step of the log-likelihood from ``beta``: IRLS stops when the deviance
    changes by less than 1e-8, and this step takes the coefficients from there to the maximum
    to rounding error."""
    fitted = special.expit(design @ beta)
    score = design.T @ (w * (y - fitted))
    try:
        return beta + np.linalg.solve(_information(design, fitted, w), score)
    except np.linalg.LinAlgError as exc:
        raise ModelFailure(f"the working model could not be fitted: {exc}") from None


def _check_separation(fitted: np.ndarray, t: np.ndarray, x: np.ndarray,
                      names: tuple[str, ...], w: np.ndarray) -> None:
    """ModelFailure when a fitted risk lies within 1e-10 of 0 or 1, saying how many units,
    in which group, and the indicator terms they all share."""
    extreme = (fitted < SEPARATION_TOLERANCE) | (fitted > 1 - SEPARATION_TOLERANCE)
    if not extreme.any():
        return
    count, total = w[extreme].sum(), w.sum()
    where = []
    groups = set(t[extreme].tolist())
    if len(groups) == 1:
        where.append("all in the " + ("first" if groups == {1.0} else "second") + " group")
    shared = [name for j, name in enumerate(names)
              if np.isin(x[:, j], (0.0, 1.0)).all() and (x[extreme, j] == 1.0).all()]
    if shared:
        where.append("all with " + ", ".join(shared))
    detail = f" ({'; '.join(where)})" if where else ""
    raise ModelFailure(f"separation: a fitted risk is 0 or 1 for {count:.0f} of the {total:.0f} "
                       f"analysed units{detail}")


def _information(design: np.ndarray, fitted: np.ndarray, w: np.ndarray) -> np.ndarray:
    """The Fisher information of the coefficients, Σ_i w_i m_i(1 − m_i) d_i d_iᵀ."""
    return design.T @ (design * (w * fitted * (1 - fitted))[:, None])


def _information_inverse(design: np.ndarray, fitted: np.ndarray, w: np.ndarray) -> np.ndarray:
    """The inverse of the Fisher information: the model-based covariance of the coefficients."""
    return np.linalg.inv(_information(design, fitted, w))


def _sandwich(design: np.ndarray, y: np.ndarray, fitted: np.ndarray,
              w: np.ndarray) -> np.ndarray:
    """The HC0 sandwich covariance of the coefficients, A⁻¹ B A⁻¹ with
    A = Σ_i w_i m_i(1 − m_i) d_i d_iᵀ and B = Σ_i w_i (y_i − m_i)² d_i d_iᵀ."""
    bread = _information_inverse(design, fitted, w)
    meat = design.T @ (design * (w * (y - fitted) ** 2)[:, None])
    return bread @ meat @ bread


def _moment(u: np.ndarray, v: np.ndarray, w: np.ndarray) -> float:
    """The weighted covariance of u and v with divisor the sum of the weights."""
    total = w.sum()
    return float(w @ ((u - w @ u / total) * (v - w @ v / total)) / total)


def _ye_matrix(y: np.ndarray, t: np.ndarray, w: np.ndarray, m_a: np.ndarray,
               m_b: np.ndarray, strata: np.ndarray | None) -> np.ndarray:
    """Ye et al.'s matrix n·Var(p̂_a, p̂_b), with the stratified correction when strata are
    given (see :func:`g_computation`)."""
    a, b = t == 1, t == 0
    total = w.sum()
    pi_a, pi_b = w[a].sum() / total, w[b].sum() / total
    ya, yb, wa, wb = y[a], y[b], w[a], w[b]
    v_aa = (_moment(ya - m_a[a], ya - m_a[a], wa) / pi_a + 2 * _moment(ya, m_a[a], wa)
            - _moment(m_a, m_a, w))
    v_bb = (_moment(yb - m_b[b], yb - m_b[b], wb) / pi_b + 2 * _moment(yb, m_b[b], wb)
            - _moment(m_b, m_b, w))
    v_ab = _moment(ya, m_b[a], wa) + _moment(m_a[b], yb, wb) - _moment(m_a, m_b, w)
    matrix = np.array([[v_aa, v_ab], [v_ab, v_bb]])
    if strata is None:
        return matrix
    for code in np.unique(strata):
        here = strata == code
        e = np.zeros(2)
        for k, (group, m) in enumerate(((a, m_a), (b, m_b))):
            cell = here & group
            if cell.any():
                e[k] = w[cell] @ (y[cell] - m[cell]) / w[cell].sum()
        share = w[here].sum() / total
        matrix -= share * (np.diag(e**2 / np.array([pi_a, pi_b])) - np.outer(e, e))
    return matrix


def _scale(measure: str, value: float) -> float:
    """g: the identity for the risk difference, the log for the ratios."""
    return value if measure == "risk-difference" else math.log(value)


def _effect(measure: str, p_a: float, p_b: float, cov: np.ndarray) -> tuple[float, float]:
    """The effect and its standard error on the test scale, by the delta method."""
    if measure == "risk-difference":
        value, gradient = p_a - p_b, np.array([1.0, -1.0])
    elif measure == "risk-ratio":
        value, gradient = p_a / p_b, np.array([1.0 / p_a, -1.0 / p_b])
    else:
        value = (p_a / (1 - p_a)) / (p_b / (1 - p_b))
        gradient = np.array([1.0 / (p_a * (1 - p_a)), -1.0 / (p_b * (1 - p_b))])
    var = float(gradient @ cov @ gradient)
    return float(value), math.sqrt(var) if var > 0 else math.nan


def _working_model(beta: np.ndarray, bread: np.ndarray, names: tuple[str, ...],
                   iterations: int, level: float) -> WorkingModel:
    errors = np.sqrt(np.diag(bread))
    terms = tuple(Term(name, float(c), float(s)) for name, c, s in zip(names, beta, errors))
    half = float(upper_quantile((1.0 - level) / 2.0)) * float(errors[1])
    conditional = Estimate("odds-ratio", math.exp(beta[1]), math.exp(beta[1] - half),
                           math.exp(beta[1] + half), "conditional (working model)", level)
    return WorkingModel(terms, conditional, iterations)
