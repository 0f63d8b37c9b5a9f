"""Benchmark: whole-trial simulation on arrays against a loop over scipy/statsmodels calls.

A three-arm plan with three pairwise hypotheses, each Pearson's chi-square with the sparse
switch to Fisher's exact test (smallest expected count below 5), Holm over the three. The
same 100,000 simulated trials are decided twice:

- on arrays, by ``prespec.design.simulate.Decider`` (chunks of 20,000 trials);
- by a loop, one trial at a time: ``scipy.stats.contingency.expected_freq`` for the switch,
  ``scipy.stats.chi2_contingency`` or ``scipy.stats.fisher_exact`` for each p-value, and Holm
  by ``statsmodels.stats.multitest.multipletests(method="holm")``; timed on a subsample and
  scaled to all the trials. multipletests runs ``gc.collect()`` on every call, which
  dominates its time, so a second loop, the same scipy calls with Holm by prespec's own
  ``stats.multiplicity.adjust``, gives the fairer (smaller) ratio, printed as the headline.

It prints the times, the ratios (the target is at least 100×), whether the decisions agree
on every trial of each subsample, and the peak memory of the array run (tracemalloc).

Run: .venv/bin/python bench/simulate_speed.py [--trials 100000] [--loop 2000]
     .venv/bin/python bench/simulate_speed.py --smoke   # 2,000 trials, loops of 200 and 5
"""

from __future__ import annotations

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np
from scipy import stats
from scipy.stats.contingency import expected_freq
from statsmodels.stats.multitest import multipletests

from prespec.design.simulate import CHUNK, Decider, draw, scenario_seed
from prespec.plan import load_plan
from prespec.stats.multiplicity import adjust

PLAN = """\
prespec: 1
title: Bench - three dressings, three pairwise comparisons (invented)
data:
  id: participant
  group: arm
  groups: [gauze, alginate, negative-pressure]
  planned_n: {gauze: 60, alginate: 60, negative-pressure: 60}
outcomes:
  infection: {column: infected_30d, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
design:
  assumed: {gauze: 0.10, alginate: 0.06, negative-pressure: 0.03}
  power: 0.8
hypotheses:
  - {id: H1, outcome: infection, compare: [negative-pressure, gauze], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
  - {id: H2, outcome: infection, compare: [alginate, gauze], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
  - {id: H3, outcome: infection, compare: [negative-pressure, alginate], test: pearson-chi-square,
     sparse: {min_expected: 5, test: fisher-exact}}
"""
PAIRS = [(2, 0), (1, 0), (2, 1)]  # indices into groups, compare order


def loop_decisions(events: np.ndarray, sizes: np.ndarray, alpha: float,
                   holm: str = "plain") -> np.ndarray:
    """The same rule, one trial and one library call at a time (Holm by statsmodels or by
    prespec's own adjustment)."""
    out = np.zeros((len(events), len(PAIRS)), dtype=bool)
    for t, row in enumerate(events):
        p = []
        for a, b in PAIRS:
            table = np.array([[row[a], sizes[a] - row[a]], [row[b], sizes[b] - row[b]]])
            if expected_freq(table).min() < 5:
                p.append(stats.fisher_exact(table).pvalue)
            else:
                p.append(stats.chi2_contingency(table, correction=False).pvalue)
        if holm == "statsmodels":
            out[t] = multipletests(p, alpha=alpha, method="holm")[0]
        else:
            out[t] = np.array(adjust(p, "holm")) <= alpha
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=100_000)
    parser.add_argument("--loop", type=int, default=2_000, help="trials timed in the loop")
    parser.add_argument("--loop-statsmodels", type=int, default=200,
                        help="trials timed in the loop with statsmodels' multipletests")
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--smoke", action="store_true",
                        help="2,000 trials; 200 in the loop, 5 with multipletests")
    args = parser.parse_args()
    if args.smoke:
        args.trials, args.loop, args.loop_statsmodels = 2_000, 200, 5

    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "bench.yaml"
        path.write_text(PLAN)
        plan = load_plan(path).model
    groups = list(plan.data.groups)
    sizes = {g: int(plan.data.planned_n[g]) for g in groups}
    size_vector = np.array([sizes[g] for g in groups])
    rates = np.array([plan.design.assumed[g] for g in groups])

    rng = np.random.default_rng(scenario_seed(args.seed, "assumed"))
    chunks = []
    left = args.trials
    while left > 0:
        chunks.append(draw(rng, plan, ["infection"], rates, size_vector, min(CHUNK, left)))
        left -= CHUNK

    decider = Decider(plan, sizes)
    decider.decide(chunks[0])  # warm the Fisher rows and imports; the loop gets the same
    loop_decisions(chunks[0]["infection"][:20], size_vector, plan.alpha)

    tracemalloc.start()
    start = time.perf_counter()
    decided = [decider.decide(chunk) for chunk in chunks]
    array_seconds = time.perf_counter() - start
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    arrays = np.concatenate(decided)

    events = np.concatenate([c["infection"] for c in chunks])
    timed = {}
    for holm, count in (("plain", args.loop), ("statsmodels", args.loop_statsmodels)):
        sample = events[:count]
        start = time.perf_counter()
        looped = loop_decisions(sample, size_vector, plan.alpha, holm)
        seconds = (time.perf_counter() - start) * args.trials / len(sample)
        timed[holm] = (seconds, len(sample), bool(np.array_equal(arrays[:count], looped)))

    switched = float(np.mean(
        [expected_freq(np.array([[r[a], size_vector[a] - r[a]], [r[b], size_vector[b] - r[b]]]
                                )).min() < 5 for r in events[:500] for a, b in PAIRS]))
    print(f"trials: {args.trials} (three arms of 60, rates {', '.join(map(str, rates))}); "
          f"sparse switch fired in {switched:.0%} of the comparisons")
    print(f"arrays: {array_seconds:.3f} s for {args.trials} trials")
    for holm, label in (("plain", "scipy + prespec Holm"),
                        ("statsmodels", "scipy + statsmodels multipletests")):
        seconds, count, agree = timed[holm]
        print(f"loop ({label}): {seconds:.1f} s for {args.trials} trials (timed on {count}, "
              f"scaled); ratio {seconds / array_seconds:.0f}x; identical decisions on the "
              f"{count} common trials: {agree}")
    print(f"ratio (headline, against the faster loop): "
          f"{timed['plain'][0] / array_seconds:.0f}x (target: at least 100x"
          f"{'' if not args.smoke else ', set at 100,000 trials'})")
    print("power of each hypothesis (arrays): "
          + ", ".join(f"H{i + 1} {v:.4f}" for i, v in enumerate(arrays.mean(axis=0))))
    print(f"peak memory of the array run (tracemalloc): {peak / 2**20:.1f} MiB "
          f"(chunks of {CHUNK} trials)")
    same = all(agree for _, _, agree in timed.values())
    if not same:
        raise SystemExit("the decisions differ")


if __name__ == "__main__":
    main()
