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
the ratio of the statistics against the member-by-member baseline. It stops unless the two
routes agree (every p-value to 1e-12 relative, every flag), every p-value equals
``scipy.stats.fisher_exact`` on the member's table (1e-9 relative), and the run's results.json
holds the same members, p-values and flags.

Run: .venv/bin/python bench/families_run.py [--terms 1000] [--per-group 200]
     .venv/bin/python bench/families_run.py --smoke   # 100 terms (every 7th lifted), 150 per group
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np
from scipy.stats import fisher_exact

from prespec import api
from prespec.analysis.families import analyse_family, prepare_run
from prespec.demo.safety import PLAN_TEXT, safety_frame
from prespec.plan import load_plan


def terms(count: int, seed: int = 1, lifted: int = 97
          ) -> dict[str, dict[str, tuple[float, float]]]:
    """``count`` terms in 10 body systems; every ``lifted``-th has three times the rate on the
    new gel."""
    rng = np.random.default_rng(seed)
    out: dict[str, dict[str, tuple[float, float]]] = {}
    for k in range(count):
        base = float(rng.uniform(0.005, 0.08))
        lift = 3.0 if k % lifted == 0 else 1.0
        out.setdefault(f"system {k % 10:02d}", {})[f"term {k:04d}"] = (base, min(base * lift,
                                                                                  0.9))
    return out


def close(a: float, b: float, tolerance: float) -> bool:
    return a == b or abs(a - b) <= tolerance * abs(b)


def differences(fast: dict[str, Any], slow: dict[str, Any], written: dict[str, Any]
                ) -> list[str]:
    """What differs between the array route, the member-by-member route, scipy and the run."""
    out = []
    if [m["id"] for m in fast["members"]] != [m["id"] for m in slow["members"]]:
        return ["the two routes list different members"]
    for a, b in zip(fast["members"], slow["members"], strict=True):
        if not close(a["p_value"], b["p_value"], 1e-12) or a["flagged"] != b["flagged"]:
            out.append(f"{a['id']}: array p {a['p_value']!r} flagged {a['flagged']}, member "
                       f"by member p {b['p_value']!r} flagged {b['flagged']}")
        (x1, x2), (n1, n2) = a["table"]["events"], a["table"]["totals"]
        ref = fisher_exact([[x1, n1 - x1], [x2, n2 - x2]]).pvalue
        if not close(a["p_value"], float(ref), 1e-9):
            out.append(f"{a['id']}: p {a['p_value']!r}, scipy.stats.fisher_exact {ref!r}")
    run = {m["id"]: (m["p_value"], m["flagged"]) for m in written["members"]}
    mine = {m["id"]: (m["p_value"], m["flagged"]) for m in fast["members"]}
    if run != mine:
        out.append("the run's results.json differs from analyse_family's members")
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--terms", type=int, default=1000)
    parser.add_argument("--per-group", type=int, default=200)
    parser.add_argument("--lifted", type=int, default=97,
                        help="every how many terms the new gel's rate is tripled")
    parser.add_argument("--smoke", action="store_true",
                        help="100 terms (every 7th lifted), 150 per group")
    args = parser.parse_args()
    if args.smoke:
        args.terms, args.per_group, args.lifted = 100, 150, 7
    start, end = PLAN_TEXT.index("    levels:\n"), PLAN_TEXT.index("    flag_method:")
    text = PLAN_TEXT[:start] + PLAN_TEXT[end:]  # levels from the data
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        plan_path = folder / "safety-review.yaml"
        plan_path.write_text(text)
        frame = safety_frame(per_group=args.per_group,
                             terms=terms(args.terms, lifted=args.lifted))
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
        print("                              wall s    CPU s")
        print(f"preparation of the levels   {t_prepare:8.3f} {c_prepare:8.3f}")
        print(f"statistics, array Fisher    {t_array:8.3f} {c_array:8.3f}")
        print(f"statistics, member by member {t_member:7.3f} {c_member:8.3f}  (baseline)")
        print(f"ratio (baseline / array)    {t_member / t_array:8.1f}x {c_member / c_array:7.1f}x")
        print(f"members flagged             {fast['members_flagged']} of "
              f"{fast['members_total']}")

        t0, c0 = time.perf_counter(), time.process_time()
        api.lock(plan_path, actor="bench")
        api.run(plan_path, data_path, out=folder / "report", actor="bench")
        print(f"whole lock + run (report)   {time.perf_counter() - t0:8.3f} "
              f"{time.process_time() - c0:8.3f}  (CPU of this process; the notebook kernel "
              "runs in its own)")
        results = json.loads((folder / "report" / "results.json").read_text("utf-8"))
    (written,) = [f for f in results["families"] if f["id"] == hyp.id]
    problems = differences(fast, slow, written)
    if problems:
        raise SystemExit(f"{len(problems)} difference(s): " + "; ".join(problems[:5]))
    print(f"checked: the {fast['members_total']} members' p-values agree between the routes "
          "(1e-12 relative) and with scipy.stats.fisher_exact (1e-9), their flags between the "
          "routes, and the run's results.json holds the same p-values and flags")


if __name__ == "__main__":
    main()
