"""The pipeline of one run: the only module that knows the order of the steps.

plan (from the lock) → data → count tables → statistics → results.json → tables and
figures → executed notebook and HTML → manifest → folder renamed into place → log entry.
"""

from __future__ import annotations

import csv
import json
import os
import re
import shutil
import tempfile
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from . import audit
from .analysis import analyse, group_summaries
from .caution import CAUTION
from .data import Prepared, file_sha256, prepare, read_data
from .departures import Departure, Note
from .errors import BadInput
from .manifest import write_manifest


@dataclass(frozen=True)
class RunOutcome:
    folder: Path
    results: dict[str, Any]
    entry: dict[str, Any]


def default_folder(plan_path: Path, kind: str) -> Path:
    """``reports/<plan stem>/<YYYYMMDDTHHMMSSZ>-run`` beside the plan (not yet reserved)."""
    stamp = datetime.now(UTC).strftime("%Y%m%dT%H%M%SZ")
    return plan_path.parent / "reports" / plan_path.stem / f"{stamp}-{kind}"


def check_out_folder(out: Path) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise BadInput(f"{out}: the report folder must not exist yet or be empty")


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


def build_results(
    *,
    kind: str,
    plan: Any,
    fingerprint: str,
    version: int | None,
    data_hash: str,
    data_file: str,
    actor: str,
    environment: dict[str, str],
    prepared: Prepared,
    hypotheses: list[dict[str, Any]],
    deviations: list[Departure],
    notes: list[Note],
) -> dict[str, Any]:
    return {
        "prespec": 1,
        "kind": kind,
        "title": plan.title,
        "protocol": plan.protocol,
        "plan": fingerprint,
        "plan_version": version,
        "data": data_hash,
        "data_file": data_file,
        "created": audit.utc_now(),
        "actor": actor,
        "alpha": plan.alpha,
        "multiplicity": plan.multiplicity,
        "environment": environment,
        "population": {
            "rows_read": prepared.rows_read,
            "excluded_by_filter": prepared.excluded_by_filter,
            "excluded_group": prepared.excluded_group,
            "analysed": prepared.analysed,
        },
        "groups": group_summaries(plan, prepared),
        "hypotheses": hypotheses,
        "deviations": [d.to_json() for d in deviations],
        "notes": [n.to_json() for n in notes],
        "caution": CAUTION,
    }


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


def compute_results(
    *,
    plan_path: Path,
    plan: Any,
    fingerprint: str,
    version: int | None,
    data_path: Path,
    actor: str,
    environment: dict[str, str],
    deviations: list[Departure],
    notes: list[Note],
    previous_data: str | None,
) -> dict[str, Any]:
    """Read the data, reduce it, run the statistics: the results.json document (not written)."""
    frame = read_data(data_path)
    data_hash = file_sha256(data_path)
    prepared = prepare(frame, plan, data_path)
    deviations = list(deviations)
    if previous_data is not None and previous_data != data_hash:
        deviations.append(
            Departure(
                "data-changed-since-last-run",
                "the data file's hash differs from the one the previous run recorded",
                previous_data,
                data_hash,
            )
        )
    deviations.extend(prepared.deviations)
    notes = [*notes, *prepared.notes]
    hypotheses, stat_notes = analyse(plan, prepared)
    notes.extend(stat_notes)
    return build_results(
        kind="run",
        plan=plan,
        fingerprint=fingerprint,
        version=version,
        data_hash=data_hash,
        data_file=os.path.relpath(data_path.resolve(), plan_path.parent.resolve()),
        actor=actor,
        environment=environment,
        prepared=prepared,
        hypotheses=hypotheses,
        deviations=deviations,
        notes=notes,
    )


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
