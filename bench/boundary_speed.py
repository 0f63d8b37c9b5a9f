"""Benchmark: group-sequential boundaries by the Armitage-McPherson-Rowe recursion.

``prespec.stats.sequential.boundaries`` integrates on the Jennison & Turnbull (2000, ch. 19)
grid with Simpson's rule. Two baselines are measured in the same run:

- a naive grid: the same recursion on a uniform grid of step ``--step`` over ±10 with the
  trapezoidal rule (the obvious first implementation), for the 10-look design;
- the brute-force multivariate normal route, for K = 4 (its cost grows fast with K): each
  boundary found by brentq on ``scipy.stats.multivariate_normal.cdf`` (abseps = releps = 1e-8)
  of P(continue to k − 1, |Z_k| > b).

Each route is timed (best of ``--repeat``), and its largest boundary difference from the
recursion at r = 64 is printed beside it, so a speed ratio is never bought with accuracy. The
run stops unless the recursion at its default grid and the multivariate normal route are within
1e-6 of it, and the naive grid (a coarse baseline) within 1e-3.

Run: .venv/bin/python bench/boundary_speed.py [--repeat 5] [--step 0.002]
     .venv/bin/python bench/boundary_speed.py --smoke   # once each, naive step 0.01
"""

from __future__ import annotations

import argparse
import math
import time
from collections.abc import Callable

import numpy as np
from scipy import optimize, special, stats

from prespec.stats.sequential import boundaries, spent

ALPHA = 0.05
NAME = "lan-demets-obrien-fleming"
CLOSE = 1e-6  # the recursion at its default grid, and the multivariate normal route, vs r = 64
NAIVE_CLOSE = 1e-3  # the naive uniform grid: the same boundaries, coarsely


def _best(fn: Callable[[], object], repeat: int) -> tuple[float, object]:
    best, out = math.inf, None
    for _ in range(repeat):
        start = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - start)
    return best, out


def naive_grid(t: np.ndarray, step: float) -> np.ndarray:
    """Two-sided spending boundaries by the recursion on a uniform grid (trapezoidal rule)."""
    cum = 2.0 * spent(NAME, t, ALPHA / 2.0)
    b = np.empty(len(t))
    zs, dens, t_prev, so_far = np.zeros(1), np.ones(1), 0.0, 0.0
    for k, tk in enumerate(t):
        s = math.sqrt(tk - t_prev)
        m = zs * math.sqrt(t_prev)

        def exits(
            bound: float,
            m: np.ndarray = m,
            s: float = s,
            tk: float = float(tk),
            c: np.ndarray = dens,
        ) -> float:
            up = special.ndtr((m - bound * math.sqrt(tk)) / s)
            low = special.ndtr((-bound * math.sqrt(tk) - m) / s)
            return float(np.dot(c, up + low))

        target = float(cum[k]) - so_far
        b[k] = optimize.brentq(lambda x, target=target: exits(x) - target, 0.0, 40.0, xtol=1e-11)
        so_far += exits(b[k])
        n = math.ceil(2.0 * b[k] / step) + 1
        grid = np.linspace(-b[k], b[k], n)
        h_step = grid[1] - grid[0]
        w = np.full(n, h_step)
        w[[0, -1]] = h_step / 2
        u = (grid[:, None] * math.sqrt(tk) - m[None, :]) / s
        h = (np.exp(-0.5 * u * u) @ dens) * math.sqrt(tk) / (s * math.sqrt(2 * math.pi))
        zs, dens, t_prev = grid, w * h, float(tk)
    return b


def mvn_route(t: np.ndarray) -> np.ndarray:
    """Two-sided spending boundaries by brentq on multivariate normal probabilities."""
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    cum = 2.0 * spent(NAME, t, ALPHA / 2.0)
    b = np.empty(len(t))
    for k in range(len(t)):
        target = float(cum[k] - (cum[k - 1] if k else 0.0))
        if k == 0:
            b[0] = stats.norm.isf(target / 2.0)
            continue
        mvn = stats.multivariate_normal(
            np.zeros(k + 1), corr[: k + 1, : k + 1], abseps=1e-8, releps=1e-8
        )

        def excess(x: float, k: int = k, mvn: object = mvn, target: float = target) -> float:
            p = mvn.cdf(np.r_[b[:k], np.inf], lower_limit=np.r_[-b[:k], x])  # type: ignore[attr-defined]
            return 2.0 * float(p) - target

        b[k] = optimize.brentq(excess, 0.5, 8.0, xtol=1e-8)
    return b


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--step", type=float, default=0.002)
    parser.add_argument("--smoke", action="store_true", help="each route once, step 0.01")
    args = parser.parse_args()
    if args.smoke:
        args.repeat, args.step = 1, 0.01

    t10 = np.arange(1, 11) / 10.0
    ref10 = np.array(boundaries(list(t10), alpha=ALPHA, sides=2, efficacy=NAME, r=64).z)
    ours10_s, ours10 = _best(
        lambda: boundaries(list(t10), alpha=ALPHA, sides=2, efficacy=NAME), args.repeat
    )
    naive_s, naive = _best(lambda: naive_grid(t10, args.step), max(1, args.repeat // 2))
    err_ours10 = np.max(np.abs(np.array(ours10.z) - ref10))  # type: ignore[attr-defined]
    err_naive = np.max(np.abs(np.asarray(naive) - ref10))

    t4 = np.arange(1, 5) / 4.0
    ref4 = np.array(boundaries(list(t4), alpha=ALPHA, sides=2, efficacy=NAME, r=64).z)
    ours4_s, ours4 = _best(
        lambda: boundaries(list(t4), alpha=ALPHA, sides=2, efficacy=NAME), args.repeat
    )
    mvn_s, mvn = _best(lambda: mvn_route(t4), 1)
    err_ours4 = np.max(np.abs(np.array(ours4.z) - ref4))  # type: ignore[attr-defined]
    err_mvn = np.max(np.abs(np.asarray(mvn) - ref4))

    print(f"Lan-DeMets O'Brien-Fleming type, two-sided alpha = {ALPHA}, equally spaced looks")
    print(f"{'route':<44}{'seconds':>10}{'max |dz|':>12}")
    print(f"{'10 looks: recursion (ch. 19 grid, r >= 32)':<44}{ours10_s:>10.4f}{err_ours10:>12.1e}")
    print(
        f"{f'10 looks: naive uniform grid, step {args.step:g}':<44}{naive_s:>10.4f}{err_naive:>12.1e}"
    )
    print(f"{'4 looks: recursion (ch. 19 grid, r >= 32)':<44}{ours4_s:>10.4f}{err_ours4:>12.1e}")
    print(f"{'4 looks: multivariate normal + brentq':<44}{mvn_s:>10.4f}{err_mvn:>12.1e}")
    print(f"ratio, 10 looks, naive grid / recursion: {naive_s / ours10_s:.1f}x")
    print(f"ratio, 4 looks, multivariate normal / recursion: {mvn_s / ours4_s:.1f}x")
    far = [label for label, err, limit in (
        ("10 looks: recursion", err_ours10, CLOSE), ("4 looks: recursion", err_ours4, CLOSE),
        ("4 looks: multivariate normal", err_mvn, CLOSE),
        ("10 looks: naive grid", err_naive, NAIVE_CLOSE)) if not err <= limit]
    if far:
        raise SystemExit("boundaries away from the r = 64 recursion: " + ", ".join(far))
    print(f"checked: the recursion and the multivariate normal route within {CLOSE:g} of the "
          f"r = 64 recursion, the naive grid within {NAIVE_CLOSE:g}")


if __name__ == "__main__":
    main()
