"""The pandas engine on a CSV file whose header is far wider than the plan: only the named
columns are parsed (``prespec.data.read``), so the wide file should cost about what the
narrow one does.

The demo data (601 rows, five columns) are written twice: as they are (the baseline) and with
``--columns`` more header names and short rows (as a 100,000-column, 707 KB file that once
took 214 s and 9.6 GB). Each is reduced to count tables by ``count_source`` with the pandas
engine in a fresh process; the time inside the process and the process's peak resident memory
are printed, with the ratios wide / narrow. Reading the header itself costs about 4 µs a name
(the csv module, then pandas names it), so the time ratio grows with the width; goals at
100,000 columns: the wide file's reduction under 1 s (it took 214 s), its peak memory within
1.5x of the narrow file's (it took 9.6 GB).

    .venv/bin/python bench/wide_header.py [--columns 100000] [--repeat 3]
    .venv/bin/python bench/wide_header.py --smoke        # 2,000 columns, one run
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
from pathlib import Path

CHILD = """
import resource, sys, time
from pathlib import Path
from prespec.data.engines.base import DataSource
from prespec.data.engines.pipeline import count_source
from prespec.plan import load_plan
plan = load_plan(Path(sys.argv[1])).model
start = time.perf_counter()
counted = count_source(plan, DataSource("file", sys.argv[2], sys.argv[2]), engine="pandas")
print(time.perf_counter() - start, counted.prepared.analysed,
      resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
"""


def measure(plan: Path, data: Path) -> tuple[float, int, float]:
    """Seconds inside the child, rows analysed, and the child's own peak memory in MB."""
    out = subprocess.run([sys.executable, "-c", CHILD, str(plan), str(data)], check=True,
                         capture_output=True, text=True).stdout.split()
    return float(out[0]), int(out[1]), int(out[2]) / 1024


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--columns", type=int, default=100_000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--smoke", action="store_true", help="2,000 columns, one run")
    args = parser.parse_args()
    columns, repeat = (2_000, 1) if args.smoke else (args.columns, args.repeat)
    from prespec.demo.wound import PLAN_TEXT, demo_data

    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        plan = folder / "plan.yaml"
        plan.write_text(PLAN_TEXT, encoding="utf-8")
        narrow, wide = folder / "narrow.csv", folder / "wide.csv"
        narrow.write_text(demo_data(), encoding="utf-8")
        lines = demo_data().splitlines()
        header = lines[0] + "".join(f",x{i}" for i in range(columns - 5))
        wide.write_text("\n".join([header, *lines[1:]]) + "\n", encoding="utf-8")
        print(f"wide file: {columns:,} columns, {wide.stat().st_size:,} bytes")
        results = {}
        for name, path in (("wide", wide), ("narrow", narrow)):
            runs = [measure(plan, path) for _ in range(repeat)]
            results[name] = (min(r[0] for r in runs), runs[0][1], max(r[2] for r in runs))
            print(f"{name:6} {', '.join(f'{r[0]:.3f}' for r in runs)} s; analysed "
                  f"{runs[0][1]}; peak {results[name][2]:.0f} MB")
        assert results["wide"][1] == results["narrow"][1], "the counts differ"
    extra = (results["wide"][0] - results["narrow"][0]) / columns * 1e6
    print(f"time wide / narrow: {results['wide'][0] / results['narrow'][0]:.2f} "
          f"({extra:.1f} µs per header name); "
          f"peak memory wide / narrow: {results['wide'][2] / results['narrow'][2]:.2f}")


if __name__ == "__main__":
    main()
