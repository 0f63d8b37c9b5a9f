"""Canonical JSON (RFC 8785) and SHA-256 helpers shared by the plan, the lock and the log."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import rfc8785


def canonical_json(value: Any) -> bytes:
    """The RFC 8785 (JSON Canonicalization Scheme) bytes of a JSON-able value."""
    return rfc8785.dumps(value)


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def sha256_tag(data: bytes) -> str:
    """``sha256:<hex>``, the form every stored digest takes."""
    return "sha256:" + sha256_hex(data)


def file_sha256(path: Path, chunk: int = 1 << 20) -> str:
    """``sha256:<hex>`` of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            digest.update(block)
    return "sha256:" + digest.hexdigest()
