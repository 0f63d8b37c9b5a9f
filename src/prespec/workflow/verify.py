"""``prespec verify``: re-derive every hash from the files alone and trust nothing stored.

The order of the checks is docs/verify.md, "The checks, in order"; the first failure stops
with exit status 3 and names what does not match. Things that are not failures but that a
monitor should know of (a run stopped before its last rename, temporary folders left by a
killed run) are returned as notes.
"""

from __future__ import annotations

import errno
import json
import math
import os
import re
import stat
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from prespec import audit
from prespec.analysis.families import declared_members, member_ids
from prespec.analysis.looks import look_problem, look_run
from prespec.analysis.results import RunResults, finish, read_provenance, read_results
from prespec.audit.entries import read_entry
from prespec.audit.lockfile import logged_pending, pending_path, version_digest
from prespec.audit.manifest import FolderCheck, check_folder
from prespec.common.canonical import file_sha256
from prespec.common.departures import capped_found
from prespec.common.records import first_problem
from prespec.errors import IntegrityStop, PrespecError
from prespec.plan import fingerprint, load_plan, plan_from_resolved
from prespec.workflow.base import lock_history_problem, plain_errors
from prespec.workflow.overrides import apply_overrides
from prespec.workflow.publish import PARTIAL, pending_report


@dataclass
class VerifyResult:
    passed: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    #: one ``verify.RunVerdict`` per run and look of the log: the locked analysis, or why not
    runs: list[Any] = field(default_factory=list)
    #: the last line: true of the files and of every run
    summary: str = ""

    @property
    def departed(self) -> list[Any]:
        """The runs that were not the locked analysis."""
        return [r for r in self.runs if not r.locked]
    # things in the report folders that no recorded run wrote; failures under ``strict``
    warnings: list[str] = field(default_factory=list)


class VerifyFailure(IntegrityStop):
    """A failed check, carrying the checks that passed before it."""

    def __init__(self, message: str, passed: list[str], notes: list[str] | None = None,
                 warnings: list[str] | None = None) -> None:
        super().__init__(message)
        self.passed = passed
        self.notes = notes or []
        self.warnings = warnings or []


def _fail(result: VerifyResult, message: str) -> VerifyFailure:
    return VerifyFailure(message, list(result.passed), list(result.notes),
                         list(result.warnings))


def _version_of(entry: dict[str, Any]) -> int | None:
    """The lock version a lock/amend entry names, or None when it names none readable."""
    details = entry.get("details")
    version = details.get("version") if isinstance(details, dict) else None
    return version if isinstance(version, int) and not isinstance(version, bool) else None


def _check_log(plan: Path, result: VerifyResult) -> list[dict[str, Any]]:
    log, head = audit.log_path(plan), audit.head_path(plan)
    try:
        entries = audit.read_log(log)
        audit.check_chain(entries, log.name)
        note = audit.check_head(entries, head)
    except IntegrityStop as exc:
        raise _fail(result, str(exc)) from None
    for entry in entries:  # each entry holds what its action's entries hold
        try:
            read_entry(entry)
        except ValidationError as exc:
            raise _fail(result, f"{log.name}: entry {entry['seq']} ({entry['action']}): "
                        f"{first_problem(exc)}") from None
    if log.exists() or head.exists():
        result.passed.append(
            f"audit log: {_entries(len(entries))}, sequence, links and hashes intact; head "
            "matches"
            + (" the entry before the last" if note else ""))
    if note:
        result.notes.append(f"{head.name}: {note}; the next entry brings it up to date")
    return entries


def _entries(count: int, kind: str = "") -> str:
    """``1 entry``, ``3 entries`` (``1 signed entry`` with ``kind``)."""
    return f"{count} {kind}{'entry' if count == 1 else 'entries'}"


def _check_signatures(entries: list[dict[str, Any]], key: Path | None,
                      result: VerifyResult) -> None:
    signed = [e for e in entries if audit.log.SIGNATURE_KEY in e]
    if key is None and not signed:
        return
    from prespec.audit.signing import key_id, load_public, signature_problem

    try:
        public = load_public(key) if key is not None else None
    except PrespecError as exc:
        raise _fail(result, str(exc)) from None
    for entry in entries:
        if key is None and audit.log.SIGNATURE_KEY not in entry:
            continue
        if entry["action"] not in audit.log.SIGNED_ACTIONS:
            continue
        problem = signature_problem(entry, public)
        if problem:
            raise _fail(result, f"log entry {entry['seq']} ({entry['action']}, version "
                        f"{_version_of(entry)}): {problem}")
    count = sum(1 for e in entries if e["action"] in audit.log.SIGNED_ACTIONS)
    if public is not None:
        every = "the" if count == 1 else "all"
        result.passed.append(f"signatures: {every} {_entries(count, 'lock/amend ')} signed by "
                             f"{key_id(public)}")
    else:
        holds = "holds a valid signature" if len(signed) == 1 else "hold valid signatures"
        result.passed.append(f"signatures: {_entries(len(signed), 'signed ')} {holds} "
                             "(give --key to require the signer)")


