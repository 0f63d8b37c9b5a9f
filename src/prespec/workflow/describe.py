"""``prespec describe``: the plan document of a locked version, and its check by verify.

The document's words are built in :mod:`prespec.report.describe` from the resolved plan a lock
version holds; this step finds that version and its log entry (the lock time), writes the HTML
(and, with ``pdf``, its printed PDF), and for ``verify --document`` regenerates the words of
the version a document names and compares them with the document's text.
"""

from __future__ import annotations

import os
import re
import secrets
import unicodedata
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.errors import BadInput, IntegrityStop, PrespecError
from prespec.plan import load_plan
from prespec.report.describe import (
    FORMATS,
    NAMED_FINGERPRINT,
    LockedVersion,
    format_of,
    html_text,
    plan_document,
)
from prespec.workflow.base import plain_errors


@dataclass(frozen=True)
class DescribeResult:
    html: Path
    pdf: Path | None
    version: int
    fingerprint: str
    locked_at: str
    timestamp: str | None


def trusted_time(plan: Path, version: dict[str, Any], entry: dict[str, Any]) -> str | None:
    """The hook for RFC 3161 time-stamps: the trusted time of the token of one lock version
    (``version``: the lock document's record; ``entry``: its lock or amend log entry), as the
    first page shows it, or None when the version has no token ("no trusted time-stamp").

    The token is checked before its time is written (its imprint is the version's digest and
    its signature holds; whether its signer is trusted is ``verify --tsa-cert``'s question).
    Both ``describe`` and ``verify --document`` read the time here."""
    from prespec.audit import timestamp as ts

    details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
    if ts.DETAILS_KEY not in details:
        return None
    number = version.get("version")
    try:
        der = ts.version_token(plan, int(number))
        if der is None:
            return None
        info = ts.check_token(der, str(details.get("record")))
    except ts.TokenProblem as exc:
        raise IntegrityStop(f"version {number}: its time-stamp token does not hold: {exc} "
                            "(prespec verify says more)") from None
    authority = details[ts.DETAILS_KEY].get("authority")
    return (f"{ts.stamp_text(info.time)} by {info.signer} ("
            + (f"{authority}; " if authority else "") + "the authority's clock)")


def _entry_of(entries: list[dict[str, Any]], version: dict[str, Any]) -> dict[str, Any]:
    number = version.get("version")
    for entry in entries:
        details = entry.get("details") if isinstance(entry.get("details"), dict) else {}
        if (entry.get("action") in ("lock", "amend") and details.get("version") == number
                and entry.get("plan") == version.get("fingerprint")):
            return entry
    raise IntegrityStop(f"version {number}: the audit log has no lock or amend entry for "
                        f"{version.get('fingerprint')} (prespec verify says more)")


def locked_version(plan: Path, doc: dict[str, Any], entries: list[dict[str, Any]],
                   number: int) -> LockedVersion:
    """What the document of lock version ``number`` is built from."""
    version = doc["versions"][number - 1]
    entry = _entry_of(entries, version)
    return LockedVersion(
        plan_name=plan.name, lock_name=audit.lock_path(plan).name, version=number,
        fingerprint=str(version["fingerprint"]), resolved=version["plan"],
        locked_at=str(entry.get("at")), actor=str(entry.get("actor")),
        previous=version.get("previous"), reason=version.get("reason"),
        timestamp=trusted_time(plan, version, entry))


def _read(plan: Path) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """The lock and the checked log; an unlocked plan is bad input."""
    doc = audit.read_lock(audit.lock_path(plan))
    if doc is None or not doc.get("versions"):
        raise BadInput(f"{plan}: not locked; the plan document is written from the lock "
                       f"(run prespec lock {plan} first)")
    entries = audit.read_log(audit.log_path(plan))
    audit.check_chain(entries, audit.log_path(plan).name)
    return doc, entries


def _choose(plan: Path, doc: dict[str, Any], version: int | None) -> int:
    versions = doc["versions"]
    name = audit.lock_path(plan).name
    if version is not None:
        if not 1 <= version <= len(versions):
            raise BadInput(f"--version {version}: {name} holds version"
                           + (" 1" if len(versions) == 1 else f"s 1 to {len(versions)}"))
        return version
    latest = versions[-1]
    loaded = load_plan(plan)
    if loaded.fingerprint != latest["fingerprint"]:
        raise BadInput(f"{plan}: differs in meaning from lock version {latest['version']} "
                       f"({loaded.fingerprint} vs {latest['fingerprint']}); amend it first, "
                       "or describe a locked version with --version N")
    return len(versions)


def _partial(path: Path, data: bytes) -> Path:
    """``data`` in a temporary file beside ``path`` (mode 0666 less the umask, as every file
    prespec writes, so that whoever may read the study reads it), to be renamed over it."""
    while True:
        tmp = path.with_name(f".{path.stem}.{secrets.token_hex(4)}.partial{path.suffix}")
        try:
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            break
        except FileExistsError:
            continue
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return tmp


def default_path(plan: Path, version: int) -> Path:
    """``<plan folder>/<stem>.plan-v<N>.html``: beside the plan, outside the report folders."""
    return plan.parent / f"{plan.stem}.plan-v{version}.html"


def footer(locked: LockedVersion) -> str:
    """The footer of every printed page."""
    return f"{locked.plan_name}, lock version {locked.version}, {locked.fingerprint}"


