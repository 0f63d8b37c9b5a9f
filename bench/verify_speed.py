"""How long ``prespec verify`` takes on a log of 10,000 entries, and what one append costs then.

Builds, in a temporary folder, a locked plan followed by 9,999 ``run`` entries, each naming a
small report folder of its own (results.json and manifest.json), written directly in the form
``audit.append`` writes (appending 10,000 times would re-check the chain each time). Then it
times: the chain and head alone, the whole ``verify`` (lock, plan file, every report), and one
more append. The baseline is the chain check: the ratios say what the rest adds.

Run by hand: ``.venv/bin/python bench/verify_speed.py [ENTRIES]``.
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

from prespec import api, audit
from prespec.audit.log import entry_hash, entry_line, head_line
from prespec.audit.manifest import write_manifest
from prespec.demo.wound import PLAN_TEXT


def build(folder: Path, entries: int) -> Path:
    plan = folder / "trial.yaml"
    plan.write_text(PLAN_TEXT)
    api.lock(plan, actor="bench")
    log = audit.log_path(plan)
    (last,) = audit.read_log(log)
    fp = last["plan"]
    data = "sha256:" + "d" * 64
    lines = [log.read_bytes()]
    reports = folder / "reports" / "trial"
    reports.mkdir(parents=True)
    for seq in range(2, entries + 1):
        name = f"r{seq:05d}"
        report = reports / name
        report.mkdir()
        (report / "results.json").write_text(json.dumps({"kind": "run", "plan": fp,
                                                         "data": data, "deviations": []}))
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


def timed(label: str, fn: object, baseline: float | None = None) -> float:
    start = time.perf_counter()
    fn()  # type: ignore[operator]
    took = time.perf_counter() - start
    ratio = f"  ({took / baseline:.1f}x the chain check)" if baseline else ""
    print(f"{label:<44} {took:8.3f} s{ratio}")
    return took


def main() -> None:
    entries = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000
    with tempfile.TemporaryDirectory() as tmp:
        start = time.perf_counter()
        plan = build(Path(tmp), entries)
        print(f"built a log of {entries} entries and {entries - 1} report folders in "
              f"{time.perf_counter() - start:.1f} s")
        log, head = audit.log_path(plan), audit.head_path(plan)

        def chain() -> None:
            got = audit.read_log(log)
            audit.check_chain(got, log.name)
            audit.check_head(got, head)

        base = timed("chain and head (read, parse, re-hash)", chain)
        timed("prespec verify (everything)", lambda: api.verify(plan), base)
        timed("one more append (re-checks the chain)", lambda: audit.append(
            log, head, actor="bench", action="design", plan="sha256:" + "0" * 64, data=None),
            base)


if __name__ == "__main__":
    main()
