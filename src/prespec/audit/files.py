"""Where the lock, the log and its head live, and how files are replaced atomically."""

from __future__ import annotations

import os
import secrets
from pathlib import Path


def lock_path(plan: Path) -> Path:
    return plan.with_name(f"{plan.stem}.lock.json")


def log_path(plan: Path) -> Path:
    return plan.with_name(f"{plan.stem}.audit.jsonl")


def head_path(plan: Path) -> Path:
    return plan.with_name(f"{plan.stem}.audit.head")


def fsync_dir(folder: Path) -> None:
    """Make a rename or a new file in ``folder`` durable (no-op where unsupported)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def replace_atomically(path: Path, data: bytes, *, durable: bool = True) -> None:
    """Write ``data`` to a temporary file beside ``path``, fsync it, then rename over ``path``.

    The file is created with mode 0666 less the umask, like every other file prespec writes,
    so that a monitor given read access to the study can read the lock and the head too.
    A failure at any step removes the temporary file; ``path`` is then as it was.
    ``durable=False`` leaves out both fsyncs, for a file that may be lost or come back empty
    after a power cut (a cache whose every use is checked against what it describes).
    """
    while True:
        tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.tmp")
        try:
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
            break
        except FileExistsError:
            continue
    try:
        try:
            view = memoryview(data)
            while view:
                view = view[os.write(fd, view):]
            if durable:
                os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    if durable:
        fsync_dir(path.parent)
