"""The benchmarks that have a smoke size run in CI at that size, so they cannot rot: each must
finish and its own checks must hold (here: the wide-header file counts what the narrow one
counts; verify passes on the large log and the appends leave it intact). Times are printed by
the benchmark, never asserted."""

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
    # the demo data: 601 rows, 19 outside the population, 1 unknown group (prespec.demo)
    assert analysed == ["581", "581"], done.stdout
    assert "peak memory wide / narrow: " in done.stdout


def test_the_verify_speed_benchmark_runs_at_its_smoke_size() -> None:
    """A log of 200 entries (199 report folders): verify passes with a locked verdict per run,
    and after the appends each log is intact and its record of the checked prefix names it
    all (asserted inside the script); here, that every line it promises is printed."""
    done = subprocess.run([sys.executable, str(BENCH / "verify_speed.py"), "--smoke"],
                          capture_output=True, text=True, timeout=300, check=False)
    assert done.returncode == 0, done.stdout + done.stderr
    lines = done.stdout.splitlines()
    assert lines[0].startswith("built a log of 200 entries and 199 report folders in ")
    assert re.fullmatch(r"prespec verify \(everything\) +\d+\.\d+ s  \(\d+\.\dx the chain "
                        r"check; goal <= 3x\)", lines[2]), lines[2]
    assert lines[3].startswith("  the same again, in CPU time")
    assert lines[4].startswith("append at 10 entries (median of 5)")
    assert re.fullmatch(r"append at 200 entries \(median of 5\) +\d\.\d+ s  \(\d+\.\d\dx the "
                        r"append at 10; goal <= 2x\)", lines[5]), lines[5]
    assert lines[-1] == ("checks: verify passed (199 reports, 199 locked runs); both logs "
                         "intact after the appends, each record naming its whole log")
