"""The few exception types of prespec and the exit status each maps to.

Exit statuses: 0 done; 2 bad input (plan, data, usage), nothing written;
3 an integrity stop; 1 a bug (any other exception).
"""

from __future__ import annotations


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
