"""The exact operating-characteristic curve of a Bayesian rule, against a loop of scipy calls.

The rule: success when Pr(p_a − p_b > margin | data) reaches the threshold, with beta priors.
Its exact probability over the null boundary p_a = p_b + margin is computed by
``prespec.stats.bayes.operating_characteristics`` (the region of outcomes meeting the rule by a
bisection on arrays, then a product of matrices with the binomial laws of all rate points at
once). The baseline is the obvious way: for every outcome (x_a, x_b) the posterior probability
by ``scipy.integrate.quad`` over ``scipy.stats.beta`` (default tolerances) compared with the
threshold, then for each rate point a double loop over the outcomes summing scipy's binomial
pmfs where the rule is met. Both run in full in the same run; before the ratio is printed the
two regions must be identical and the two curves agree to 1e-9, or the script stops.

Run by hand (the baseline takes some 15 minutes on 2 shared cores; the tests run --smoke):
    .venv/bin/python bench/bayes_oc.py [--n 200] [--grid 40] [--threshold 0.975]
    .venv/bin/python bench/bayes_oc.py --smoke   # 12 per group, 8 rate points
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from _timing import best_of
from scipy import integrate, stats

from prespec.stats.bayes import operating_characteristics, rule_probability, rule_region

GOAL = 100.0
PRIOR = (1.0, 1.0)


def quad_probability(x_a: int, x_b: int, n: int, margin: float) -> float:
    """Pr(p_a − p_b > margin | data) by scipy.integrate.quad over scipy.stats.beta."""
    aa, ba = PRIOR[0] + x_a, PRIOR[1] + (n - x_a)
    ab, bb = PRIOR[0] + x_b, PRIOR[1] + (n - x_b)
    lo, hi = max(0.0, -margin), min(1.0, 1.0 - margin)
    below = stats.beta.cdf(lo, ab, bb) if margin < 0 else 0.0
    inside = integrate.quad(lambda y: stats.beta.pdf(y, ab, bb)
                            * stats.beta.sf(y + margin, aa, ba), lo, hi)[0]
    return float(below + inside)


def baseline(n: int, margin: float, threshold: float, rates_a: np.ndarray,
             rates_b: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, float]:
    """The loop: the rule per outcome by quad, then per rate point a double loop of pmfs."""
    start = time.perf_counter()
    rule = np.zeros((n + 1, n + 1), dtype=bool)
    for x_a in range(n + 1):
        for x_b in range(n + 1):
            rule[x_a, x_b] = quad_probability(x_a, x_b, n, margin) >= threshold
    rule_time = time.perf_counter() - start
    curve = np.zeros(rates_a.size)
    outcomes = np.arange(n + 1)
    for k, (rate_a, rate_b) in enumerate(zip(rates_a, rates_b)):
        pmf_a = stats.binom.pmf(outcomes, n, rate_a)
        pmf_b = stats.binom.pmf(outcomes, n, rate_b)
        total = 0.0
        for x_a in range(n + 1):
            for x_b in range(n + 1):
                if rule[x_a, x_b]:
                    total += pmf_a[x_a] * pmf_b[x_b]
        curve[k] = total
    return rule, curve, rule_time, time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=200, help="size of each group")
    parser.add_argument("--grid", type=int, default=40, help="rate points on the boundary")
    parser.add_argument("--threshold", type=float, default=0.975)
    parser.add_argument("--margin", type=float, default=0.0)
    parser.add_argument("--smoke", action="store_true", help="12 per group, 8 rate points")
    args = parser.parse_args()
    if args.smoke:
        args.n, args.grid = 12, 8
    n, m, threshold = args.n, args.margin, args.threshold
    kw = {"margin": m, "alternative": "greater", "threshold": threshold}
    print(f"exact operating characteristics: {n + 1} × {n + 1} outcomes, {args.grid} rate "
          f"points on the null boundary p_a = p_b + {m:g}; Beta(1, 1) priors, rule "
          f"Pr(p_a − p_b > {m:g} | data) >= {threshold:g}")

    oc = operating_characteristics(n, n, PRIOR, PRIOR, grid=args.grid, **kw)  # also warms up
    rates_b = np.array([b for b, _, _ in oc.curve])
    rates_a = np.array([a for _, a, _ in oc.curve])
    ours = np.array([p for _, _, p in oc.curve])
    region = rule_region(n, n, PRIOR, PRIOR, **kw)
    rule, theirs, rule_time, loop_time = baseline(n, m, threshold, rates_a, rates_b)

    differ = np.argwhere(region != rule)
    if differ.size:
        raise SystemExit(f"check failed: the rule regions differ at {len(differ)} outcome(s), "
                         f"first (x_a, x_b) = {tuple(int(v) for v in differ[0])}")
    worst = float(np.max(np.abs(ours - theirs)))
    if worst > 1e-9:
        raise SystemExit(f"check failed: the curves differ by {worst:.2e} (more than 1e-9)")
    again = rule_probability(region, n, n, rates_a, rates_b)
    if not np.array_equal(again, ours):
        raise SystemExit("check failed: operating_characteristics and rule_probability differ")
    print(f"checked: identical rule regions ({int(rule.sum()):,} of {rule.size:,} outcomes "
          f"meet the rule) and curves within 1e-09 (largest difference {worst:.1e})")

    ours_time = best_of(3, lambda: operating_characteristics(n, n, PRIOR, PRIOR,
                                                             grid=args.grid, **kw))
    print(f"{'route':46} {'time':>10} {'ratio':>9}")
    print(f"{'prespec operating_characteristics':46} {ours_time:8.3f} s {1:8.0f}×")
    print(f"{'loop of scipy calls':46} {loop_time:8.1f} s {loop_time / ours_time:8.0f}×")
    print(f"{'  of which the rule by quad per outcome':46} {rule_time:8.1f} s")
    print(f"type I error, the largest on the boundary: {oc.type_one_error:.6f} at "
          f"p_b = {oc.at_rate:.4f}")
    if not args.smoke:
        verdict = "MET" if loop_time / ours_time >= GOAL else "NOT MET"
        print(f"goal: at least {GOAL:.0f}× faster than the loop: {verdict}")


if __name__ == "__main__":
    main()