@plain_errors
def describe(plan: str | Path, *, version: int | None = None, out: str | Path | None = None,
             pdf: bool = False) -> DescribeResult:
    """Write the plan document of a locked version (default: the latest, which the plan file
    must match in meaning) as HTML, and with ``pdf`` as PDF beside it. Nothing else is
    written; the lock and the log are only read."""
    plan = Path(plan)
    with audit.guard.hold(plan.parent, exclusive=False):
        doc, entries = _read(plan)
        number = _choose(plan, doc, version)
        locked = locked_version(plan, doc, entries, number)
    target = Path(out) if out is not None else default_path(plan, number)
    if target.suffix.lower() not in (".html", ".htm"):
        raise BadInput(f"--out {target}: the document is HTML; name a .html file")
    if not target.parent.is_dir():
        raise BadInput(f"--out {target}: no such folder {target.parent}")
    printed = target.with_suffix(".pdf") if pdf else None
    tmp = _partial(target, plan_document(locked).encode("utf-8"))
    try:
        if printed is not None:  # printed from the page itself, before either is in place
            from prespec.report.paper import print_pdf

            print_pdf(tmp, printed, footer=footer(locked))
        os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return DescribeResult(target, printed, number, locked.fingerprint, locked.locked_at,
                          locked.timestamp)


# --- verify --document --------------------------------------------------------------------


class DocumentMismatch(IntegrityStop):
    """A document that does not carry a locked version's words."""


def document_text(path: Path) -> tuple[str, bool]:
    """The text of an HTML or PDF document, and whether it is a PDF."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise BadInput(f"--document {path}: no such file") from None
    except IsADirectoryError:
        raise BadInput(f"--document {path}: a folder, not a document") from None
    if data.startswith(b"%PDF-"):
        return _pdf_text(path), True
    try:
        return html_text(data.decode("utf-8")), False
    except UnicodeDecodeError:
        raise DocumentMismatch(f"document {path.name}: neither a PDF nor UTF-8 HTML") from None


def _pdf_text(path: Path) -> str:
    from pypdf import PdfReader
    from pypdf.errors import PdfReadError

    try:
        reader = PdfReader(path)
        return "\n".join(page.extract_text() or "" for page in reader.pages)
    except (PdfReadError, ValueError, KeyError) as exc:
        raise DocumentMismatch(f"document {path.name}: an unreadable PDF ({exc})") from None


_PAGE = re.compile(r"page\d+of\d+")  # "page n of N" of a printed page, whitespace removed


def _squeezed(text: str) -> str:
    """Without whitespace, and in compatibility form (NFKC), as a PDF's text is compared: a
    printed page breaks lines where it must and sets ligatures (``ﬁ`` for ``fi``)."""
    return "".join(unicodedata.normalize("NFKC", text).split())


def _first_difference(found: str, made: str) -> str:
    i = next((k for k, (a, b) in enumerate(zip(found, made, strict=False)) if a != b),
             min(len(found), len(made)))
    start = max(0, i - 30)
    return (f"the document has {found[start:i + 40]!r} where the version's words are "
            f"{made[start:i + 40]!r}")


def check_document(plan: Path, doc: dict[str, Any] | None, entries: list[dict[str, Any]],
                   document: Path) -> str:
    """The line verify prints for a document that carries the words prespec generates from
    the locked version whose fingerprint it names; :class:`DocumentMismatch` otherwise. The
    text is compared, not the bytes: whitespace is collapsed (HTML) or ignored (a PDF, whose
    extracted text breaks lines where the page did)."""
    text, is_pdf = document_text(document)
    name = document.name
    found = NAMED_FINGERPRINT.findall(text if not is_pdf else _squeezed(text))
    if not found:
        raise DocumentMismatch(f"document {name}: carries no plan fingerprint")
    versions = (doc or {}).get("versions") or []
    held = [v for v in versions if v.get("fingerprint") == found[0]]
    if not held:
        raise DocumentMismatch(f"document {name}: names {found[0]}, the fingerprint of no "
                               f"version of {audit.lock_path(plan).name}")
    number = int(held[0]["version"])
    fmt = format_of(text if not is_pdf else _squeezed(text))
    if fmt not in FORMATS:
        known = ", ".join(map(str, sorted(FORMATS)))
        raise DocumentMismatch(
            f"document {name}: written in plan document format {fmt}; this prespec writes "
            f"format {known} and cannot write it again to compare" if fmt is not None else
            f"document {name}: names no plan document format")
    locked = locked_version(plan, doc or {}, entries, number)
    try:
        made = html_text(plan_document(locked))
    except PrespecError as exc:
        raise DocumentMismatch(f"document {name}: version {number} cannot be described "
                               f"again: {exc}") from None
    if is_pdf:  # the footer and page number each page carries are not the document's words
        found_text = _PAGE.sub("", _squeezed(text)).replace(_squeezed(footer(locked)), "")
        made_text = _squeezed(made)
    else:
        found_text, made_text = text, made
    if found_text != made_text:
        raise DocumentMismatch(f"document {name}: its words differ from those of lock version "
                               f"{number}: {_first_difference(found_text, made_text)}")
    kind = "PDF" if is_pdf else "HTML"
    return (f"document: {name} ({kind}) carries the fingerprint of lock version {number}, and "
            "its words are those prespec writes from that version")
