"""Publishing a run: the report folder, written completely and renamed into place, then its
log entry.

plan (from the lock) → ``execute.compute_results`` → here: results.json → tables and figures →
executed notebook and HTML → manifest → folder renamed over its reserved empty name → log entry.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from prespec import audit
from prespec.analysis.families import family_details
from prespec.analysis.results import finish
from prespec.audit.manifest import write_manifest
from prespec.audit.record import commit_entry
from prespec.common.shown import json_text
from prespec.report.tables import write_tables
from prespec.workflow.execute import check_out_folder, check_report_place


@dataclass(frozen=True)
class RunOutcome:
    folder: Path
    results: dict[str, Any]
    entry: dict[str, Any]
    #: the multiplicity procedure of each family of hypotheses (``main``, ``H3 pairwise``)
    procedures: dict[str, str] = field(default_factory=dict)
    #: the authority's time-stamp of results.json (``run --timestamp``), else None
    timestamp: Any = None


def reserve_folder(out: Path, *, numbered: bool) -> tuple[Path, bool]:
    """Claim the report folder by creating it empty; (the folder, whether we created it).

    ``numbered`` (the default location) moves on to ``-2``, ``-3`` … when another run holds
    the name, so that runs started at the same second never share a folder; a folder named
    with ``--out`` must not exist or be empty. The complete report is later renamed over the
    empty folder, which POSIX rename allows.
    """
    if numbered:  # reports/<stem>/: checked again as it is made, then used
        check_report_place(out.parent)
    out.parent.mkdir(parents=True, exist_ok=True)
    if numbered:
        check_report_place(out.parent)
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


PARTIAL = ".partial-"


def partial_prefix(folder: Path) -> str:
    """The name prefix of the temporary folders in which the report for ``folder`` is built."""
    return f".{folder.name}{PARTIAL}"


def results_bytes(results: dict[str, Any]) -> bytes:
    """The bytes of a report's ``results.json`` (what a run's time-stamp stamps)."""
    return (json_text(finish(results), indent=2, allow_nan=False) + "\n").encode("utf-8")


#: Draw the figures in this thread while the notebook's kernel starts and imports in another
#: (``render_notebook(alongside=...)``); False draws them first, then runs the notebook. The
#: report's bytes are the same either way (tests/test_publish_concurrent.py).
FIGURES_WITH_KERNEL = True


def _takes_alongside(render_notebook: Callable[..., Any]) -> bool:
    """Whether the notebook renderer runs the figures beside its kernel (the report room's
    does; a stand-in, as tests use, is called as before, after the figures)."""
    import inspect

    return "alongside" in inspect.signature(render_notebook).parameters


@contextlib.contextmanager
def kernel_ahead() -> Iterator[None]:
    """The report notebook's kernel started now, in a thread, so that it starts (and imports
    what the cells need) while the run reads and reduces its data; shut down on leaving if
    no notebook took it (``render.KernelAhead``). Meanwhile another thread imports what the
    figures and the page need (``render.warm_ahead``). A stand-in renderer (tests) gets
    neither."""
    import prespec.report

    if not (FIGURES_WITH_KERNEL and _takes_alongside(prespec.report.render_notebook)):
        yield
        return
    from prespec.report.render import close_kernel_ahead, start_kernel_ahead, warm_ahead

    ahead = start_kernel_ahead()
    warm_ahead()
    try:
        yield
    finally:
        close_kernel_ahead(ahead)


def build_report(folder: Path, results: dict[str, Any], *, render: bool = True,
                 pdf: bool = False) -> tuple[Path, str]:
    """Write the whole report into a temporary folder beside ``folder``: (it, the manifest hash).

    ``pdf``: also ``report.pdf``, the HTML printed by headless Chromium (``report/paper.py``),
    listed in the manifest like every other file. Nothing is left behind when any step fails:
    the temporary folder is removed.
    """
    from prespec.report import render_notebook, write_figures  # heavy imports, only when reporting

    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=partial_prefix(folder), dir=folder.parent))
    tmp.chmod(0o755)  # mkdtemp makes it private; a report folder is an ordinary folder
    try:
        (tmp / "results.json").write_bytes(results_bytes(results))
        write_tables(tmp, results)
        if render and FIGURES_WITH_KERNEL and _takes_alongside(render_notebook):
            svgs: list[Callable[[], None]] = []  # written while the cells run
            render_notebook(tmp, alongside=lambda: write_figures(results, tmp, svgs_later=svgs),
                            meanwhile=lambda: [write() for write in svgs])
        else:
            write_figures(results, tmp)
            if render:
                render_notebook(tmp)
        if render and pdf:
            from prespec.report.paper import PDF, footer_of, print_pdf

            print_pdf(tmp / "report.html", tmp / PDF, footer=footer_of(results))
        manifest = write_manifest(tmp)
        audit.files.fsync_dir(tmp)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return tmp, manifest


def move_into_place(tmp: Path, folder: Path, manifest: str | None = None) -> None:
    """Rename the complete report over its reserved, empty folder (POSIX rename allows it).

    With ``manifest``, a temporary folder already moved by another process (see
    :func:`complete_interrupted`) is accepted when the folder holds that manifest.
    """
    from prespec.common.canonical import file_sha256

    try:
        os.replace(tmp, folder)
    except FileNotFoundError:
        done = folder / "manifest.json"
        if manifest is None or not done.is_file() or file_sha256(done) != manifest:
            raise
    audit.files.fsync_dir(folder.parent)


def publish(plan_path: Path, out: Path, results: dict[str, Any], *, numbered: bool,
            action: str = "run", details: dict[str, Any] | None = None,
            before_entry: Callable[[], None] | None = None,
            stamp_url: str | None = None, pdf: bool = False) -> RunOutcome:
    """Build the report under a temporary name, append its log entry, then move it into place.

    The log entry is the moment the run counts. Before it, a failure or a stop removes
    everything (the temporary folder, the reserved name and the folders made for it). After
    it, nothing is removed: the only steps left are the head write and one rename; if they
    fail (a full disk) or a run is stopped there (killed, interrupted, power cut), the log
    names a reserved empty folder and the complete report waits beside it under its
    temporary name: ``verify`` checks it there, and the next command on the plan moves it
    into place (:func:`complete_interrupted`) and repairs the head. So no report folder ever
    holds files unless it is complete and named by the log. The entry and the rename are
    made under the folder's lock; ``before_entry``, called under it, may refuse the entry.

    ``stamp_url``: an RFC 3161 authority that time-stamps the SHA-256 of ``results.json``
    first, before anything is written (an unreachable authority or a bad answer stops the
    run here); the token is written beside the plan just before the entry, which names it.
    """
    stamp = None
    if stamp_url is not None:
        from prespec.audit.timestamp import request_token, results_digest

        stamp = request_token(stamp_url, results_digest(results_bytes(results)))
    made = [p for p in reversed(out.parents) if not p.exists()]  # outermost first
    folder, created = reserve_folder(out, numbered=numbered)

    def clean(tmp: Path | None) -> None:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
        if created:
            shutil.rmtree(folder, ignore_errors=True)
        for parent in reversed(made):
            try:
                parent.rmdir()  # only if still empty: another run may use it
            except OSError:
                break

    try:
        tmp, manifest = build_report(folder, results, pdf=pdf)
    except BaseException:
        clean(None)
        raise
    report_rel = Path(os.path.relpath(folder.resolve(), plan_path.parent.resolve())).as_posix()
    with audit.guard.hold(plan_path.parent, exclusive=True):
        token_file, before, undo = _with_token(plan_path, report_rel, stamp, before_entry,
                                               lambda: clean(tmp))
        entry = commit_entry(
            plan_path,
            actor=results["actor"],
            action=action,
            fingerprint=results["plan"],
            data=results["data"],
            details={"report": report_rel, "manifest": manifest, **(details or {}),
                     **({"data_files": results["data_files"]} if "data_files" in results
                        else {}),
                     **family_details(results),
                     **({"engine": results["engine"],
                         "engine_library": results.get("engine_library"),
                         "query": results.get("query")} if "engine" in results else {}),
                     **({"timestamp": stamp.details(token_file)} if stamp and token_file
                        else {})},
            deviations=results["deviations"],
            before=before,
            undo=undo,
            finish=lambda: move_into_place(tmp, folder, manifest),
            recorded=(f"the {action} was recorded in {audit.log_path(plan_path).name} and its "
                      f"report is complete ({report_rel}); the next prespec command completes "
                      "what is left"))
    return RunOutcome(folder, results, entry, timestamp=stamp)


def _with_token(plan_path: Path, report_rel: str, stamp: Any,
                before_entry: Callable[[], None] | None, undo: Callable[[], None]
                ) -> tuple[str | None, Callable[[], None] | None, Callable[[], None]]:
    """With a time-stamp: its file's name, and ``before``/``undo`` that also write it just
    before the entry and remove it when no entry was written. Called under the folder's lock."""
    if stamp is None:
        return None, before_entry, undo
    from prespec.audit.timestamp import remove_token, run_file, write_token

    token_file = run_file(plan_path, report_rel)

    def before() -> None:
        if before_entry is not None:
            before_entry()
        write_token(plan_path, token_file, stamp.der)

    def undo_all() -> None:
        remove_token(plan_path, token_file)
        undo()

    return token_file, before, undo_all


