"""The manifest of a report folder: the SHA-256 of every other file in it."""

from __future__ import annotations

import json
from pathlib import Path, PurePosixPath

from prespec.common.canonical import file_sha256

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


def _plain_name(name: str) -> bool:
    """A relative path inside the folder: no absolute path, no ``..``, no empty part."""
    parts = PurePosixPath(name).parts
    return bool(parts) and not name.startswith("/") and "\\" not in name \
        and all(p not in ("", ".", "..") for p in parts) and PurePosixPath(*parts).as_posix() == name


def check_manifest(folder: Path) -> str | None:
    """The first way ``folder`` differs from its manifest, or None when every file matches.

    Links are refused (a report folder holds plain files and folders only), and so are
    manifest names that point outside the folder.
    """
    path = folder / MANIFEST
    if folder.is_symlink():
        return "the report folder is a symbolic link"
    links = sorted(p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_symlink())
    if links:
        return f"{links[0]} is a symbolic link (a report holds plain files only)"
    if not path.is_file():
        return "manifest.json is missing"
    try:
        listed = json.loads(path.read_text("utf-8"))["files"]
        if not isinstance(listed, dict) or not all(isinstance(v, str) for v in listed.values()):
            raise TypeError
    except (UnicodeDecodeError, json.JSONDecodeError, KeyError, TypeError):
        return "manifest.json is not readable"
    outside = sorted(name for name in listed if not _plain_name(name))
    if outside:
        return f"manifest.json names {outside[0]!r}, a path outside the report folder"
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
