"""The manifest of a report folder: the SHA-256 of every other file in it."""

from __future__ import annotations

import json
import os
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from prespec.common.canonical import file_sha256, sha256_tag

MANIFEST = "manifest.json"


def _walk(folder: str, prefix: str = "") -> Iterator[tuple[str, os.DirEntry[str]]]:
    """Everything under ``folder`` with its POSIX path relative to it, as ``rglob("*")``
    finds it (links are not followed into; an unreadable folder is skipped), from one
    ``scandir`` per folder: the entry's type comes with it, so no file is stat'ed twice."""
    try:
        with os.scandir(folder) as listing:
            found = list(listing)
    except (FileNotFoundError, NotADirectoryError, PermissionError):
        return
    for entry in found:
        rel = prefix + entry.name
        yield rel, entry
        if entry.is_dir(follow_symlinks=False):
            yield from _walk(entry.path, rel + "/")


def _read(path: str) -> bytes:
    """A file's bytes, through the file descriptor alone (a third of ``Path.read_bytes``'s
    cost on a small file, which verify reads twice per report)."""
    fd = os.open(path, os.O_RDONLY)
    try:
        want = os.fstat(fd).st_size + 1  # one more than its size: a short read is the end
        parts = [os.read(fd, want)]
        while len(parts[-1]) == want:  # it grew since: read on to the end
            parts.append(os.read(fd, want))
        return b"".join(parts)
    finally:
        os.close(fd)


def _files(found: list[tuple[str, os.DirEntry[str]]]) -> list[str]:
    """The regular files (links followed, as ``Path.is_file``) except the manifest, sorted."""
    return sorted(rel for rel, entry in found if rel != MANIFEST and entry.is_file())


def folder_files(folder: Path) -> list[str]:
    """Every regular file under ``folder`` except the manifest, as sorted POSIX paths."""
    return _files(list(_walk(str(folder))))


def build_manifest(folder: Path) -> dict[str, object]:
    return {"files": {name: file_sha256(folder / name) for name in folder_files(folder)}}


def write_manifest(folder: Path) -> str:
    """Write ``manifest.json`` and return its own ``sha256:`` digest (stored in the log)."""
    path = folder / MANIFEST
    path.write_text(json.dumps(build_manifest(folder), indent=2) + "\n", encoding="utf-8")
    return file_sha256(path)


def _plain_name(name: str) -> bool:
    """A relative path inside the folder, in its one normal form: not absolute, no ``\\``,
    no ``.``, ``..`` or empty part (so no ``//`` and no trailing ``/`` either)."""
    return bool(name) and not name.startswith("/") and "\\" not in name \
        and all(p not in ("", ".", "..") for p in name.split("/"))


@dataclass(frozen=True)
class FolderCheck:
    """What :func:`check_folder` found: the first way the folder differs from its manifest
    (None when every file matches), the ``sha256:`` of ``manifest.json`` as it was read, and
    the bytes of the files asked for, as they were hashed (so that what is read next is what
    was checked, and nothing is read twice)."""

    problem: str | None
    manifest: str | None = None
    kept: dict[str, bytes] = field(default_factory=dict)
    #: everything under the folder as the check found it (relative POSIX path, entry)
    entries: tuple[tuple[str, os.DirEntry[str]], ...] = ()


def check_folder(folder: Path, keep: tuple[str, ...] = (), *, not_a_link: bool = False
                 ) -> FolderCheck:
    """How ``folder`` differs from its manifest (the first way, or None when every file
    matches; links are refused, and so are manifest names that point outside the folder),
    keeping the manifest's digest, the bytes of the files named in ``keep`` (those the manifest
    lists) and the folder's entries for the caller.
    ``not_a_link``: the caller has just seen (``lstat``) that ``folder`` is a real folder."""
    if not not_a_link and folder.is_symlink():
        return FolderCheck("the report folder is a symbolic link")
    found = tuple(_walk(str(folder)))
    kept: dict[str, bytes] = {}
    problem, raw = _against_manifest(folder, found, keep, kept)
    return FolderCheck(problem, None if problem else sha256_tag(raw), kept if not problem else {},
                       found)


def _against_manifest(folder: Path, found: tuple[tuple[str, os.DirEntry[str]], ...],
                      keep: tuple[str, ...], kept: dict[str, bytes]) -> tuple[str | None, bytes]:
    """The first way the files ``found`` in ``folder`` differ from its manifest (or None),
    and the manifest's bytes; the bytes of the files in ``keep`` go into ``kept``."""
    links = sorted(rel for rel, entry in found if entry.is_symlink())
    if links:
        return f"{links[0]} is a symbolic link (a report holds plain files only)", b""
    top = str(folder)
    path = os.path.join(top, MANIFEST)
    if not any(rel == MANIFEST and entry.is_file() for rel, entry in found) \
            and not Path(path).is_file():  # (not listed: an unreadable folder on the way)
        return "manifest.json is missing", b""
    raw = _read(path)
    try:
        listed = json.loads(raw.decode("utf-8"))["files"]
        if not isinstance(listed, dict) or not all(isinstance(v, str) for v in listed.values()):
            raise TypeError
    except (UnicodeDecodeError, json.JSONDecodeError, KeyError, TypeError):
        return "manifest.json is not readable", raw
    outside = sorted(name for name in listed if not _plain_name(name))
    if outside:
        return f"manifest.json names {outside[0]!r}, a path outside the report folder", raw
    present = _files(list(found))
    for name in present:
        if name not in listed:
            return f"{name} is not in the manifest (added)", raw
    seen = set(present)
    for name, digest in sorted(listed.items()):
        target = os.path.join(top, name)
        if name not in seen and not Path(target).is_file():
            return f"{name} is in the manifest but missing", raw
        try:
            if name in keep:
                kept[name] = _read(target)
                got = sha256_tag(kept[name])
            else:
                got = file_sha256(Path(target))
        except FileNotFoundError:  # removed since the folder was listed
            return f"{name} is in the manifest but missing", raw
        if got != digest:
            return f"{name} does not match its manifest hash (changed)", raw
    return None, raw
