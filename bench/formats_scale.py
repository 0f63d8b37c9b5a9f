"""A large transport file (.xpt) against the same rows as CSV: time and peak memory.

Invented rows (id, arm, outcome coded 1/0 with some missing, age, site; written once to a
cache folder under /tmp and reused) are written twice: as a version 5 transport file by
pyreadstat and as CSV. prespec's reduction (``count_source`` through the Python API: columns
checked, ids checked, filter, mapping, the file's SHA-256) reads each with the duckdb engine
and with the pandas engine, each in a fresh process; the wall time and the peak resident
memory of each process are measured by a parent that ran only it (``engine_scale.measure``).

The duckdb engine copies a transport file to Parquet a chunk of rows at a time
(``datasets.CHUNK_ROWS``), so its peak memory should stay near that of the CSV however large
the file; the pandas engine reads every row of the named columns at once, for either format.
Before the table is printed, every route must find the same rows read and analysed and the
same events and totals per arm (and those must be what pandas counts on the rows written).

    .venv/bin/python bench/formats_scale.py [--rows 2000000] [--repeat 2]
    .venv/bin/python bench/formats_scale.py --smoke   # 20,000 rows in a temporary folder
"""

from __future__ import annotations

import argparse
import tempfile
import textwrap
from pathlib import Path
from typing import Any

from engine_scale import best, lines_of, measure

CACHE = Path("/tmp/prespec-bench-cache")

PLAN = """\
prespec: 1
title: Format benchmark (invented data)
data:
  id: SUBJID
  group: ARM
  groups: [usual, leaflet, phone]
  include:
    - {column: AGE, between: [18, 85]}
outcomes:
  attended: {column: ATTEND, event: [1], no_event: [0], missing: exclude}
alpha: 0.05
multiplicity: holm
hypotheses:
  - {id: H1, outcome: attended, compare: [phone, usual], test: pearson-chi-square}
  - {id: H2, outcome: attended, compare: [leaflet, usual], test: cochran-mantel-haenszel,
     strata: [SITE]}
"""

API_SCRIPT = """\
import sys, time
from pathlib import Path
from prespec.plan import load_plan
from prespec.data.engines.base import DataSource
from prespec.data.engines.pipeline import count_source

plan = load_plan(Path(sys.argv[1])).model
start = time.perf_counter()
counted = count_source(plan, DataSource("file", sys.argv[2], sys.argv[2]), engine=sys.argv[3])
print("SECONDS", time.perf_counter() - start)
print("ROWS", counted.prepared.rows_read, counted.prepared.analysed)
for group in counted.prepared.outcomes["attended"].groups:
    print("ARM", group.group, group.events, group.total)
print("HASH", counted.data_hash)
"""


def rows_frame(rows: int) -> Any:
    """The invented rows as a pandas frame (pandas imported here, not at start-up)."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(20270401)
    arm = rng.choice(np.array(["usual", "leaflet", "phone"]), rows)
    rate = np.select([arm == "usual", arm == "leaflet"], [0.45, 0.55], 0.65)
    attend = (rng.random(rows) < rate).astype(float)
    attend[rng.random(rows) < 0.005] = np.nan
    return pd.DataFrame({
        "SUBJID": np.char.add("S", np.char.zfill(np.arange(rows).astype(str), 9)),
        "ARM": arm, "ATTEND": attend,
        "AGE": rng.integers(16, 91, rows).astype(float),
        "SITE": np.char.add("site-", rng.integers(0, 12, rows).astype(str)),
    })


def data_files(rows: int, folder: Path) -> tuple[Path, Path, dict[str, list[int]]]:
    """The .xpt and the .csv of the same ``rows`` rows (written once into ``folder``), and
    the events and totals per arm that pandas counts on them."""
    import pyreadstat

    xpt, csv, expected = (folder / f"formats-{rows}.xpt", folder / f"formats-{rows}.csv",
                          folder / f"formats-{rows}.counts")
    if not (xpt.exists() and csv.exists() and expected.exists()):
        folder.mkdir(parents=True, exist_ok=True)
        print(f"writing {xpt.name} and {csv.name} (once) ...", flush=True)
        df = rows_frame(rows)
        pyreadstat.write_xport(df, str(xpt) + ".partial", file_format_version=5)
        out = df.copy()
        out["ATTEND"] = out["ATTEND"].astype("Int64")
        out["AGE"] = out["AGE"].astype("Int64")
        out.to_csv(str(csv) + ".partial", index=False)
        kept = df[df["AGE"].between(18, 85) & df["ATTEND"].isin([0, 1])]
        lines = [f"{arm} {int(kept.loc[kept['ARM'] == arm, 'ATTEND'].sum())} "
                 f"{int((kept['ARM'] == arm).sum())}" for arm in ("usual", "leaflet", "phone")]
        Path(str(xpt) + ".partial").rename(xpt)
        Path(str(csv) + ".partial").rename(csv)
        expected.write_text("\n".join(lines) + "\n", encoding="utf-8")
        del df, out, kept
    counts = {arm: [int(e), int(t)] for arm, e, t in
              (line.split() for line in expected.read_text("utf-8").splitlines())}
    return xpt, csv, counts


def check(found: dict[str, dict], expected: dict[str, list[int]]) -> None:
    """Every route read the same rows and found pandas' events and totals per arm."""
    problems = []
    reference = lines_of(found["csv duckdb"]["out"], "ROWS")
    for name, run in found.items():
        arms = {arm: [int(e), int(t)] for arm, e, t in lines_of(run["out"], "ARM")}
        if arms != expected:
            problems.append(f"{name}: events and totals {arms}, pandas {expected}")
        if lines_of(run["out"], "ROWS") != reference:
            problems.append(f"{name}: rows {lines_of(run['out'], 'ROWS')}, csv {reference}")
    if problems:
        raise SystemExit("the answers differ: " + "; ".join(problems))
    (read, analysed), = reference
    print(f"checked: all four routes read {int(read):,} rows, analyse {int(analysed):,} and "
          "find the events and totals per arm that pandas counts on the rows written")


