"""The public Python interface of prespec: one function per command.

Every function takes paths and plain values, returns a small result, and raises a
``PrespecError`` subclass for anything the user must fix (see ``errors.py``). This module only
names them; each step lives in its room: ``workflow/`` (check, lock, amend, history, rehearse,
run, design, verify: the only place that knows the order of the steps), ``audit/`` (the key
pair) and ``demo/``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prespec.audit.signing import new_key as _new_key
from prespec.workflow.base import resolve_actor
from prespec.workflow.design import design
from prespec.workflow.lock import (
    SCHEMAS,
    CheckResult,
    LockResult,
    amend,
    check,
    history,
    lock,
    schema,
)
from prespec.workflow.overrides import apply_overrides
from prespec.workflow.publish import RunOutcome
from prespec.workflow.rehearse import rehearse
from prespec.workflow.run import run
from prespec.workflow.verify import VerifyResult, verify

__all__ = [
    "SCHEMAS",
    "CheckResult",
    "LockResult",
    "RunOutcome",
    "VerifyResult",
    "amend",
    "apply_overrides",
    "check",
    "demo",
    "design",
    "history",
    "lock",
    "new_key",
    "rehearse",
    "resolve_actor",
    "run",
    "schema",
    "verify",
]


def new_key(name: str | Path) -> Any:
    """Write an Ed25519 key pair ``NAME.key`` (mode 0600) and ``NAME.pub``."""
    return _new_key(name)


def demo(folder: str | Path = "prespec-demo", *, actor: str | None = None) -> Path:
    """Write the invented demo study, lock and run it; return the path of report.html."""
    from prespec.demo.wound import write_demo

    plan_path, data_path = write_demo(Path(folder))
    lock(plan_path, actor=actor)
    outcome = run(plan_path, data_path, actor=actor)
    return outcome.folder / "report.html"
