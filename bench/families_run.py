"""Benchmark: a 1,000-term family through ``run``, in-process.

An invented safety data set: two gels of 200 participants and 1,000 adverse-event terms in 10
body systems, one row per participant and term (400,000 rows), the family tested by Fisher's
exact test and flagged by the double FDR. It times, in one process and on the same data:

- the preparation of every level (``prespec.analysis.families.prepare_run``);
- the statistics of the family (``analyse_family``) with the array Fisher test
  (``prespec.stats.fisherarray.fisher_many``) and, as the baseline, member by member through
  the ordinary machinery (``use_array=False``), and whether the two agree on every p-value;
- the whole ``api.run`` (lock, data, statistics, report, log).

It prints the wall-clock and CPU times (the machine is shared: CPU time is the steadier) and
the ratio of the statistics against the member-by-member baseline.

Run: .venv/bin/python bench/families_run.py [--terms 1000] [--per-group 200]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np

from prespec import api
from prespec.analysis.families import analyse_family, prepare_run
from prespec.demo.safety import PLAN_TEXT, safety_frame
from prespec.plan import load_plan


def terms(count: int, seed: int = 1) -> dict[str, dict[str, tuple[float, float]]]:
    rng = np.random.default_rng(seed)
    out: dict[str, dict[str, tuple[float, float]]] = {}
    for k in range(count):
        base = float(rng.uniform(0.005, 0.08))
        lift = 3.0 if k % 97 == 0 else 1.0
        out.setdefault(f"system {k % 10:02d}", {})[f"term {k:04d}"] = (base, min(base * lift,
                                                                                  0.9))
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--terms", type=int, default=1000)
    parser.add_argument("--per-group", type=int, default=200)
    args = parser.parse_args()
    start, end = PLAN_TEXT.index("    levels:\n"), PLAN_TEXT.index("    flag_method:")
    text = PLAN_TEXT[:start] + PLAN_TEXT[end:]  # levels from the data
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        plan_path = folder / "safety-review.yaml"
        plan_path.write_text(text)
        frame = safety_frame(per_group=args.per_group, terms=terms(args.terms))
        data_path = folder / "safety-review.csv"
        frame.to_csv(data_path, index=False)
        plan = load_plan(plan_path).model
        print(f"{args.terms} terms, {len(frame):,} rows")

        t0, c0 = time.perf_counter(), time.process_time()
        _, data = prepare_run(frame, plan, data_path)
        t_prepare, c_prepare = time.perf_counter() - t0, time.process_time() - c0
        hyp = plan.hypotheses[0]
        t0, c0 = time.perf_counter(), time.process_time()
        fast = analyse_family(plan, hyp, data[0], [])
        t_array, c_array = time.perf_counter() - t0, time.process_time() - c0
        t0, c0 = time.perf_counter(), time.process_time()
        slow = analyse_family(plan, hyp, data[0], [], use_array=False)
        t_member, c_member = time.perf_counter() - t0, time.process_time() - c0
        same = all(a["p_value"] == b["p_value"] or abs(a["p_value"] - b["p_value"])
                   <= 1e-12 * b["p_value"] for a, b in zip(fast["members"], slow["members"],
                                                         strict=True))
        print("                              wall s    CPU s")
        print(f"preparation of the levels   {t_prepare:8.3f} {c_prepare:8.3f}")
        print(f"statistics, array Fisher    {t_array:8.3f} {c_array:8.3f}")
        print(f"statistics, member by member {t_member:7.3f} {c_member:8.3f}  (baseline)")
        print(f"ratio (baseline / array)    {t_member / t_array:8.1f}x {c_member / c_array:7.1f}x")
        print(f"p-values agree to 1e-12     {same}")
        print(f"members flagged             {fast['members_flagged']} of "
              f"{fast['members_total']}")

        t0, c0 = time.perf_counter(), time.process_time()
        api.lock(plan_path, actor="bench")
        api.run(plan_path, data_path, out=folder / "report", actor="bench")
        print(f"whole lock + run (report)   {time.perf_counter() - t0:8.3f} "
              f"{time.process_time() - c0:8.3f}  (CPU of this process; the notebook kernel "
              "runs in its own)")


if __name__ == "__main__":
    main()
