"""How much faster Fisher's exact test of many 2×2 tables is at once than one table at a time.

An invented safety table: 10,000 comparisons (one per adverse-event term, say), arms of 500,
events 0–60 in each arm, drawn at random with a fixed seed. Before anything is timed, every
p-value of ``fisher_many`` is checked against a loop of scipy.stats.fisher_exact (1e-12
relative). Then both are timed in the same run and the ratio printed; the goal is at least 30×.
``fisher_many`` also computes the conditional MLE odds ratio of every table (a root search),
which scipy.stats.fisher_exact does not (it returns the sample odds ratio): the comparison is
not flattered by that. A second set, arms of 400–600 drawn per table, has nearly no shared
margins or repeated tables, to show the cost without that help.

The exact conditional intervals of ``conditional_or_ci_many`` are timed against a loop of
scipy.stats.contingency.odds_ratio(table).confidence_interval() on the first ``--ci-tables``
tables (default 1,000; the scipy loop takes about 5 ms a table), checked first (1e-8 relative,
or 5e-13 absolute below 1e-4 where scipy's own root search stops at an absolute 1e-13).

Run by hand: ``.venv/bin/python bench/fisher_many.py [--tables N] [--ci-tables N]``;
``--smoke`` checks and times 200 tables (20 intervals), as CI does.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable

import numpy as np
from _timing import best_of
from scipy.stats import fisher_exact
from scipy.stats.contingency import odds_ratio

from prespec.stats.fisherarray import conditional_or_ci_many, fisher_many

Tables = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def safety_tables(size: int, seed: int, arms: tuple[int, int] = (500, 500)) -> Tables:
    rng = np.random.default_rng(seed)
    n1 = rng.integers(arms[0], arms[1] + 1, size)
    n2 = rng.integers(arms[0], arms[1] + 1, size)
    a, c = rng.integers(0, 61, size), rng.integers(0, 61, size)
    return a, n1 - a, c, n2 - c


def scipy_p_values(t: Tables) -> np.ndarray:
    a, b, c, d = (x.tolist() for x in t)
    return np.array([fisher_exact([[a[i], b[i]], [c[i], d[i]]]).pvalue for i in range(len(a))])


def scipy_intervals(t: Tables) -> tuple[np.ndarray, np.ndarray]:
    a, b, c, d = (x.tolist() for x in t)
    limits = [odds_ratio([[a[i], b[i]], [c[i], d[i]]]).confidence_interval()
              for i in range(len(a))]
    return np.array([ci.low for ci in limits]), np.array([ci.high for ci in limits])


def once(fn: Callable[[], object]) -> float:
    return best_of(1, fn)


def check_p(t: Tables) -> None:
    ours, ref = fisher_many(*t).p_value, scipy_p_values(t)
    worst = float(np.max(np.abs(ours - ref) / ref))
    if worst > 1e-12:
        raise SystemExit(f"p-values differ from scipy.stats.fisher_exact: {worst:.3g} relative")
    print(f"  checked: all {ours.size} p-values equal scipy's, largest relative difference "
          f"{worst:.2g} (smallest p {ref.min():.3g})")


def check_intervals(t: Tables) -> None:
    for ours, ref in zip(conditional_or_ci_many(*t), scipy_intervals(t)):
        ends = (ref == 0) | np.isinf(ref)
        if not np.array_equal(ours[ends], ref[ends]):
            raise SystemExit("interval ends (0 or inf) differ from scipy's")
        inner = ~ends
        fine = np.where(ref[inner] >= 1e-4,
                        np.abs(ours[inner] - ref[inner]) <= 1e-8 * ref[inner],
                        np.abs(ours[inner] - ref[inner]) <= 5e-13)
        if not np.all(fine):
            raise SystemExit(f"{np.sum(~fine)} interval limits differ from scipy's")
    print(f"  checked: all {t[0].size} intervals equal scipy's")


def fisher_part(label: str, t: Tables, *, goal: bool | None) -> None:
    """Check, then time; ``goal``: whether the 30x goal applies (None: not at this size)."""
    distinct = np.unique(np.stack(t, axis=1), axis=0).shape[0]
    margins = np.unique(np.stack([t[0] + t[1], t[2] + t[3], t[0] + t[2]], axis=1), axis=0)
    print(f"{label}: {t[0].size} tables, {distinct} distinct, {margins.shape[0]} distinct "
          "margins")
    check_p(t)
    baseline = once(lambda: scipy_p_values(t))
    ours = best_of(5, lambda: fisher_many(*t))
    ratio = baseline / ours
    if goal is None:
        verdict = "for information: the goal is set on 10,000 tables"
    elif goal:
        verdict = ("meets" if ratio >= 30 else "MISSES") + " the 30x goal"
    else:
        verdict = "for information: the goal is set on the arms of 500"
    print(f"  loop of scipy.stats.fisher_exact: {baseline:.3f} s "
          f"({baseline / t[0].size * 1e6:.0f} us a table)")
    print(f"  fisher_many (p-values and conditional MLE odds ratios): {ours * 1e3:.1f} ms")
    print(f"  ratio: {ratio:.1f}x ({verdict})")


def interval_part(t: Tables, subset: int) -> None:
    part = tuple(x[:subset] for x in t)
    print(f"exact conditional intervals (95%), first {subset} tables:")
    check_intervals(part)  # type: ignore[arg-type]
    baseline = once(lambda: scipy_intervals(part))  # type: ignore[arg-type]
    ours = best_of(3, lambda: conditional_or_ci_many(*part))
    whole = best_of(3, lambda: conditional_or_ci_many(*t))
    print(f"  loop of scipy.stats.contingency.odds_ratio(...).confidence_interval(): "
          f"{baseline:.3f} s ({baseline / subset * 1e3:.2f} ms a table)")
    print(f"  conditional_or_ci_many on the same {subset}: {ours * 1e3:.1f} ms; "
          f"ratio {baseline / ours:.1f}x")
    print(f"  conditional_or_ci_many on all {t[0].size}: {whole * 1e3:.1f} ms "
          f"(the scipy loop would take about {baseline / subset * t[0].size:.0f} s)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tables", type=int, default=10_000)
    parser.add_argument("--ci-tables", type=int, default=1_000)
    parser.add_argument("--smoke", action="store_true", help="200 tables, 20 intervals")
    args = parser.parse_args()
    if args.smoke:
        args.tables, args.ci_tables = 200, 20
    tables = safety_tables(args.tables, seed=2027)
    fisher_part("arms of 500, events 0-60", tables, goal=None if args.smoke else True)
    fisher_part("arms of 400-600, events 0-60", safety_tables(args.tables, 2028, (400, 600)),
                goal=False)
    interval_part(tables, min(args.ci_tables, args.tables))


if __name__ == "__main__":
    main()