def _check_lock(plan: Path, entries: list[dict[str, Any]], result: VerifyResult
                ) -> dict[str, Any] | None:
    try:
        doc = audit.read_lock(audit.lock_path(plan))
    except IntegrityStop as exc:
        raise _fail(result, str(exc)) from None
    waiting = logged_pending(audit.lock_path(plan), entries)
    pending = pending_path(audit.lock_path(plan))
    if waiting is not None:
        doc = waiting
        result.notes.append(
            f"{audit.lock_path(plan).name}: version {len(doc['versions'])} was logged but its "
            f"write stopped before replacing the lock; it waits in {pending.name} (checked "
            "there); the next prespec command completes it")
    elif pending.exists():
        result.notes.append(f"{pending.name}: left by a lock or amend stopped before its log "
                            "entry; not part of the lock, safe to delete")
    if doc is None:
        if any(e["action"] in ("lock", "amend") for e in entries):
            raise _fail(result, f"{audit.lock_path(plan).name}: missing, but the log records a lock")
        return None
    name = audit.lock_path(plan).name
    previous = None
    for index, version in enumerate(doc["versions"], start=1):
        where = f"{name}: version {index}"
        if version.get("version") != index:
            raise _fail(result, f"{where}: numbered {version.get('version')!r}")
        try:
            derived = fingerprint(version["plan"])
        except (KeyError, TypeError, ValueError) as exc:
            raise _fail(result, f"{where}: the resolved plan is unreadable ({exc})") from None
        if derived != version.get("fingerprint"):
            raise _fail(result, f"{where}: the fingerprint does not match its resolved plan")
        if version.get("previous") != previous:
            raise _fail(result, f"{where}: 'previous' does not name version {index - 1}")
        action = "lock" if index == 1 else "amend"
        logged = [e for e in entries if e["action"] == action and e["plan"] == derived
                  and _version_of(e) == index]
        if not logged:
            raise _fail(result, f"{where}: the log has no {action} entry for {derived}")
        if len(logged) > 1:
            raise _fail(result, f"{where}: the log has {len(logged)} {action} entries for it")
        if logged[0]["details"].get("record") != version_digest(version):
            raise _fail(result, f"{where}: differs from the version its {action} entry recorded "
                        "(the lock was edited)")
        if logged[0]["details"].get("families", {}) != declared_members(version["plan"]).get(
                "families", {}):
            raise _fail(result, f"{where}: its family members differ from those its {action} "
                        "entry recorded")
        previous = derived
    for entry in entries:
        if entry["action"] not in ("lock", "amend"):
            continue
        number = _version_of(entry)
        if number is None or number > len(doc["versions"]):
            raise _fail(result, f"{name}: the log records version {number}, the lock does not "
                        "(a version was removed)")
        if (number == 1) != (entry["action"] == "lock"):
            raise _fail(result, f"log entry {entry['seq']}: a {entry['action']} entry for "
                        f"version {number}")
    _check_versions_match_entries(doc, entries, name, result)
    result.passed.append(f"lock: {len(doc['versions'])} version(s), fingerprints and links intact, "
                         "each recorded in the log")
    return doc


def _check_versions_match_entries(doc: dict[str, Any], entries: list[dict[str, Any]],
                                  name: str, result: VerifyResult) -> None:
    """The lock and amend entries, in log order, must be versions 1, 2, … N of the lock, one
    entry each, each naming its version's fingerprint and record: an entry repeated for one
    version, an entry whose fingerprint is in no version, or a version without its entry
    means the lock and the log tell different stories. Lock and amend hold the folder's
    lock, so an honest log numbers its versions in order."""
    versions = doc["versions"]
    logged = [e for e in entries if e["action"] in ("lock", "amend")]
    for position, entry in enumerate(logged, start=1):
        number = _version_of(entry)
        where = f"log entry {entry['seq']} ({entry['action']}, version {number})"
        if number != position:
            if number in [_version_of(e) for e in logged[:position - 1]]:
                raise _fail(result, f"{where}: a second entry for version {number} "
                            f"(the log has {sum(_version_of(e) == number for e in logged)})")
            raise _fail(result, f"{where}: out of order; the lock and amend entries before it "
                        f"record {position - 1} version(s)")
        version = versions[number - 1]
        if entry["plan"] != version["fingerprint"]:
            held = [v["version"] for v in versions if v["fingerprint"] == entry["plan"]]
            raise _fail(result, f"{where}: fingerprint {entry['plan']} is "
                        + (f"that of version(s) {held}, not of version {number}" if held else
                           f"in no version of {name}"))
        details = entry["details"] if isinstance(entry["details"], dict) else {}
        if details.get("record") != version_digest(version):
            raise _fail(result, f"{where}: records a version other than {name}'s version "
                        f"{number}")
    if len(logged) != len(versions):
        raise _fail(result, f"{name}: {len(versions)} version(s), but the log has "
                    f"{len(logged)} lock and amend entries")


def _check_plan_file(plan: Path, doc: dict[str, Any], entries: list[dict[str, Any]],
                     result: VerifyResult) -> None:
    latest = audit.latest(doc)
    try:
        loaded = load_plan(plan)
    except PrespecError as exc:
        raise _fail(result, f"plan file: does not load: {exc}") from None
    if loaded.fingerprint == latest["fingerprint"]:
        same = "same bytes" if loaded.file_sha256 == latest.get("plan_file_sha256") else \
            "layout differs, meaning identical"
        result.passed.append(f"plan file: matches lock version {latest['version']} ({same})")
        return
    accepted = any(
        d.get("code") == "plan-modified-after-lock" and d.get("found") == loaded.fingerprint
        and d.get("accepted")
        for e in entries for d in (e.get("deviations") or []) if isinstance(d, dict)
    )
    if not accepted:
        raise _fail(result, f"plan file: {plan.name} differs in meaning from lock version "
                    f"{latest['version']} ({loaded.fingerprint} vs {latest['fingerprint']})")
    result.passed.append("plan file: differs from its lock, recorded as an accepted departure")


def _report_folder(plan: Path, entry: dict[str, Any], result: VerifyResult
                   ) -> tuple[Path, str, FolderCheck]:
    """The folder holding the files of the report ``entry`` names, its relative path, and
    what :func:`check_folder` found in it (one walk, each file read once)."""
    where = f"log entry {entry['seq']} ({entry['action']})"
    details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
    rel = details.get("report")
    if not isinstance(rel, str) or not rel or os.path.isabs(rel):
        raise _fail(result, f"{where}: no relative report path")
    folder = plan.parent / rel
    real_folder = _is_real_folder(folder)
    if real_folder:
        checked = check_folder(folder, keep=_KEPT, not_a_link=True)
        # an empty walk is an empty folder, or one it may not read: listing it again says
        if checked.entries or _has_children(folder):
            return folder, rel, checked
    pending = pending_report(plan, entry)
    if pending is not None:
        result.notes.append(
            f"report {rel}: complete, but its run stopped before moving it into place; its "
            f"files are in {pending.partial.name} beside it (checked there); the next "
            "prespec run on this plan moves it")
        return pending.partial, rel, check_folder(pending.partial, keep=_KEPT)
    if real_folder:
        raise _fail(result, f"{where}: report folder {rel} is empty")
    raise _fail(result, f"{where}: report folder {rel} is missing")


_KEPT = ("results.json",)  # read by verify after the manifest check, from the bytes it hashed


