"""The integrity trail: the lock file, the hash-chained audit log and its head."""

from . import guard
from .files import head_path, lock_path, log_path, replace_atomically
from .lockfile import latest, read_lock, write_lock
from .log import GENESIS, append, check_chain, check_head, entry_hash, read_log, utc_now

__all__ = [
    "GENESIS",
    "append",
    "check_chain",
    "check_head",
    "entry_hash",
    "guard",
    "head_path",
    "latest",
    "lock_path",
    "log_path",
    "read_lock",
    "read_log",
    "replace_atomically",
    "utc_now",
    "write_lock",
]
