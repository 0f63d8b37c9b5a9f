"""The time of a tipping-point grid of 200 × 200 missing outcomes, against a per-cell loop.

The grid of ``prespec.analysis.sensitivity.tipping_point`` is computed on whole arrays by the tests'
array kernels in ``prespec.stats`` (for Fisher's exact test ``fisherarray.fisher_p_values``:
one hypergeometric law per anti-diagonal, its two-sided cut found by a binary search run on
every cell at once). The baseline is the obvious loop: the scalar library test
(``prespec.stats``) called on each cell's table. The loop is timed on a random sample of cells
(``--sample``, or every cell with ``--full``) and scaled to the whole grid; before anything is
timed, the grid is checked against the loop on those cells.

Run by hand (about 10 s with the default sample on 2 shared cores; the tests run --smoke):
    .venv/bin/python bench/tipping_point.py [--missing 200] [--complete 400] [--sample 4000]
    .venv/bin/python bench/tipping_point.py --smoke   # a 21 × 21 grid, every cell checked
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Callable
from types import SimpleNamespace

import numpy as np
from _timing import best_of

from prespec.analysis.sensitivity import Observed, tipping_point
from prespec.stats import farrington_manning, fisher_exact, pearson_chi_square

CASES: dict[str, tuple[dict[str, object], Callable[[int, int, int, int], float]]] = {
    "pearson-chi-square": (
        {}, lambda x1, n1, x2, n2: pearson_chi_square([x1, x2], [n1, n2]).p_value),
    "pearson-chi-square (Yates)": (
        {"continuity": True},
        lambda x1, n1, x2, n2: pearson_chi_square([x1, x2], [n1, n2], continuity=True).p_value),
    "fisher-exact": (
        {"test": "fisher-exact"}, lambda x1, n1, x2, n2: fisher_exact(x1, n1, x2, n2).p_value),
    "farrington-manning (NI, RD −0.1)": (
        {"test": "farrington-manning", "comparison": "non-inferiority",
         "alternative": "greater", "margin": -0.1},
        lambda x1, n1, x2, n2: farrington_manning(x1, n1, x2, n2, margin=-0.1,
                                                  measure="risk-difference",
                                                  alternative="greater").p_value),
}


def options(**kwargs: object) -> SimpleNamespace:
    base = {"test": "pearson-chi-square", "alternative": "two-sided", "continuity": False,
            "comparison": "superiority", "margin": None, "measure": "risk-difference",
            "sparse": None}
    return SimpleNamespace(**{**base, **kwargs})


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--missing", type=int, default=200, help="missing outcomes per group")
    parser.add_argument("--complete", type=int, default=400, help="complete cases per group")
    parser.add_argument("--sample", type=int, default=4000, help="cells timed in the loop")
    parser.add_argument("--full", action="store_true", help="time the loop on every cell")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--smoke", action="store_true",
                        help="20 missing and 60 complete per group, every cell checked")
    args = parser.parse_args()
    if args.smoke:
        args.missing, args.complete, args.full = 20, 60, True
    m, n = args.missing, args.complete
    a = Observed("a", round(0.2 * n), n, m)
    b = Observed("b", round(0.3 * n), n, m)
    cells = (m + 1) ** 2
    rng = np.random.default_rng(args.seed)
    flat = np.arange(cells) if args.full else rng.choice(cells, min(args.sample, cells),
                                                         replace=False)
    sample = [(int(k) // (m + 1), int(k) % (m + 1)) for k in flat]
    print(f"grid {m + 1} × {m + 1} = {cells:,} cells; complete cases {a.events}/{a.total} "
          f"and {b.events}/{b.total}; loop timed on {len(sample):,} cells")
    print(f"{'test':34} {'grid':>9} {'loop (whole grid)':>18} {'ratio':>8} "
          f"{'grid vs loop':>13}")
    for name, (extra, scalar) in CASES.items():
        hyp = options(**extra)
        grid = tipping_point(a, b, hyp, 0.05)  # also warms up
        n1, n2 = a.total + a.missing, b.total + b.missing
        worst = 0.0
        for i, j in sample:
            want = scalar(a.events + i, n1, b.events + j, n2)
            got = float(grid.p_values[i, j])
            if not (math.isnan(want) and math.isnan(got)):
                worst = max(worst, abs(got - want) / max(abs(want), 1e-300))
        if worst > 1e-9:
            raise SystemExit(f"{name}: the grid differs from the loop by {worst:.2e} (relative)")
        grid_time = best_of(5, lambda hyp=hyp: tipping_point(a, b, hyp, 0.05))
        start = time.perf_counter()
        for i, j in sample:
            scalar(a.events + i, n1, b.events + j, n2)
        loop_time = (time.perf_counter() - start) * cells / len(sample)
        print(f"{name:34} {grid_time * 1e3:7.1f}ms {loop_time:16.2f} s "
              f"{loop_time / grid_time:7.0f}× {worst:13.1e}")
    print("grid vs loop: the largest relative difference of a p-value on the cells checked "
          "(the run stops above 1e-9)")


if __name__ == "__main__":
    main()