def _is_real_folder(path: Path) -> bool:
    """A folder, not a link to one (one ``lstat``)."""
    try:
        return stat.S_ISDIR(os.lstat(path).st_mode)
    except OSError as exc:
        if exc.errno in (errno.ENOENT, errno.ENOTDIR, errno.EBADF, errno.ELOOP):
            return False  # as Path.is_dir() says no
        raise


def _has_children(folder: Path | str) -> bool:
    with os.scandir(folder) as listing:
        return any(True for _ in listing)


def _check_reports(plan: Path, entries: list[dict[str, Any]], result: VerifyResult
                   ) -> tuple[dict[str, Path], dict[str, list[str]]]:
    """Every report folder the log names against its manifest and its log entry: the
    folders by their relative paths, and the warnings about what is inside each
    (:func:`_contents_warnings`, taken from the same walk and added after the leftovers')."""
    found: dict[str, Path] = {}
    inside: dict[str, list[str]] = {}
    for entry in entries:
        if entry["action"] not in ("run", "rehearse", "look"):
            continue
        folder, rel, checked = _report_folder(plan, entry, result)
        if rel in found:
            raise _fail(result, f"log entry {entry['seq']}: names report {rel} a second time")
        if checked.problem:
            raise _fail(result, f"report {rel}: {checked.problem}")
        if checked.manifest != entry["details"].get("manifest"):
            raise _fail(result, f"report {rel}: manifest.json is not the one the log recorded")
        try:  # the bytes just checked against the manifest
            doc = json.loads(checked.kept["results.json"].decode("utf-8"))
            if not isinstance(doc, dict):
                raise TypeError
        except (KeyError, UnicodeDecodeError, json.JSONDecodeError, TypeError):
            raise _fail(result, f"report {rel}: results.json is missing or unreadable") from None
        try:
            read = read_provenance(doc)
        except ValidationError as exc:
            raise _fail(result, f"report {rel}: results.json is not a results document: "
                        f"{first_problem(exc)}") from None
        if read.plan != entry["plan"]:
            raise _fail(result, f"report {rel}: results.json names plan {read.plan}, "
                        f"the log {entry['plan']}")
        if read.data != entry["data"]:
            raise _fail(result, f"report {rel}: results.json names data {read.data}, "
                        f"the log {entry['data']}")
        expected_kind = "rehearsal" if entry["action"] == "rehearse" else "run"
        if read.kind != expected_kind:
            raise _fail(result, f"report {rel}: results.json is a {read.kind!r} report, "
                        f"the log records a {entry['action']}")
        if member_ids(doc) != entry["details"].get("families", {}):
            raise _fail(result, f"report {rel}: its family members differ from those its log "
                        "entry recorded")
        if doc.get("deviations") != entry["deviations"]:
            raise _fail(result, f"report {rel}: its departures differ from those its log entry "
                        "recorded")
        problem = look_problem(entries, entry, doc) or lock_history_problem(entries, entry, doc)
        if problem:
            raise _fail(result, f"report {rel}: {problem}")
        found[rel] = folder
        warnings = _contents_warnings(rel, checked)
        if warnings:
            inside[rel] = warnings
    result.passed.append(f"reports: {len(found)} folder(s) match their manifests and log entries")
    looked = [e for e in entries if isinstance(e["details"], dict) and "look" in e["details"]]
    if looked:
        recorded = [h for e in looked for h in e["details"].get("hypotheses") or []
                    if isinstance(h, dict)]
        what = ", ".join(name for name, shown in (
            ("z statistics", any("posterior_probability" not in h for h in recorded)),
            ("posterior and predictive probabilities",
             any("posterior_probability" in h for h in recorded))) if shown) or "statistics"
        result.passed.append(f"interim looks: {len(looked)} look(s) in the log, each report's "
                             f"look, observed fractions, {what} and history match the log")
    return found, inside


# --- time-stamps (RFC 3161): each token, and the order of the trusted times ---

#: A machine's clock and an authority's that differ by more than this get a note.
CLOCK_NOTE_SECONDS = 300


def _stamped_digest(entry: dict[str, Any], found: dict[str, Path], where: str,
                    result: VerifyResult) -> str:
    """What the token of ``entry`` must stamp: a version's record digest, or the SHA-256 of
    a run's results.json (read from the report folder the manifest check just passed)."""
    from prespec.audit.timestamp import results_digest

    details = entry["details"]
    if entry["action"] in ("lock", "amend"):
        return str(details.get("record"))
    if entry["action"] in ("run", "look"):
        rel = details.get("report")
        try:
            return results_digest((found[rel] / "results.json").read_bytes())
        except (KeyError, OSError):
            raise _fail(result, f"{where}: time-stamp: results.json cannot be read") from None
    raise _fail(result, f"{where}: a time-stamp on a {entry['action']} entry (only lock, "
                "amend, run and look entries are time-stamped)")


