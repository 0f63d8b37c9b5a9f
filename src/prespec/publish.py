"""Publishing a run: the report folder, written completely and renamed into place, then its
log entry.

plan (from the lock) → ``execute.compute_results`` → here: results.json → tables and figures →
executed notebook and HTML → manifest → folder renamed over its reserved empty name → log entry.
"""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from . import audit
from .execute import check_out_folder
from .manifest import write_manifest


@dataclass(frozen=True)
class RunOutcome:
    folder: Path
    results: dict[str, Any]
    entry: dict[str, Any]


def reserve_folder(out: Path, *, numbered: bool) -> tuple[Path, bool]:
    """Claim the report folder by creating it empty; (the folder, whether we created it).

    ``numbered`` (the default location) moves on to ``-2``, ``-3`` … when another run holds
    the name, so that runs started at the same second never share a folder; a folder named
    with ``--out`` must not exist or be empty. The complete report is later renamed over the
    empty folder, which POSIX rename allows.
    """
    out.parent.mkdir(parents=True, exist_ok=True)
    candidate, n = out, 1
    while True:
        try:
            candidate.mkdir()
            return candidate, True
        except FileExistsError:
            if not numbered:
                check_out_folder(candidate)
                return candidate, False
            n += 1
            candidate = out.with_name(f"{out.name}-{n}")


def _safe_name(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", text)


def _write_tables(folder: Path, results: dict[str, Any]) -> None:
    tables = folder / "tables"
    tables.mkdir()
    for outcome, rows in results["groups"].items():
        with open(tables / f"groups-{_safe_name(outcome)}.csv", "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["group", "events", "no_events", "total", "missing", "proportion",
                        "ci_low", "ci_high", "ci_method", "level"])
            for r in rows:
                w.writerow([r["group"], r["events"], r["total"] - r["events"], r["total"],
                            r["missing"], r["proportion"], r["ci"][0], r["ci"][1],
                            r["ci_method"], r["level"]])
    for h in results["hypotheses"]:
        t = h["table"]
        expected = h["expected"] or [[None, None]] * len(t["groups"])
        with open(tables / f"{_safe_name(h['id'])}.csv", "w", newline="") as fh:
            w = csv.writer(fh)
            w.writerow(["group", "events", "no_events", "total", "expected_events",
                        "expected_no_events"])
            for g, e, n, (ee, en) in zip(t["groups"], t["events"], t["totals"], expected,
                                         strict=True):
                w.writerow([g, e, n - e, n, ee, en])


def write_report(folder: Path, results: dict[str, Any], *, render: bool = True) -> str:
    """Write the whole report into a temporary folder, rename it to ``folder``; the manifest hash.

    Nothing is left behind when any step fails: the temporary folder is removed and
    ``folder`` is untouched.
    """
    from .report import render_notebook, write_figures  # heavy imports, only when reporting

    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{folder.name}.partial-", dir=folder.parent))
    tmp.chmod(0o755)  # mkdtemp makes it private; a report folder is an ordinary folder
    try:
        text = json.dumps(results, indent=2, ensure_ascii=False, allow_nan=False) + "\n"
        (tmp / "results.json").write_text(text, encoding="utf-8")
        _write_tables(tmp, results)
        write_figures(results, tmp)
        if render:
            render_notebook(tmp)
        manifest = write_manifest(tmp)
        os.replace(tmp, folder)  # over the empty folder reserved for this run
        audit.files.fsync_dir(folder.parent)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return manifest


def publish(plan_path: Path, out: Path, results: dict[str, Any], *, numbered: bool,
            action: str = "run") -> RunOutcome:
    """Write the report folder atomically, then append its log entry.

    If the entry cannot be appended the folder is removed: a report the log does not name
    must not survive.
    """
    folder, created = reserve_folder(out, numbered=numbered)
    try:
        manifest = write_report(folder, results)
    except BaseException:
        if created:
            shutil.rmtree(folder, ignore_errors=True)
        raise
    report_rel = Path(os.path.relpath(folder.resolve(), plan_path.parent.resolve())).as_posix()
    try:
        entry = audit.append(
            audit.log_path(plan_path),
            audit.head_path(plan_path),
            actor=results["actor"],
            action=action,
            plan=results["plan"],
            data=results["data"],
            details={"report": report_rel, "manifest": manifest},
            deviations=results["deviations"],
        )
    except BaseException:
        shutil.rmtree(folder, ignore_errors=True)
        if not created:
            folder.mkdir(exist_ok=True)  # leave a user's empty --out folder as it was
        raise
    return RunOutcome(folder, results, entry)
