"""Wall time of `prespec demo`, split into its phases: lock, computation, notebook, HTML.

Run by hand: `.venv/bin/python bench/demo_phases.py [REPEATS]`. Each phase is timed by
wrapping the function that does it; the sum is compared with the whole command's time in
the same run (the ratio shows how much the split leaves out: start-up, imports, hashing).
"""

from __future__ import annotations

import statistics
import sys
import tempfile
import time
from collections import defaultdict
from pathlib import Path

import prespec.report as report_pkg  # publish.py imports from it lazily, at each call
from prespec import api
from prespec.report import render
from prespec.workflow import execute

timings: dict[str, list[float]] = defaultdict(list)


def timed(name: str, fn):  # type: ignore[no-untyped-def]
    def wrapper(*args, **kwargs):  # type: ignore[no-untyped-def]
        start = time.perf_counter()
        try:
            return fn(*args, **kwargs)
        finally:
            timings[name].append(time.perf_counter() - start)
    return wrapper


api.lock = timed("lock", api.lock)
execute.analyse = timed("computation: statistics", execute.analyse)
execute.prepare = timed("computation: data to counts", execute.prepare)
execute.read_data = timed("computation: reading data", execute.read_data)
report_pkg.write_figures = timed("figures", report_pkg.write_figures)
render._execute = timed("notebook execution (papermill)", render._execute)
render._to_html = timed("HTML export (nbconvert)", render._to_html)


def main(repeats: int) -> None:
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as tmp:
            start = time.perf_counter()
            api.demo(Path(tmp) / "demo")
            timings["whole demo (in process)"].append(time.perf_counter() - start)
    width = max(map(len, timings))
    whole = statistics.median(timings["whole demo (in process)"])
    for name, values in timings.items():
        med = statistics.median(values)
        print(f"{name:<{width}}  median {med * 1000:8.1f} ms  ({med / whole:6.1%} of the demo)")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 3)