def _check_timestamps(plan: Path, entries: list[dict[str, Any]], found: dict[str, Path],
                      tsa_certs: list[Path] | None, result: VerifyResult) -> None:
    """Each time-stamp token the log names: its file is the one recorded, it stamps its
    entry's digest, its signature holds (``audit.timestamp.check_token``), and with
    ``--tsa-cert`` its signer chains to a given certificate and every lock and amend entry is
    time-stamped. A run time-stamped before a version locked before it fails. Then one
    line per version: its trusted time beside the machine's, and its first run's."""
    from prespec.audit import timestamp as ts

    key = ts.DETAILS_KEY
    stamped = [e for e in entries if isinstance(e.get("details"), dict) and key in e["details"]]
    if not stamped and tsa_certs is None:
        if ts.folder(plan).exists():
            _stray_tokens(plan, [], result)
        return
    try:
        trusted = ts.load_trusted(list(tsa_certs)) if tsa_certs is not None else None
    except PrespecError as exc:
        raise _fail(result, str(exc)) from None
    names = _entry_names(entries)
    if trusted is not None:
        for entry in entries:
            if entry["action"] in ("lock", "amend") and key not in entry["details"]:
                raise _fail(result, f"--tsa-cert: log entry {entry['seq']} ({names[entry['seq']]})"
                            " is not time-stamped")
        if not stamped:
            raise _fail(result, "--tsa-cert: no entry of the log is time-stamped")
    infos: dict[int, Any] = {}
    for entry in stamped:
        where = f"log entry {entry['seq']} ({names[entry['seq']]})"
        digest = _stamped_digest(entry, found, where, result)
        try:
            infos[entry["seq"]] = ts.check_token(ts.read_token(plan, entry["details"]), digest,
                                                 trusted=trusted)
        except ts.TokenProblem as exc:
            raise _fail(result, f"{where}: time-stamp: {exc}") from None
    latest: dict[str, Any] | None = None  # the latest time-stamped version so far
    for entry in entries:
        if entry["action"] in ("lock", "amend") and entry["seq"] in infos:
            if latest is None or infos[entry["seq"]].time >= infos[latest["seq"]].time:
                latest = entry
        elif entry["action"] in ("run", "look") and entry["seq"] in infos \
                and latest is not None and infos[entry["seq"]].time < infos[latest["seq"]].time:
            raise _fail(result, f"log entry {entry['seq']} ({names[entry['seq']]}): time-stamped "
                        f"at {ts.stamp_text(infos[entry['seq']].time)}, before its lock "
                        f"({names[latest['seq']]}, time-stamped at "
                        f"{ts.stamp_text(infos[latest['seq']].time)})")
    listed = ", ".join(names[e["seq"]] for e in stamped)
    signers = sorted({i.signer for i in infos.values()})
    urls = sorted({str(e["details"][key].get("authority")) for e in stamped})
    line = (f"time-stamps: {len(stamped)} token{'' if len(stamped) == 1 else 's'} ({listed}) "
            f"from {', '.join(urls)}, each stamping its entry's digest, signatures valid, signed "
            "by " + "; ".join(signers) + " with the time-stamping usage")
    if trusted is not None:
        anchors = sorted({str(i.chained_to) for i in infos.values()})
        line += ", chained to --tsa-cert " + "; ".join(anchors)
    else:
        line += "; the signer was not checked against a trusted certificate (give --tsa-cert)"
    result.passed.append(line)
    result.passed.extend(_when_lines(entries, infos, names, result))
    _stray_tokens(plan, stamped, result)


def _entry_names(entries: list[dict[str, Any]]) -> dict[int, str]:
    """``version 2`` for a lock or amend entry, ``run 1`` for the first run or look (as the
    run lines number them), else the action, by seq."""
    out: dict[int, str] = {}
    runs = 0
    for entry in entries:
        if entry["action"] in ("lock", "amend"):
            out[entry["seq"]] = f"version {_version_of(entry)}"
        elif entry["action"] in ("run", "look"):
            runs += 1
            out[entry["seq"]] = f"run {runs}"
        else:
            out[entry["seq"]] = str(entry["action"])
    return out


def _when_lines(entries: list[dict[str, Any]], infos: dict[int, Any], names: dict[int, str],
                result: VerifyResult) -> list[str]:
    """Per lock version: when it was locked (the authority's time beside the machine's) and
    when its first run was, each said with the clock it rests on; a note where the two
    clocks differ by more than ``CLOCK_NOTE_SECONDS``."""
    from prespec.audit.timestamp import stamp_text

    def moment(entry: dict[str, Any], by: str | None = None) -> str:
        info = infos.get(entry["seq"])
        if info is None:
            return f"{entry['at']} by the machine's clock only (not time-stamped)"
        machine = _parsed_time(entry["at"])
        if machine is not None and abs((machine - info.time).total_seconds()) \
                > CLOCK_NOTE_SECONDS:
            result.notes.append(
                f"{names[entry['seq']]}: the machine's clock ({entry['at']}) and the "
                f"time-stamping authority's ({stamp_text(info.time)}) differ by "
                f"{_duration(abs((machine - info.time).total_seconds()))}; the authority's "
                "time is the one its signature proves")
        signer = "" if info.signer == by else f" by {info.signer}"
        return f"{stamp_text(info.time)} (time-stamped{signer}; machine clock {entry['at']})"

    lines = []
    versions = [e for e in entries if e["action"] in ("lock", "amend")]
    for index, version in enumerate(versions):
        until = versions[index + 1]["seq"] if index + 1 < len(versions) else None
        first = next((e for e in entries if e["action"] in ("run", "look")
                      and e["seq"] > version["seq"] and (until is None or e["seq"] < until)),
                     None)
        line = f"when: {names[version['seq']]} locked at {moment(version)}; "
        if first is None:
            line += "no run of it on record"
        else:
            by = infos[version["seq"]].signer if version["seq"] in infos else None
            line += f"first run ({names[first['seq']]}) at {moment(first, by)}"
            if first["seq"] in infos and version["seq"] in infos:
                line += ", after the lock's time-stamp"
        lines.append(line)
    return lines


def _parsed_time(text: Any) -> Any:
    from datetime import datetime

    try:
        return datetime.fromisoformat(str(text))  # a Z is read as UTC (Python 3.11)
    except ValueError:
        return None


def _duration(seconds: float) -> str:
    minutes, secs = divmod(round(seconds), 60)
    hours, minutes = divmod(minutes, 60)
    days, hours = divmod(hours, 24)
    parts = [f"{days} d"] * bool(days) + [f"{hours} h"] * bool(hours) + \
        [f"{minutes} min"] * bool(minutes) + [f"{secs} s"] * bool(secs)
    return " ".join(parts[:2]) or "0 s"


def _stray_tokens(plan: Path, stamped: list[dict[str, Any]], result: VerifyResult) -> None:
    """Files in ``<stem>.timestamps/`` that no entry names: a note (a lock or run stopped
    between writing its token and its log entry leaves one; it proves nothing)."""
    from prespec.audit import timestamp as ts

    place = ts.folder(plan)
    if not place.is_dir():
        return
    named = {str(e["details"][ts.DETAILS_KEY].get("file")) for e in stamped}
    for child in sorted(place.iterdir()):
        rel = f"{place.name}/{child.name}"
        if rel not in named:
            result.notes.append(f"{rel}: a time-stamp token no log entry names (left by a step "
                                "stopped before its entry); not part of the record")


_STOPPED_RUN_NAME = re.compile(r"\d{8}T\d{6}Z-(run|rehearsal)(-\d+)?")  # default_folder's


def _kind_of(mode: int) -> str:
    """What a file that is neither a plain file nor a folder is, for a warning."""
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISBLK(mode) or stat.S_ISCHR(mode):
        return "a device file"
    if stat.S_ISLNK(mode):
        return "a symbolic link"
    return "a file of an unknown kind"