@dataclass(frozen=True)
class Pending:
    """A report the log names whose complete files still wait under their temporary name."""

    entry: dict[str, Any]
    folder: Path
    partial: Path


def pending_report(plan_path: Path, entry: dict[str, Any]) -> Pending | None:
    """The temporary folder holding the report of ``entry`` if the run stopped before its
    rename: the named folder is empty (or absent) and exactly one temporary sibling has the
    manifest the log recorded."""
    from prespec.common.canonical import file_sha256

    details = entry.get("details")
    if not isinstance(details, dict) or not isinstance(details.get("report"), str):
        return None
    folder = plan_path.parent / details["report"]
    if folder.is_dir() and any(folder.iterdir()) or folder.is_symlink():
        return None
    if folder.exists() and not folder.is_dir():
        return None
    parent = folder.parent
    if not parent.is_dir():
        return None
    matches = [p for p in parent.iterdir()
               if p.name.startswith(partial_prefix(folder)) and p.is_dir()
               and not p.is_symlink() and (p / "manifest.json").is_file()
               and file_sha256(p / "manifest.json") == details.get("manifest")]
    return Pending(entry, folder, matches[0]) if len(matches) == 1 else None


def complete_interrupted(plan_path: Path, entries: list[dict[str, Any]]) -> list[Path]:
    """Move into place every report whose run stopped between its log entry and its rename;
    the folders completed. Safe to run by several processes at once (one rename wins)."""
    done = []
    for entry in entries:
        if entry.get("action") not in ("run", "rehearse", "look"):
            continue
        pending = pending_report(plan_path, entry)
        if pending is None:
            continue
        try:
            if not pending.folder.exists():
                pending.folder.mkdir()
            move_into_place(pending.partial, pending.folder, pending.entry["details"]["manifest"])
        except OSError:  # another process got there first
            continue
        done.append(pending.folder)
    return done
