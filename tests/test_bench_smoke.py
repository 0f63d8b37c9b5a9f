"""The benchmarks that have a smoke size run in CI at that size, so they cannot rot: each must
finish and its own checks must hold (here: the wide-header file counts what the narrow one
counts). Times are printed by the benchmark, never asserted."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

BENCH = Path(__file__).resolve().parents[1] / "bench"


def test_the_wide_header_benchmark_runs_at_its_smoke_size() -> None:
    done = subprocess.run([sys.executable, str(BENCH / "wide_header.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    assert done.stdout.startswith("wide file: 2,000 columns, ")
    analysed = re.findall(r"analysed (\d+)", done.stdout)
    # the demo data: 601 rows, 19 outside the population, 1 unknown group (prespec.demo.wound)
    assert analysed == ["581", "581"], done.stdout
    assert "peak memory wide / narrow: " in done.stdout