def _shown(plan: Path, path: Path) -> str:
    """``path`` relative to the plan's folder when inside it (as the log names reports)."""
    here, path = Path(os.path.abspath(plan.parent)), Path(os.path.abspath(path))
    return (path.relative_to(here) if path.is_relative_to(here) else path).as_posix()


def _check_leftovers(plan: Path, found: dict[str, Path], result: VerifyResult) -> None:
    """What lies in ``reports/<stem>/`` (and beside every named report) that no recorded run
    wrote. A folder with files that the log does not name fails. What a run stopped before
    its log entry leaves, an empty reserved folder and its temporary ``.<name>.partial-*``
    folder beside it, is a note naming it as such. Anything else is a warning by name (a
    failure under ``--strict``): a dot-named folder dressed as a temporary one with no
    reserved folder beside it, a loose file, a link, a FIFO, socket or device, an empty folder
    no run reserved, ``reports/`` or ``reports/<stem>/`` as a link."""
    base = plan.parent / "reports"
    own = base / plan.stem
    for where in (base, own):
        if where.is_symlink():
            result.warnings.append(f"{_shown(plan, where)}: a symbolic link; report folders "
                                   "are real folders inside the study (not written by prespec)")
    # absolute, normalised paths as text: a set of 10,000 of them is cheap, of Paths not
    here = os.path.abspath(plan.parent)
    named = {os.path.abspath(os.path.join(here, rel)) for rel in found}
    in_use = {os.path.abspath(p) for p in found.values()}
    # a plan named ``...yaml`` (stem ``..``) has no folder of its own under reports/
    own_abs = Path(os.path.abspath(own)) if plan.stem not in ("", ".", "..") else None
    places = ({own_abs} if own_abs else set()) | {
        Path(p) for p in {os.path.dirname(p) for p in named}}
    prefixes = {f".{os.path.basename(p)}{PARTIAL}" for p in named}
    for place in sorted(places):
        if not place.is_dir():
            continue
        for name in sorted(os.listdir(place)):
            text = os.path.join(place, name)
            if text in named or text in in_use:
                continue
            child = Path(text)
            rel = _shown(plan, child)
            mode = child.lstat().st_mode
            temporary = child.name.startswith(".") and PARTIAL in child.name
            if stat.S_ISDIR(mode) and temporary:
                if place != own_abs and not any(child.name.startswith(p) for p in prefixes):
                    continue  # a folder chosen with --out: only the temporary folders of its
                    # named reports are looked at
                _temporary_folder(child, rel, named, result)
            elif place != own_abs:
                continue
            elif not stat.S_ISDIR(mode):
                what = "a loose file" if stat.S_ISREG(mode) else _kind_of(mode)
                result.warnings.append(f"{rel}: {what} among the report folders; no recorded "
                                       "run wrote it")
            elif any(child.iterdir()):
                raise _fail(result, f"{rel}: a report folder that the log does not name "
                            "(not produced by a recorded run)")
            elif _STOPPED_RUN_NAME.fullmatch(child.name) or any(
                    p.name.startswith(f".{child.name}{PARTIAL}") for p in place.iterdir()):
                result.notes.append(f"{rel}: an empty folder reserved by a run that was stopped "
                                    "before its log entry; safe to delete")
            else:
                result.warnings.append(f"{rel}: an empty folder among the report folders; no "
                                       "recorded run reserved it")


def _temporary_folder(child: Path, rel: str, named: set[str], result: VerifyResult) -> None:
    """``.<name>.partial-*``: a run's leftover only when ``<name>``, the folder that run
    reserved, is beside it, empty and not named by the log (a run killed before its log entry
    leaves both); otherwise it is planted or left by hand, and a warning. ``named``: the
    absolute paths of the report folders the log names."""
    name = child.name[1:child.name.index(PARTIAL)]
    reserved = child.parent / name
    if (reserved.is_dir() and not reserved.is_symlink() and not any(reserved.iterdir())
            and os.path.abspath(reserved) not in named):
        result.notes.append(f"{rel}: a temporary folder left by a run that was stopped before "
                            f"its log entry (its reserved folder {name} is empty beside it); "
                            "not part of any report, safe to delete")
        return
    result.warnings.append(f"{rel}: named like a temporary report folder, but no stopped run "
                           f"left it (no empty reserved folder {name} beside it, or the log "
                           "names that report); not produced by a recorded run")


def _contents_warnings(rel: str, checked: FolderCheck) -> list[str]:
    """Inside a named report: what its manifest cannot list (it lists plain files only): an
    empty folder, a FIFO, socket or device; each a warning by name, in the order of a
    top-down walk with names sorted. (A link fails in ``check_folder``; an extra plain file
    fails there too.) From the walk ``check_folder`` made: no file is looked at again."""
    out: list[str] = []
    folders = {inner for inner, entry in checked.entries if entry.is_dir(follow_symlinks=False)}
    if folders <= {inner.rpartition("/")[0] for inner, _ in checked.entries} and all(
            entry.is_file(follow_symlinks=False) or entry.is_symlink() or inner in folders
            for inner, entry in checked.entries):
        return out  # every folder holds something, and every other entry is a file or a link
    inside: dict[str, list[tuple[str, os.DirEntry[str]]]] = {}
    for inner, entry in checked.entries:
        inside.setdefault(inner.rpartition("/")[0], []).append((inner, entry))
    todo = [""]
    while todo:
        children = sorted(inside.get(todo.pop(), ()), key=lambda c: c[1].name)
        folders = []
        for inner, entry in children:
            if entry.is_dir(follow_symlinks=False):
                folders.append(inner)
                # nothing under it in the walk: empty, or unreadable (listing it says)
                if inner not in inside and not _has_children(entry.path):
                    out.append(f"report {rel}: {inner}: an empty folder inside the report "
                               "(not in its manifest)")
            elif not entry.is_file(follow_symlinks=False) and not entry.is_symlink():
                kind = _kind_of(entry.stat(follow_symlinks=False).st_mode)
                out.append(f"report {rel}: {inner}: {kind} inside the report (not in its "
                           "manifest)")
        todo.extend(reversed(folders))  # the first folder's contents next, as os.walk
    return out


