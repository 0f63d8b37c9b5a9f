"""The few exception types of prespec and the exit status each maps to.

Exit statuses: 0 done; 2 bad input (plan, data, usage), nothing written;
3 an integrity stop; 1 a bug (any other exception).
"""

from __future__ import annotations

import errno
from typing import NoReturn


class PrespecError(Exception):
    """Base of every error prespec raises on purpose."""

    exit_status = 1


class BadInput(PrespecError):
    """A plan, data file or command line that cannot be used. Exit status 2."""

    exit_status = 2


class PlanError(BadInput):
    """A plan that does not load or validate, located to a file, line and key path.

    ``str(err)`` is the one-line message: ``plan.yaml:14: hypotheses.H2.test: ...``.
    """

    def __init__(self, file: str, line: int | None, path: str | None, message: str) -> None:
        self.file = file
        self.line = line
        self.path = path
        self.message = message
        where = f"{file}:{line}" if line is not None else file
        text = f"{where}: {path}: {message}" if path else f"{where}: {message}"
        super().__init__(text)


class DataError(BadInput):
    """A data file that cannot be analysed as the plan says. Exit status 2."""


class IntegrityStop(PrespecError):
    """A lock, log or report that does not match, or a departure that needs acceptance. Exit 3."""

    exit_status = 3


class NoSpace(BadInput):
    """The disk (or the user's quota) is full: ``no space left on PATH``. Exit status 2.

    Nothing the log names is removed; what a step before the log entry wrote is removed."""


class Unreadable(BadInput):
    """A file prespec must read but may not (permissions). Exit status 2, with its path."""


def is_full(exc: BaseException) -> bool:
    """Whether ``exc`` is a full disk or an exhausted quota."""
    return isinstance(exc, OSError) and exc.errno in {errno.ENOSPC,
                                                      getattr(errno, "EDQUOT", errno.ENOSPC)}


def plain_os_error(exc: OSError, folder: object, also: str = "") -> PrespecError | None:
    """The one-line error for a full disk (``no space left on PATH``) or a file that may not
    be read or written (``PATH: permission denied``); None for any other failure (a bug).
    ``folder``: named when the failed call carries no path (a write to an open file)."""
    where = exc.filename if exc.filename is not None else folder
    if is_full(exc):
        return NoSpace(f"no space left on {where}" + (f"; {also}" if also else
                                                        "; free some space and run the "
                                                        "command again"))
    if isinstance(exc, PermissionError):
        return Unreadable(f"{where}: permission denied" + (f"; {also}" if also else ""))
    return None


def raise_recorded(exc: BaseException, folder: object, what: str) -> NoReturn:
    """Re-raise ``exc``, which stopped a command after its log entry: a full disk or a
    permission becomes its one-line error saying ``what`` was recorded all the same."""
    plain = plain_os_error(exc, folder, what) if isinstance(exc, OSError) else None
    if plain is None:
        raise exc
    raise plain from None
