"""How long ``prespec verify`` takes on a log of 10,000 entries, and what one append costs at
10 entries and at 10,000.

Builds, in a temporary folder, a locked plan followed by 9,999 ``run`` entries, each naming a
small report folder of its own (results.json and manifest.json), written directly in the form
``audit.append`` writes (appending 10,000 times would take a while), and a second study of 10
entries built the same way. Then it times: the chain and head alone (read, parse, re-hash every
entry: the baseline), the whole ``verify`` (lock, plan file, every report folder, a verdict per
run), and appends to each log: the first (no record of a checked prefix yet: the whole chain is
checked and the record written), then ``--repeat`` more to each, in turn (past the record),
whose medians are compared. Goals: verify within 3x the chain check (it was 9.0x, then 68x as the per-run
verdicts grew quadratic); an append at 10,000 entries within 2x one at 10 (it was 1.06 s,
growing with the log). The appends fsync, so their times are noisy on a busy disk.

Checks asserted at every size: verify passes with one report folder and one locked run per
run entry; after the appends each log's chain and head are intact, and its record names the
whole log.

    .venv/bin/python bench/verify_speed.py [ENTRIES] [--repeat 21]
    .venv/bin/python bench/verify_speed.py --smoke        # 200 entries, 5 appends each
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import statistics
import tempfile
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import prespec.workflow.verify  # noqa: F401  (imported here, so that no timing includes imports)
from prespec import api, audit
from prespec.audit.log import entry_hash, entry_line, head_line
from prespec.audit.manifest import write_manifest
from prespec.audit.prefix import checked_path, read_checked
from prespec.demo.wound import PLAN_TEXT

#: The fields that open every results document (``analysis.results.Provenance``), which verify
#: reads for every report; the rest of a run's document is not read unless ``--rerun``.
OPENING = {"prespec": 1, "kind": "run", "title": "bench", "protocol": None, "plan_version": 1,
           "data_file": "data.csv", "created": "2027-01-01T00:00:00Z", "actor": "bench",
           "alpha": 0.05, "multiplicity": "holm", "environment": {}}


def build(folder: Path, entries: int) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    plan = folder / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    api.lock(plan, actor="bench")
    log = audit.log_path(plan)
    (last,) = audit.read_log(log)
    checked_path(log).unlink()  # as a log written before the record existed
    fp = last["plan"]
    data = "sha256:" + "d" * 64
    lines = [log.read_bytes()]
    reports = folder / "reports" / "trial"
    reports.mkdir(parents=True)
    for seq in range(2, entries + 1):
        name = f"r{seq:05d}"
        report = reports / name
        report.mkdir()
        (report / "results.json").write_text(json.dumps({**OPENING, "plan": fp, "data": data,
                                                         "deviations": []}))
        manifest = write_manifest(report)
        entry = {"seq": seq, "at": "2027-01-01T00:00:00Z", "actor": "bench", "action": "run",
                 "plan": fp, "data": data,
                 "details": {"report": f"reports/trial/{name}", "manifest": manifest},
                 "deviations": [], "prev": last["hash"]}
        entry["hash"] = entry_hash(entry)
        lines.append(entry_line(entry))
        last = entry
    log.write_bytes(b"".join(lines))
    audit.head_path(plan).write_bytes(head_line(last))
    return plan


def timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    start = time.perf_counter()
    got = fn()
    return time.perf_counter() - start, got


def cpu(fn: Callable[[], Any]) -> float:
    """The process's own CPU seconds for ``fn``: steadier than the clock on a shared machine."""
    start = time.process_time()
    fn()
    return time.process_time() - start


def appender(plan: Path) -> Callable[[], None]:
    log, head = audit.log_path(plan), audit.head_path(plan)
    fp = audit.read_log(log)[0]["plan"]

    def one() -> None:
        audit.append(log, head, actor="bench", action="design", plan=fp, data=None)

    return one


def check_after_appends(plan: Path) -> None:
    """The log is intact, and its record names all of it."""
    log, head = audit.log_path(plan), audit.head_path(plan)
    entries = audit.read_log(log)
    audit.check_chain(entries, log.name)
    assert audit.check_head(entries, head) is None
    record = read_checked(checked_path(log))
    raw = log.read_bytes()
    assert record is not None and (record.size, record.sha256, record.seq, record.hash) == (
        len(raw), hashlib.sha256(raw).hexdigest(), len(entries), entries[-1]["hash"]), record


def appends(small: Path, large: Path, repeat: int) -> tuple[float, float, float, float]:
    """The first append to each log (no record yet), then ``repeat`` more to each, taken in
    turn so that the disk's moods fall on both alike: the medians. What the build left
    unwritten is flushed first (``os.sync``), so that no append pays for it."""
    os.sync()
    one_small, one_large = appender(small), appender(large)
    first_small, _ = timed(one_small)
    first_large, _ = timed(one_large)
    times: tuple[list[float], list[float]] = ([], [])
    for _ in range(repeat):
        times[0].append(timed(one_small)[0])
        times[1].append(timed(one_large)[0])
    check_after_appends(small)
    check_after_appends(large)
    return first_small, first_large, statistics.median(times[0]), statistics.median(times[1])


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("entries", nargs="?", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=21, help="appends timed after the first")
    parser.add_argument("--smoke", action="store_true", help="200 entries, 5 appends each")
    args = parser.parse_args()
    entries, repeat = (200, 5) if args.smoke else (args.entries, args.repeat)
    small = 10
    with tempfile.TemporaryDirectory() as tmp:
        took, plan = timed(lambda: build(Path(tmp) / "large", entries))
        print(f"built a log of {entries:,} entries and {entries - 1:,} report folders in "
              f"{took:.1f} s")
        few = build(Path(tmp) / "small", small)
        log, head = audit.log_path(plan), audit.head_path(plan)

        def chain() -> None:
            got = audit.read_log(log)
            audit.check_chain(got, log.name)
            audit.check_head(got, head)

        base, _ = timed(chain)
        print(f"{'chain and head (read, parse, re-hash)':<44} {base:8.3f} s")
        took, result = timed(lambda: api.verify(plan))
        print(f"{'prespec verify (everything)':<44} {took:8.3f} s  "
              f"({took / base:.1f}x the chain check; goal <= 3x)")
        runs = entries - 1
        assert f"reports: {runs} folder(s) match their manifests and log entries" in \
            result.passed, result.passed
        assert len(result.runs) == runs and all(r.locked for r in result.runs)
        assert result.summary == f"verified: files intact; all {runs} runs were the locked " \
            "analysis", result.summary
        base_cpu, verify_cpu = cpu(chain), cpu(lambda: api.verify(plan))
        print(f"{'  the same again, in CPU time':<44} {base_cpu:8.3f} s and {verify_cpu:.3f} s  "
              f"({verify_cpu / base_cpu:.1f}x)")

        first_small, first_large, at_small, at_large = appends(few, plan, repeat)
        print(f"{f'append at {small} entries (median of {repeat})':<44} {at_small:8.4f} s")
        print(f"{f'append at {entries:,} entries (median of {repeat})':<44} {at_large:8.4f} s  "
              f"({at_large / at_small:.2f}x the append at {small}; goal <= 2x)")
        print(f"{'first append, no record (whole chain)':<44} {first_large:8.4f} s  "
              f"(at {small} entries: {first_small:.4f} s)")
        print(f"checks: verify passed ({runs:,} reports, {runs:,} locked runs); both logs "
              "intact after the appends, each record naming its whole log")


if __name__ == "__main__":
    main()
