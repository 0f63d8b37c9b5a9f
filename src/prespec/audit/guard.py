"""The study folder's lock: one OS advisory lock (``flock``) on the folder itself.

Every step that writes or repairs a plan's lock file, its audit log or its head holds it
exclusively; every step that reads them to decide something (a run's start, ``verify``)
holds it shared, so that it sees the three files as one writer left them, never half way.
The lock is taken on the folder (opened read-only), so nothing is created in the study and a
monitor with read access alone can take it too. The kernel releases it when the process
ends, however it ends.

It is re-entrant within a thread: a command that holds it exclusively may call a step that
asks for it again (``audit.append`` does). Asking for the exclusive lock while holding only the
shared one is a programming error (``flock`` would drop the shared lock before upgrading).
"""

from __future__ import annotations

import fcntl
import os
import threading
from collections.abc import Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path

_held = threading.local()


def _table() -> dict[str, tuple[bool, int]]:
    table = getattr(_held, "table", None)
    if table is None:
        table = _held.table = {}
    return table


@contextmanager
def hold(folder: Path, *, exclusive: bool) -> Iterator[None]:
    """Hold the lock of ``folder`` (exclusive for writers, shared for readers).

    A folder that cannot be opened (missing, no permission) is not locked: the step that
    follows reports the folder itself.
    """
    key = os.path.realpath(folder)  # one key per folder, however it is named
    table = _table()
    if key in table:
        held_exclusive, depth = table[key]
        if exclusive and not held_exclusive:
            raise RuntimeError(f"{folder}: the exclusive lock asked for under a shared one")
        table[key] = (held_exclusive, depth + 1)
        try:
            yield
        finally:
            table[key] = (held_exclusive, table[key][1] - 1)
        return
    try:
        fd = os.open(key, os.O_RDONLY | os.O_DIRECTORY)
    except OSError:
        yield
        return
    try:
        fcntl.flock(fd, fcntl.LOCK_EX if exclusive else fcntl.LOCK_SH)
        table[key] = (exclusive, 1)
        try:
            yield
        finally:
            del table[key]
    finally:
        os.close(fd)  # closing the last descriptor releases the lock


def writing(plan: Path) -> AbstractContextManager[None]:
    """The exclusive lock of the folder holding ``plan``."""
    return hold(plan.parent, exclusive=True)


def reading(plan: Path) -> AbstractContextManager[None]:
    """The shared lock of the folder holding ``plan``."""
    return hold(plan.parent, exclusive=False)
