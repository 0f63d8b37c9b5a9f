"""Coverage, type I error and power of g-computation when the working model is wrong.

Simulated trials of an invented study (a wound-infection endpoint; covariates age, diabetic,
clinic) whose true outcome model is NOT the working model: the truth has a quadratic term in
age and, in the effect scenarios, a treatment-by-diabetic interaction; the working model is
the main-effects logistic model. For the risk difference of the first group against the
second, the script estimates by simulation:

- the coverage of the nominal 95 per cent interval and the type I error (true effect 0) and
  power (at the stated effect) of the two-sided 5 per cent test, for g-computation with Ye's
  and Ge's variances (prespec.stats.adjusted.g_computation) and for the unadjusted analysis:
  the pooled two-proportion z test with the Wald interval (prespec.stats.proportions.
  two_proportion_z, prespec.stats.intervals.wald_difference) and Newcombe's interval
  (prespec.stats.intervals.newcombe_difference; its test rejects when 0 is outside it);
- the mean standard error over the empirical standard deviation of the estimates (near 1 for
  a variance that is right, above 1 for a conservative one);
- the power gained by adjustment (paired over the same trials).

Two designs: 1:1 simple randomisation, working model in age, diabetic and clinic; and
stratified permuted-block randomisation (blocks of 4 within clinic × diabetic) analysed with
age alone in the working model, where Ye's variance with ``strata`` (the stratified form)
is set beside the simple-randomisation one. A trial whose working model fails
(ModelFailure) falls back to the unadjusted test and interval, as a plan's ``fallback`` would;
the failures are counted.

The true risk difference is computed by quadrature (Gauss–Hermite in age, exact sums over
diabetic and clinic). Before the table is printed the script checks what it compares and stops
if a check fails: the quadrature against a Monte Carlo average of the true risks; that the null
truth is exactly 0; that g-computation with no covariates equals the unadjusted difference
(1e-12) with Ye's and Ge's standard errors equal to the Wald standard error (1e-9 relative);
and that the stratified randomisation balances every stratum to within 2 units.

Run by hand (2.5 to 4 minutes on one core):
    .venv/bin/python bench/adjusted_coverage.py [--trials 4000] [--n 400] [--seed 2023]
    .venv/bin/python bench/adjusted_coverage.py --smoke    # the checks and a 40-trial table
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from dataclasses import dataclass, field

import numpy as np
from scipy import special, stats

from prespec.stats.adjusted import ModelFailure, design_matrix, g_computation
from prespec.stats.intervals import newcombe_difference, wald_difference
from prespec.stats.proportions import two_proportion_z

LEVEL = 0.95
ALPHA = 0.05
Z = float(stats.norm.isf((1 - LEVEL) / 2))
DIABETIC_SHARE = 0.4
CLINICS = ("north", "east", "south", "west")
CLINIC_SHARES = np.array([0.3, 0.3, 0.2, 0.2])
CLINIC_EFFECTS = np.array([0.0, 0.4, -0.4, 0.8])
# the true model (logit scale); age is standardised
INTERCEPT, AGE, AGE_SQUARED, DIABETIC = -0.9, 1.0, 0.5, 0.8
# the stated effect: a main effect and an interaction with diabetic, on the logit scale
EFFECT, EFFECT_BY_DIABETIC = -0.45, -0.25


@dataclass(frozen=True)
class Scenario:
    label: str
    effect: bool       # False: the treatment changes nothing (true risk difference 0)
    stratified: bool   # permuted blocks within clinic × diabetic; working model in age only


SCENARIOS = (Scenario("simple, null", False, False), Scenario("simple, effect", True, False),
             Scenario("stratified, null", False, True),
             Scenario("stratified, effect", True, True))


def true_risk(treated: np.ndarray | float, age: np.ndarray, diabetic: np.ndarray,
              clinic: np.ndarray, effect: bool) -> np.ndarray:
    eta = (INTERCEPT + AGE * age + AGE_SQUARED * (age**2 - 1) + DIABETIC * diabetic
           + CLINIC_EFFECTS[clinic])
    if effect:
        eta = eta + treated * (EFFECT + EFFECT_BY_DIABETIC * diabetic)
    return special.expit(eta)


def true_difference(effect: bool) -> float:
    """E[p(1, X) − p(0, X)] by Gauss–Hermite quadrature in age (80 nodes) and exact sums over
    diabetic and clinic."""
    nodes, weights = np.polynomial.hermite_e.hermegauss(80)
    weights = weights / math.sqrt(2 * math.pi)
    total = 0.0
    for diabetic, p_d in ((0, 1 - DIABETIC_SHARE), (1, DIABETIC_SHARE)):
        for clinic, p_c in enumerate(CLINIC_SHARES):
            d, c = np.full_like(nodes, diabetic), np.full(len(nodes), clinic)
            gap = true_risk(1.0, nodes, d, c, effect) - true_risk(0.0, nodes, d, c, effect)
            total += p_d * float(p_c) * float(weights @ gap)
    return total


def permuted_blocks(rng: np.random.Generator, stratum: np.ndarray) -> np.ndarray:
    """1:1 allocation by permuted blocks of 4 within each stratum, units in arrival order."""
    treated = np.zeros(len(stratum), dtype=int)
    for code in np.unique(stratum):
        units = np.flatnonzero(stratum == code)
        blocks = -(-len(units) // 4)
        sequence = np.concatenate([rng.permutation([1, 1, 0, 0]) for _ in range(blocks)])
        treated[units] = sequence[: len(units)]
    return treated


def draw_trial(rng: np.random.Generator, n: int, scenario: Scenario) -> dict[str, np.ndarray]:
    age = rng.normal(size=n)
    diabetic = (rng.random(n) < DIABETIC_SHARE).astype(int)
    clinic = rng.choice(len(CLINICS), n, p=CLINIC_SHARES)
    stratum = clinic * 2 + diabetic
    if scenario.stratified:
        treated = permuted_blocks(rng, stratum)
    else:
        treated = (rng.random(n) < 0.5).astype(int)
    y = (rng.random(n) < true_risk(treated, age, diabetic, clinic, scenario.effect)).astype(int)
    return {"age": age, "diabetic": diabetic, "clinic": clinic, "stratum": stratum,
            "treated": treated, "y": y}


@dataclass
class Tally:
    """Per method: covered, rejected, estimate and standard error of every trial."""

    covered: list[bool] = field(default_factory=list)
    rejected: list[bool] = field(default_factory=list)
    estimates: list[float] = field(default_factory=list)
    errors: list[float] = field(default_factory=list)


def unadjusted(y: np.ndarray, t: np.ndarray) -> tuple[tuple[int, int, int, int], float]:
    x1, n1 = int(y[t == 1].sum()), int((t == 1).sum())
    x2, n2 = int(y[t == 0].sum()), int((t == 0).sum())
    return (x1, n1, x2, n2), two_proportion_z(x1, n1, x2, n2).p_value


def one_trial(data: dict[str, np.ndarray], scenario: Scenario, truth: float,
              tallies: dict[str, Tally], failures: dict[str, int]) -> None:
    y, t = data["y"], data["treated"]
    table, p_pooled = unadjusted(y, t)
    wald = wald_difference(*table, LEVEL)
    wald_se = (wald.high - wald.low) / (2 * Z)
    rows: dict[str, tuple[float, float, float, bool]] = {
        "unadjusted: pooled z / Wald": (wald.value, wald.low, wald.high, p_pooled < ALPHA)}
    newcombe = newcombe_difference(*table, LEVEL)
    rows["unadjusted: Newcombe"] = (newcombe.value, newcombe.low, newcombe.high,
                                    not newcombe.low <= 0.0 <= newcombe.high)
    columns = [("age", "numeric", data["age"])]
    if not scenario.stratified:
        columns += [("diabetic", "numeric", data["diabetic"].astype(float)),
                    ("clinic", "categorical", np.array(CLINICS)[data["clinic"]])]
    x, names, _ = design_matrix(columns)
    variants = [("g-computation, ye", "ye", None), ("g-computation, ge", "ge", None)]
    if scenario.stratified:
        variants.insert(1, ("g-computation, ye stratified", "ye", data["stratum"]))
    errors = {"unadjusted: pooled z / Wald": wald_se, "unadjusted: Newcombe": math.nan}
    for label, variance, strata in variants:
        try:
            result = g_computation(y, t, x, names, variance=variance, strata=strata,
                                   level=LEVEL)
        except ModelFailure:
            failures[label] = failures.get(label, 0) + 1
            rows[label] = rows["unadjusted: pooled z / Wald"]  # the fallback
            errors[label] = wald_se
            continue
        est = result.estimate
        rows[label] = (est.value, est.low, est.high, result.test().p_value < ALPHA)
        errors[label] = result.standard_error
    for label, (value, low, high, rejected) in rows.items():
        tally = tallies.setdefault(label, Tally())
        tally.covered.append(low <= truth <= high)
        tally.rejected.append(rejected)
        tally.estimates.append(value)
        tally.errors.append(errors[label])


def checks(rng: np.random.Generator, n: int, draws: int) -> list[str]:
    """What the table compares, checked; a failed check stops the script."""
    lines = []
    for effect in (False, True):
        truth = true_difference(effect)
        age = rng.normal(size=draws)
        diabetic = (rng.random(draws) < DIABETIC_SHARE).astype(int)
        clinic = rng.choice(len(CLINICS), draws, p=CLINIC_SHARES)
        gap = (true_risk(1.0, age, diabetic, clinic, effect)
               - true_risk(0.0, age, diabetic, clinic, effect))
        error = float(gap.std() / math.sqrt(draws))
        if effect:
            if abs(gap.mean() - truth) > 4 * error:
                sys.exit(f"check failed: quadrature {truth:.6f}, Monte Carlo {gap.mean():.6f} "
                         f"(standard error {error:.1e})")
        elif truth != 0.0:
            sys.exit(f"check failed: the null truth is {truth:.3g}, not 0")
    lines.append(f"checked: the true risk difference by quadrature equals a Monte Carlo "
                 f"average of {draws:,} draws within 4 standard errors; the null truth is 0")
    worst_value, worst_se = 0.0, 0.0
    for _ in range(20):
        data = draw_trial(rng, n, SCENARIOS[1])
        y, t = data["y"], data["treated"]
        table, _ = unadjusted(y, t)
        wald = wald_difference(*table, LEVEL)
        wald_se = (wald.high - wald.low) / (2 * Z)
        for variance in ("ye", "ge"):
            result = g_computation(y, t, np.zeros((0, 0)), (), variance=variance)
            worst_value = max(worst_value, abs(result.value - wald.value))
            worst_se = max(worst_se, abs(result.standard_error / wald_se - 1))
    if worst_value > 1e-12 or worst_se > 1e-9:
        sys.exit(f"check failed: with no covariates g-computation differs from the unadjusted "
                 f"analysis by {worst_value:.1e} (estimate), {worst_se:.1e} (relative SE)")
    lines.append(f"checked: with no covariates g-computation equals the unadjusted difference "
                 f"(max |diff| {worst_value:.1e}) and its ye and ge standard errors the Wald "
                 f"one (max relative diff {worst_se:.1e}), 20 trials")
    worst = 0
    for _ in range(20):
        data = draw_trial(rng, n, SCENARIOS[2])
        for code in np.unique(data["stratum"]):
            here = data["stratum"] == code
            worst = max(worst, abs(int(data["treated"][here].sum() * 2 - here.sum())))
    if worst > 2:
        sys.exit(f"check failed: a stratum of the permuted blocks is unbalanced by {worst}")
    lines.append(f"checked: the permuted blocks balance every stratum to within {worst} "
                 f"unit(s), 20 trials")
    return lines


def share(values: list[bool]) -> tuple[float, float]:
    p = float(np.mean(values))
    return p, math.sqrt(p * (1 - p) / len(values))


def report(label: str, tallies: dict[str, Tally], failures: dict[str, int], truth: float,
           effect: bool) -> list[str]:
    lines = [f"{label} (true risk difference {truth:+.4f})"]
    what = "power" if effect else "type I error"
    lines.append(f"  {'method':<30} {'coverage':>16} {what:>16} {'mean SE / SD':>13}")
    for method, tally in tallies.items():
        cover, cover_se = share(tally.covered)
        reject, reject_se = share(tally.rejected)
        errors = np.array(tally.errors)
        ratio = ("n/a" if np.isnan(errors).any()
                 else f"{errors.mean() / np.std(tally.estimates, ddof=1):.3f}")
        lines.append(f"  {method:<30} {cover:>8.4f} ({cover_se:.4f}) {reject:>8.4f} "
                     f"({reject_se:.4f}) {ratio:>13}")
    if effect:
        base = np.array(tallies["unadjusted: pooled z / Wald"].rejected, dtype=float)
        for method, tally in tallies.items():
            if method.startswith("g-computation"):
                gain = np.array(tally.rejected, dtype=float) - base
                lines.append(f"  power gained by {method[15:]:<14} over the pooled z test: "
                             f"{gain.mean():+.4f} ({gain.std(ddof=1) / math.sqrt(len(gain)):.4f})")
    if failures:
        lines.append("  working model failures (fallback used): " + ", ".join(
            f"{k} {v}" for k, v in failures.items()))
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=4000, help="trials per scenario")
    parser.add_argument("--n", type=int, default=400, help="units per trial")
    parser.add_argument("--seed", type=int, default=2023)
    parser.add_argument("--smoke", action="store_true", help="the checks and 40 trials")
    args = parser.parse_args()
    trials = 40 if args.smoke else args.trials
    rng = np.random.default_rng(args.seed)
    start = time.perf_counter()
    lines = checks(rng, args.n, 100_000 if args.smoke else 2_000_000)
    print(f"g-computation under a misspecified working model: {trials:,} trials a scenario, "
          f"{args.n} units a trial, seed {args.seed}")
    print("truth: logit P(event) = -0.9 + 1.0 age + 0.5 (age² - 1) + 0.8 diabetic + clinic "
          "+ treated (-0.45 - 0.25 diabetic) [effect scenarios]")
    print("working model: main-effects logistic in age, diabetic, clinic (simple); age only "
          "(stratified by clinic × diabetic, blocks of 4)")
    for line in lines:
        print(line)
    print(f"nominal {LEVEL:.0%} intervals, two-sided tests at {ALPHA}; Monte Carlo standard "
          "errors in brackets")
    for scenario in SCENARIOS:
        truth = true_difference(scenario.effect)
        tallies: dict[str, Tally] = {}
        failures: dict[str, int] = {}
        for _ in range(trials):
            one_trial(draw_trial(rng, args.n, scenario), scenario, truth, tallies, failures)
        print()
        for line in report(scenario.label, tallies, failures, truth, scenario.effect):
            print(line)
    print(f"\n{time.perf_counter() - start:.1f} s")


if __name__ == "__main__":
    main()