def _check_strict(result: VerifyResult) -> None:
    """``--strict``: every warning is a failure."""
    if result.warnings:
        count = len(result.warnings)
        raise _fail(result, f"--strict: {count} thing{'' if count == 1 else 's'} in the report "
                    f"folders no recorded run wrote (first: {result.warnings[0]})")


# --- per run: was it the locked analysis? ---

# The departures that make a run something other than the locked analysis, in the order their
# reasons are given. ``plan-modified-after-lock`` is not one: the locked plan ran, and the
# changed plan file is listed among the departures on record.
_NOT_LOCKED_CODES = ("run-without-lock", "override", "amended-after-unblinding")


@dataclass(frozen=True)
class RunVerdict:
    """Whether one run (or interim look) of the log was the locked analysis, and if not, why.

    Derived from the log entries alone (the entry's departures and the lock and amend entries
    before it), so a study folder written by an earlier prespec gets the same verdict."""

    number: int  # 1, 2, … over the run and look entries of the log
    seq: int
    report: str
    look: int | None
    version: int | None  # the lock version in force at the run, None when none was
    reasons: tuple[str, ...]  # why it was not the locked analysis, each naming its code
    labels: tuple[str, ...]  # the same, in a word or two, for the last line
    departures: tuple[str, ...]  # the other departure codes on record for the run

    @property
    def locked(self) -> bool:
        return not self.reasons

    @property
    def name(self) -> str:
        return f"run {self.number}"

    @property
    def line(self) -> str:
        what = f"look {self.look}, " if self.look is not None else ""
        head = f"{self.name} ({what}log entry {self.seq}, report {self.report}): "
        head += (f"the locked analysis (lock version {self.version})" if self.locked else
                 "not the locked analysis: " + "; ".join(self.reasons))
        if self.departures:
            head += "; other departures on record: " + ", ".join(self.departures)
        return head


def _accepted(dev: dict[str, Any]) -> str:
    reason = dev.get("accepted")
    return f", accepted: {json.dumps(reason, ensure_ascii=False)}" if reason else ""


def _override_text(dev: dict[str, Any]) -> str:
    """``alpha 0.05 → 0.5`` from an override departure (its key opens the detail)."""
    detail = str(dev.get("detail") or "")
    key = detail.split(": ", 1)[0] if ": " in detail else "a locked value"
    return f"{key} {dev.get('expected')} → {dev.get('found')}"


def _run_verdict(number: int, entry: dict[str, Any], locks: list[dict[str, Any]],
                 first_run: int | None, later_lock: dict[str, Any] | None) -> RunVerdict:
    """The verdict on ``entry``, from the lock and amend entries before it (``locks``), the
    seq of the first run or look before it, and the first lock entry after it."""
    devs = [d for d in entry.get("deviations") or [] if isinstance(d, dict)]
    codes = [str(d.get("code")) for d in devs]
    in_force = locks[-1] if locks else None
    version = _version_of(in_force) if in_force is not None else None
    reasons: list[str] = []
    labels: list[str] = []
    if in_force is None or "run-without-lock" in codes:
        dev = next((d for d in devs if d.get("code") == "run-without-lock"), {})
        if later_lock is None:
            reasons.append(f"the plan was never locked (run-without-lock{_accepted(dev)})")
            labels.append("never locked")
        else:
            reasons.append(f"the plan was not locked when it ran (locked later, log entry "
                           f"{later_lock['seq']}; run-without-lock{_accepted(dev)})")
            labels.append("not locked when it ran")
        version = None
    elif entry["plan"] != in_force["plan"]:
        reasons.append(f"the plan that ran ({entry['plan']}) is not lock version {version} "
                       f"({in_force['plan']})")
        labels.append("plan changed")
    overrides = [d for d in devs if d.get("code") == "override"]
    if overrides:
        reasons.append("overrides " + ", ".join(_override_text(d) for d in overrides)
                       + f" (override{_accepted(overrides[0])})")
        labels.append("overrides " + ", ".join(
            str(d.get("detail") or "").split(": ", 1)[0] for d in overrides))
    late = [e for e in locks if e["action"] == "amend" and (
        first_run is not None and e["seq"] > first_run or any(
            isinstance(d, dict) and d.get("code") == "amended-after-unblinding"
            for d in e.get("deviations") or []))]
    if version is not None and (late or "amended-after-unblinding" in codes):
        which = ", ".join(str(_version_of(e)) for e in late) or "an earlier version"
        reasons.append(f"the plan was amended after unblinding (version {which} locked after a "
                       "run on the data; amended-after-unblinding)")
        labels.append("amended after unblinding")
    others = [c for c in dict.fromkeys(codes) if c not in _NOT_LOCKED_CODES]
    details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
    look = details.get("look") if entry["action"] == "look" else None
    return RunVerdict(number, entry["seq"], str(details.get("report")),
                      look if isinstance(look, int) else None, version, tuple(reasons),
                      tuple(labels), tuple(others))


def run_verdicts(entries: list[dict[str, Any]]) -> list[RunVerdict]:
    """One verdict per run and look entry of the log, in log order (one pass: the entries
    before each are those earlier in the log, whose seq the chain check made 1, 2, …)."""
    out: list[RunVerdict] = []
    lock_entries = [e for e in entries if e["action"] == "lock"]
    locks: list[dict[str, Any]] = []
    first_run: int | None = None
    for entry in entries:
        if entry["action"] in ("lock", "amend"):
            locks.append(entry)
        elif entry["action"] in ("run", "look"):
            later = next((e for e in lock_entries if e["seq"] > entry["seq"]), None)
            out.append(_run_verdict(len(out) + 1, entry, locks, first_run, later))
            first_run = entry["seq"] if first_run is None else first_run
    return out


def last_line(runs: list[RunVerdict], warnings: int = 0) -> str:
    """The final line of verify: true of the files, of every run and of the report folders."""
    off = [r for r in runs if not r.locked]
    if not runs:
        line = "verified: files intact; no run on record"
    elif not off:
        line = ("verified: files intact; the run was the locked analysis" if len(runs) == 1
                else f"verified: files intact; all {len(runs)} runs were the locked analysis")
    else:
        verb = "was" if len(off) == 1 else "were"
        noun = "run" if len(runs) == 1 else "runs"
        listed = ", ".join(f"{r.name} ({'; '.join(r.labels)})" for r in off)
        line = (f"files intact; {len(off)} of {len(runs)} {noun} {verb} not the locked "
                f"analysis: {listed}")
    if warnings:
        line += (f"; {warnings} warning{'' if warnings == 1 else 's'}: the report folders hold "
                 "things no recorded run wrote (listed above; --strict fails on them)")
    return line