def bench(rows: int, repeat: int, cache: Path, *, goals: bool) -> None:
    from importlib import metadata

    xpt, csv, expected = data_files(rows, cache)
    print(f"data: {xpt.name} ({xpt.stat().st_size / 2**20:.0f} MiB) and {csv.name} "
          f"({csv.stat().st_size / 2**20:.0f} MiB), {rows:,} rows")
    print("versions: " + ", ".join(f"{name} {metadata.version(name)}" for name in
                                   ("pandas", "pyarrow", "duckdb", "pyreadstat")))
    import sys

    with tempfile.TemporaryDirectory(prefix="prespec-bench-") as tmp:
        work = Path(tmp)
        plan = work / "formats.yaml"
        plan.write_text(PLAN, encoding="utf-8")
        script = work / "api.py"
        script.write_text(textwrap.dedent(API_SCRIPT), encoding="utf-8")
        commands = {f"{fmt} {engine}": [sys.executable, str(script), str(plan), str(path),
                                        engine]
                    for fmt, path in (("csv", csv), ("xpt", xpt))
                    for engine in ("duckdb", "pandas")}
        runs: dict[str, list[dict]] = {name: [] for name in commands}
        for _ in range(repeat):  # interleaved: a busy spell slows every measurement
            for name, command in commands.items():
                runs[name].append(measure(command))
        found = {name: best(r) for name, r in runs.items()}
    check(found, expected)
    gib = 2**30
    print()
    print(f"{'reduction (count_source)':<28} {'seconds':>8} {'all runs':>16} {'peak GiB':>9}")
    for name, r in found.items():
        spread = " ".join(f"{x:.1f}" for x in r["spread"])
        print(f"{name:<28} {r['seconds']:>8.1f} {spread:>16} {r['peak'] / gib:>9.2f}")
    print()
    for engine in ("duckdb", "pandas"):
        a, b = found[f"xpt {engine}"], found[f"csv {engine}"]
        print(f"{engine}: .xpt against CSV: {a['seconds'] / b['seconds']:.2f}x the time, "
              f"{a['peak'] / b['peak']:.2f}x the peak memory")
    if not goals:
        print("(the comparison is made at 2,000,000 rows)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=2_000_000)
    parser.add_argument("--repeat", type=int, default=2)
    parser.add_argument("--smoke", action="store_true",
                        help="20,000 rows written to a temporary folder, one run of each")
    args = parser.parse_args()
    if args.smoke:
        with tempfile.TemporaryDirectory(prefix="prespec-bench-data-") as scratch:
            bench(20_000, 1, Path(scratch), goals=False)
    else:
        bench(args.rows, args.repeat, CACHE, goals=True)


if __name__ == "__main__":
    main()
