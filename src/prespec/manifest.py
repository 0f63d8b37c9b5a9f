"""The manifest of a report folder: the SHA-256 of every other file in it."""

from __future__ import annotations

import json
from pathlib import Path

from .canonical import file_sha256

MANIFEST = "manifest.json"


def folder_files(folder: Path) -> list[str]:
    """Every regular file under ``folder`` except the manifest, as sorted POSIX paths."""
    return sorted(
        p.relative_to(folder).as_posix()
        for p in folder.rglob("*")
        if p.is_file() and p.relative_to(folder).as_posix() != MANIFEST
    )


def build_manifest(folder: Path) -> dict[str, object]:
    return {"files": {name: file_sha256(folder / name) for name in folder_files(folder)}}


def write_manifest(folder: Path) -> str:
    """Write ``manifest.json`` and return its own ``sha256:`` digest (stored in the log)."""
    path = folder / MANIFEST
    path.write_text(json.dumps(build_manifest(folder), indent=2) + "\n", encoding="utf-8")
    return file_sha256(path)


def check_manifest(folder: Path) -> str | None:
    """The first way ``folder`` differs from its manifest, or None when every file matches."""
    path = folder / MANIFEST
    if not path.is_file():
        return "manifest.json is missing"
    try:
        listed = json.loads(path.read_text("utf-8"))["files"]
        if not isinstance(listed, dict):
            raise TypeError
    except (UnicodeDecodeError, json.JSONDecodeError, KeyError, TypeError):
        return "manifest.json is not readable"
    present = folder_files(folder)
    for name in present:
        if name not in listed:
            return f"{name} is not in the manifest (added)"
    for name, digest in sorted(listed.items()):
        target = folder / name
        if not target.is_file():
            return f"{name} is in the manifest but missing"
        if file_sha256(target) != digest:
            return f"{name} does not match its manifest hash (changed)"
    return None