def verify_all(plan: Path, *, expect: str | None = None, rerun: Path | None = None,
               report: str | None = None, key: Path | None = None,
               strict: bool = False, document: Path | None = None,
               tsa_certs: list[Path] | None = None) -> VerifyResult:
    result = VerifyResult()
    if not audit.lock_path(plan).exists() and not audit.log_path(plan).exists() \
            and not audit.head_path(plan).exists():
        raise VerifyFailure(f"{plan}: nothing to verify (no lock and no audit log)", [])
    entries = _check_log(plan, result)
    _check_signatures(entries, key, result)
    doc = _check_lock(plan, entries, result)
    if doc is not None:
        _check_plan_file(plan, doc, entries, result)
    found, inside = _check_reports(plan, entries, result)
    _check_leftovers(plan, found, result)
    _check_timestamps(plan, entries, found, tsa_certs, result)
    for rel in sorted(inside):
        result.warnings.extend(inside[rel])
    if expect is not None:
        first = next((e for e in entries if e["action"] == "lock"), None)
        if first is None:
            raise _fail(result, f"expected fingerprint: the plan was never locked (the log has "
                        f"no lock entry), so nothing matches {expect}")
        if first["plan"] != expect:
            raise _fail(result, f"expected fingerprint: the first lock entry holds "
                        f"{first['plan']}, not {expect}")
        result.passed.append("expected fingerprint: matches the first lock entry")
    if document is not None:
        _check_document(plan, doc, entries, document, result)
    if rerun is not None:
        _rerun(plan, entries, doc, found, rerun, report, result)
    result.runs = run_verdicts(entries)
    result.summary = last_line(result.runs, len(result.warnings))
    if strict:
        _check_strict(result)
    return result


def _check_document(plan: Path, doc: dict[str, Any] | None, entries: list[dict[str, Any]],
                    document: Path, result: VerifyResult) -> None:
    """``--document FILE``: the plan document (HTML or PDF) carries a locked version's
    fingerprint and the words ``prespec describe`` writes from that version."""
    from prespec.workflow.describe import DocumentMismatch, check_document

    if doc is None:
        raise _fail(result, f"document {document.name}: the plan was never locked, so no "
                    "document can carry its words")
    try:
        result.passed.append(check_document(plan, doc, entries, document))
    except DocumentMismatch as exc:
        raise _fail(result, str(exc)) from None


# --- --rerun: recompute a report's results from the data and compare every field ---

# Fields that differ legitimately between the run and its recomputation.
# (``engine``, ``engine_library`` and ``query``: how the counts were made; every engine gives
# the same counts.)
MOMENT_FIELDS = frozenset({"created", "actor", "environment", "data_file", "engine",
                           "engine_library", "query", "locked"})
# Departures and notes that depend on the moment (the log, the lock, the installation, the
# command line), not on the plan and the data; the recomputation re-derives the rest.
MOMENT_CODES = frozenset({"data-changed-since-last-run", "environment-differs-from-lock",
                          "amended-after-unblinding", "plan-modified-after-lock",
                          "run-without-lock", "override", "plan-file-reformatted"})


def _plan_for(plan: Path, doc: dict[str, Any] | None, results: RunResults, rel: str,
              result: VerifyResult) -> Any:
    fp = results.plan
    held = [v for v in (doc or {}).get("versions", []) if v.get("fingerprint") == fp]
    if held:
        resolved, source = held[0]["plan"], audit.lock_path(plan).name
    else:
        try:
            loaded = load_plan(plan)
        except PrespecError as exc:
            raise _fail(result, f"rerun {rel}: the plan file does not load: {exc}") from None
        if loaded.fingerprint != fp:
            raise _fail(result, f"rerun {rel}: no lock version or plan file holds plan {fp}")
        resolved, source = loaded.resolved, plan.name
    overrides = {o.key: o.used for o in results.overrides or []}
    try:
        if overrides:
            resolved, _ = apply_overrides(resolved, overrides)
        return plan_from_resolved(resolved, source=source)
    except PrespecError as exc:
        raise _fail(result, f"rerun {rel}: the plan cannot be rebuilt: {exc}") from None


def _comparable(value: Any, key: str) -> Any:
    if key in ("deviations", "notes") and isinstance(value, list):
        return [_found_capped(d) for d in value
                if not (isinstance(d, dict) and d.get("code") in MOMENT_CODES)]
    return value


#: The departures whose ``found`` lists values from the data (capped since issue 14).
LISTED_FOUND = frozenset({"unexpected-group", "unmapped-outcome-value", "undeclared-level"})


def _found_capped(entry: Any) -> Any:
    """A departure whose ``found`` an earlier version wrote uncapped, compared as capped."""
    if (isinstance(entry, dict) and entry.get("code") in LISTED_FOUND
            and isinstance(entry.get("found"), str)):
        return {**entry, "found": capped_found(entry["found"])}
    return entry


# Two numbers of a recomputation agree when they are within this relative distance: the last
# bits of a float may move with a library's version or a more careful summation (an exact tail
# summed away from its mode moved a Fisher p-value by 6e-16), which is not a different result.
# Anything larger, and any change of an integer, a text or a zero, is a difference.
RERUN_REL_TOL = 1e-12


def _numbers(a: Any, b: Any) -> bool:
    """Both plain numbers, at least one of them a float (a count compares exactly)."""
    kinds = (int, float)
    return (isinstance(a, kinds) and isinstance(b, kinds) and not isinstance(a, bool)
            and not isinstance(b, bool) and (isinstance(a, float) or isinstance(b, float)))


