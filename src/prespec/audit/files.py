"""Where the lock, the log and its head live, and how files are replaced atomically."""

from __future__ import annotations

import os
import tempfile
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


def replace_atomically(path: Path, data: bytes) -> None:
    """Write ``data`` to a temporary file beside ``path``, fsync it, then rename over ``path``."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    fsync_dir(path.parent)
