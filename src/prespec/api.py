"""The public Python interface of prespec: one function per command.

Every function takes paths and plain values, returns a small result, and raises a
``PrespecError`` subclass for anything the user must fix (see ``errors.py``). This module only
names them; each step lives in its room: ``workflow/`` (check, lock, amend, history, rehearse,
run, design, describe, verify: the only place that knows the order of the steps), ``audit/``
(the key pair) and ``demo/``.
"""

from __future__ import annotations

import importlib
from pathlib import Path
from typing import TYPE_CHECKING, Any

#: Where each public name lives. They are loaded on first use, so that ``prespec check`` loads
#: the plan room and not the engines, the statistics or the report (tests/test_rooms.py).
_WHERE = {
    "SCHEMAS": "prespec.workflow.lock",
    "CheckResult": "prespec.workflow.lock",
    "LockResult": "prespec.workflow.lock",
    "amend": "prespec.workflow.lock",
    "check": "prespec.workflow.lock",
    "history": "prespec.workflow.lock",
    "lock": "prespec.workflow.lock",
    "schema": "prespec.workflow.lock",
    "resolve_actor": "prespec.workflow.base",
    "design": "prespec.workflow.design",
    "DescribeResult": "prespec.workflow.describe",
    "describe": "prespec.workflow.describe",
    "apply_overrides": "prespec.workflow.overrides",
    "RunOutcome": "prespec.workflow.publish",
    "rehearse": "prespec.workflow.rehearse",
    "report": "prespec.workflow.paper",
    "run": "prespec.workflow.run",
    "VerifyResult": "prespec.workflow.verify",
    "verify": "prespec.workflow.verify",
}

if TYPE_CHECKING:
    from prespec.workflow.base import resolve_actor
    from prespec.workflow.describe import DescribeResult, describe
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
    from prespec.workflow.paper import report
    from prespec.workflow.publish import RunOutcome
    from prespec.workflow.rehearse import rehearse
    from prespec.workflow.run import run
    from prespec.workflow.verify import VerifyResult, verify


def __getattr__(name: str) -> Any:
    if name not in _WHERE:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(_WHERE[name]), name)
    globals()[name] = value  # once loaded, an ordinary attribute (monkeypatch sees it)
    return value


def __dir__() -> list[str]:
    return sorted([*globals(), *_WHERE])


__all__ = [
    "SCHEMAS",
    "CheckResult",
    "DescribeResult",
    "LockResult",
    "RunOutcome",
    "VerifyResult",
    "amend",
    "apply_overrides",
    "check",
    "demo",
    "describe",
    "design",
    "history",
    "lock",
    "new_key",
    "rehearse",
    "report",
    "resolve_actor",
    "run",
    "schema",
    "verify",
]


def new_key(name: str | Path) -> Any:
    """Write an Ed25519 key pair ``NAME.key`` (mode 0600) and ``NAME.pub``."""
    from prespec.audit.signing import new_key as _new_key

    return _new_key(name)


def demo(folder: str | Path = "prespec-demo", *, actor: str | None = None) -> Path:
    """Write the invented demo study, lock and run it; return the path of report.html."""
    from prespec.demo.wound import write_demo
    from prespec.workflow.lock import lock
    from prespec.workflow.run import run

    plan_path, data_path = write_demo(Path(folder))
    lock(plan_path, actor=actor)
    outcome = run(plan_path, data_path, actor=actor)
    return outcome.folder / "report.html"