def first_difference(a: Any, b: Any, path: str = "") -> str | None:
    """The path of the first place two JSON values differ (``hypotheses[0].p_value``); floats
    within ``RERUN_REL_TOL`` of each other relative to the larger are the same."""
    if isinstance(a, dict) and isinstance(b, dict):
        for k in [*a, *(k for k in b if k not in a)]:
            where = f"{path}.{k}" if path else str(k)
            if k not in a or k not in b:
                return where
            found = first_difference(a[k], b[k], where)
            if found:
                return found
        return None
    if isinstance(a, list) and isinstance(b, list):
        for i, (x, y) in enumerate(zip(a, b, strict=False)):
            found = first_difference(x, y, f"{path}[{i}]")
            if found:
                return found
        return f"{path}[{min(len(a), len(b))}]" if len(a) != len(b) else None
    if isinstance(a, float) and isinstance(b, float) and math.isnan(a) and math.isnan(b):
        return None
    if _numbers(a, b) and math.isclose(a, b, rel_tol=RERUN_REL_TOL, abs_tol=0.0):
        return None
    same = a == b and (type(a) is type(b) or not isinstance(a, bool) and not isinstance(b, bool))
    return None if same else (path or "(the whole document)")


def _lookup(doc: Any, path: str) -> Any:
    import re

    for part in re.findall(r"[^.\[\]]+|\[\d+\]", path):
        try:
            doc = doc[int(part[1:-1])] if part.startswith("[") else doc[part]
        except (KeyError, IndexError, TypeError, ValueError):
            return "(absent)"
    return doc


def _look_of(entries: list[dict[str, Any]], entry: dict[str, Any], model: Any) -> Any:
    """The look a run or look entry ran, from the log entries before it."""
    before = [e for e in entries if e["seq"] < entry["seq"]]
    number = entry["details"].get("look") if entry["action"] == "look" else None
    return look_run(model, before, entry["plan"], number)


def _design_as_written(stored: dict[str, Any], again: dict[str, Any], model: Any) -> None:
    """A design entry written before the power of a two-sided test counted its far tail is
    recomputed the same way, so that such a report keeps verifying."""
    from prespec.design.document import BOTH_TAILS_KEY
    from prespec.workflow.execute import design_entry

    design = stored.get("design")
    if isinstance(design, dict) and BOTH_TAILS_KEY not in design and again.get("design"):
        again["design"] = design_entry(model, str(stored.get("kind")), again["hypotheses"],
                                       both_tails=False)


def _rerun(plan: Path, entries: list[dict[str, Any]], doc: dict[str, Any] | None,
           found: dict[str, Path], data: Path, report: str | None,
           result: VerifyResult) -> None:
    from prespec.workflow.execute import compute_results

    if not data.is_file():
        raise _fail(result, f"rerun: {data}: no such data file")
    data_hash = file_sha256(data)
    runs = [e for e in entries if e["action"] in ("run", "look")]
    if report is not None:
        wanted = Path(report).as_posix().rstrip("/")
        runs = [e for e in runs if e["details"].get("report") == wanted]
        if not runs:
            raise _fail(result, f"rerun: the log names no run report {wanted}")
        if runs[0]["data"] != data_hash:
            raise _fail(result, f"rerun {wanted}: {data.name} is {data_hash}, the report was made "
                        f"from {runs[0]['data']}")
    else:
        runs = [e for e in runs if e["data"] == data_hash]
        if not runs:
            raise _fail(result, f"rerun: no run in the log was made from {data.name} "
                        f"({data_hash})")
    for entry in runs:
        rel = entry["details"]["report"]
        stored = json.loads((found[rel] / "results.json").read_text("utf-8"))
        kept = read_results(stored)  # a run's, as _check_reports found
        if not isinstance(kept, RunResults):
            raise _fail(result, f"rerun {rel}: results.json is not a run's")
        model = _plan_for(plan, doc, kept, rel, result)
        try:
            again = compute_results(
                plan_path=plan, plan=model, fingerprint=kept.plan,
                version=kept.plan_version, data_path=data,
                actor=kept.actor, environment=kept.environment,
                deviations=[], notes=[], previous_data=None,
                looks=_look_of(entries, entry, model))
        except PrespecError as exc:
            raise _fail(result, f"rerun {rel}: the recomputation failed: {exc}") from None
        if kept.overrides is not None:
            again = finish(again, [o.dumped() for o in kept.overrides])
        _design_as_written(stored, again, model)
        if "flow" not in stored:  # written before the participant flow (issue 18)
            again.pop("flow", None)
        again = json.loads(json.dumps(again, allow_nan=False))  # as written to results.json
        keys = [k for k in [*stored, *(k for k in again if k not in stored)]
                if k not in MOMENT_FIELDS]
        left = {k: _comparable(stored.get(k, "(absent)"), k) for k in keys}
        right = {k: _comparable(again.get(k, "(absent)"), k) for k in keys}
        where = first_difference(left, right)
        if where:
            raise _fail(result, f"rerun {rel}: {where} differs: the report has "
                        f"{json.dumps(_lookup(left, where))}, the recomputation "
                        f"{json.dumps(_lookup(right, where))}")
    result.passed.append(f"rerun: {len(runs)} report(s) recomputed from {data.name}, every "
                         "result identical (numbers to 1e-12 relative)")


@plain_errors
def verify(plan: str | Path, *, expect: str | None = None, rerun: str | Path | None = None,
           report: str | None = None, key: str | Path | None = None,
           strict: bool = False, document: str | Path | None = None,
           tsa_certs: list[str | Path] | None = None) -> VerifyResult:
    """Check the lock, the log and every report the log names, from the files alone.

    ``expect``: the fingerprint registered elsewhere at lock time. ``rerun``: a data file;
    every run report made from it (or only ``report``) is recomputed and must be identical.
    ``key``: a public key file; every lock and amend entry must carry its valid signature.
    ``strict``: the warnings (things in the report folders no recorded run wrote) fail.
    ``document``: a plan document (HTML or PDF) that must carry a locked version's words.
    ``tsa_certs``: PEM certificate files; every lock and amend entry must carry a time-stamp
    whose signer chains to one of them (``_check_timestamps``).
    """
    with audit.guard.hold(Path(plan).parent, exclusive=False):  # no writer half way
        return verify_all(Path(plan), expect=expect, rerun=Path(rerun) if rerun else None,
                          report=report, key=Path(key) if key else None,
                          strict=strict, document=Path(document) if document else None,
                          tsa_certs=[Path(c) for c in tsa_certs] if tsa_certs is not None
                          else None)
