"""The data fingerprint of a source that is not one file: a hash over the rows it reads.

Definition (the same in every engine): for each source row, a line joins the trimmed text of
the id and of every other column the analysis reads (``CountRequest.read`` order; an empty
field for a blank cell; numbers as ``matching.as_text`` writes them) with ``\\x1f``; the lines
are ordered by the id's text, then by the line, comparing UTF-8 bytes; the fingerprint is
``sha256:`` and the hex SHA-256 of the lines, each followed by ``\\n``, in UTF-8. So changing
one cell the analysis reads changes it, and the order of the rows in the source does not.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable
from typing import Any

import pandas as pd

from prespec.common.matching import as_text, is_blank

from .base import CountRequest
from .compiler import FIELD_SEPARATOR


class LineHasher:
    """SHA-256 of lines fed in order, each terminated by a newline."""

    def __init__(self) -> None:
        self._hash = hashlib.sha256()

    def update(self, lines: Iterable[str]) -> None:
        chunk = "".join(f"{line}\n" for line in lines)
        self._hash.update(chunk.encode("utf-8"))

    def tag(self) -> str:
        return "sha256:" + self._hash.hexdigest()


def _field(cell: Any) -> str:
    return "" if is_blank(cell) else as_text(cell)


def frame_row_hash(frame: pd.DataFrame, request: CountRequest) -> str:
    """The fingerprint of the rows of a frame of raw cells (the reference definition)."""
    columns = list(request.read)
    texts = [[_field(c) for c in frame[col]] for col in columns]
    lines = [FIELD_SEPARATOR.join(parts) for parts in zip(*texts, strict=True)]
    order = sorted(range(len(lines)),
                   key=lambda i: (texts[0][i].encode("utf-8"), lines[i].encode("utf-8")))
    hasher = LineHasher()
    hasher.update(lines[i] for i in order)
    return hasher.tag()
