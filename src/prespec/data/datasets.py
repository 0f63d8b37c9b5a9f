"""Statistical dataset files: transport files (``.xpt``, versions 5 and 8) and the dataset
files ``.sas7bdat``, ``.sav``, ``.zsav`` and ``.dta``, read with pyreadstat.

The format is chosen by the extension. What a cell holds is the value the file stores, never
its value label: a code ``1`` labelled ``placebo`` is read as the number 1, so a plan matches
it by ``1`` (docs/data-formats.md). Character cells are text (a blank one is ``""``); numeric
cells are numbers, a missing one (including a value the file declares as missing) is blank;
a date or time is its stored number (days or seconds since the format's origin), as stored.

Column labels and value labels are read from the file's metadata alone (:func:`labels`), for
the data dictionary. Every cell is converted by one function (:func:`_cells`), whether the
pandas engine reads the columns whole (:func:`read_dataset`) or the duckdb engine has them
copied, a chunk of rows at a time (a row offset and limit; for a transport file, a window of
its fixed-width rows, :class:`_Window`), into a Parquet file it then reads
(:func:`stage_parquet`); so both engines see the same cells.

A file the reader cannot read as its extension says (another format, a truncated file, a
damaged one) is a one-line :class:`~prespec.errors.DataError`; so is one that holds fewer rows
than its header declares.
"""

from __future__ import annotations

import io
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from prespec.common.matching import as_text

from ..errors import DataError

#: The extensions read here, with the pyreadstat function that reads each and how messages
#: name the format.
FORMATS: dict[str, tuple[str, str]] = {
    ".xpt": ("read_xport", "transport file"),
    ".sas7bdat": ("read_sas7bdat", "dataset file"),
    ".sav": ("read_sav", "dataset file"),
    ".zsav": ("read_sav", "compressed dataset file"),
    ".dta": ("read_dta", "dataset file"),
}
#: Rows per chunk when a file is copied for the duckdb engine (about 10 MB a column of
#: numbers): memory stays bounded by the chunk, never by the file.
CHUNK_ROWS = 250_000


def is_dataset(path: Path | str) -> bool:
    """True when the extension is one of :data:`FORMATS`."""
    return Path(path).suffix.lower() in FORMATS


def _reader(path: Path) -> Callable[..., tuple[pd.DataFrame, Any]]:
    import pyreadstat

    return getattr(pyreadstat, FORMATS[path.suffix.lower()][0])  # type: ignore[no-any-return]


def _unreadable(path: Path, shown: str, exc: BaseException) -> DataError:
    text = str(exc).strip()
    first = text.splitlines()[0] if text else type(exc).__name__
    suffix = path.suffix.lower()
    return DataError(f"{shown}: cannot read the file as a {suffix} {FORMATS[suffix][1]}: it is "
                     f"another format, truncated or damaged (the reader says: {first})")


def _call(path: Path, shown: str, reader_input: Any = None,
          **options: Any) -> tuple[Any, Any]:
    """The reader on ``path`` (or on ``reader_input``, a file-like view of it) with stored
    values (no date conversion, no value labels); any failure is one line."""
    try:
        return _reader(path)(str(path) if reader_input is None else reader_input,
                             disable_datetime_conversion=True, **options)
    except (MemoryError, KeyboardInterrupt):
        raise
    except Exception as exc:  # noqa: BLE001 - pyreadstat raises several types for a bad file
        raise _unreadable(path, shown, exc) from None


@dataclass(frozen=True)
class Labels:
    """The labels a dataset file declares: the file's, each column's, each value's.

    ``values`` maps a column to ``{stored value as text (matching.as_text): label}``."""

    file: str | None = None
    columns: dict[str, str] = field(default_factory=dict)
    values: dict[str, dict[str, str]] = field(default_factory=dict)

    def combined(self, other: Labels) -> Labels:
        """These labels with ``other``'s for the columns these do not label (a unit table's
        and an event table's, for one dictionary): where both label a column, these win."""
        return Labels(self.file or other.file, {**other.columns, **self.columns},
                      {**other.values, **self.values})


@dataclass(frozen=True)
class Metadata:
    """What the file's header says: its columns in order, each column's kind (``text`` or
    ``float``), the rows it declares (None when the format does not say) and its labels."""

    names: list[str]
    kinds: dict[str, str]
    rows: int | None
    labels: Labels
    row_bytes: int = 0  # the bytes of one row as stored (a transport file's check)


def metadata(path: Path, shown: str | None = None) -> Metadata:
    """The file's header only (no rows read)."""
    shown = shown or str(path)
    _, meta = _call(path, shown, metadataonly=True)
    names = [str(n) for n in meta.column_names]
    types = meta.readstat_variable_types or {}
    kinds = {n.strip(): "text" if types.get(n) == "string" else "float" for n in names}
    column_labels = {str(k).strip(): str(v) for k, v in
                     (meta.column_names_to_labels or {}).items() if v not in (None, "")}
    value_labels = {str(k).strip(): {as_text(code): str(label) for code, label in v.items()}
                    for k, v in (meta.variable_value_labels or {}).items() if v}
    rows = meta.number_rows
    declared = int(rows) if rows is not None and int(rows) >= 0 else None
    file_label = meta.file_label or None
    widths = getattr(meta, "variable_storage_width", None) or {}
    return Metadata(names, kinds, declared, Labels(file_label, column_labels, value_labels),
                    sum(int(w) for w in widths.values()))


RECORD = 80  # a transport file is a sequence of 80-byte records
_OBS_HEADER = b"HEADER RECORD*******OBS"
_MEMBER_HEADER = b"HEADER RECORD*******MEMB"


def _data_start(path: Path) -> tuple[int, int | None] | None:
    """(the offset of a transport file's rows, the rows its header declares when it does:
    version 8 writes the count into the record that opens the rows), or None when no such
    record is found."""
    with path.open("rb") as handle:
        at = 0
        while record := handle.read(RECORD):
            if len(record) < RECORD:
                return None
            if record.startswith(_OBS_HEADER):
                # version 5 fills the field with 30 zeros; version 8 writes the count there
                count = record[48:].strip()
                declared = (record.startswith(_OBS_HEADER + b"V8") and count.isdigit()
                            and count != b"0" * 30)
                return at + RECORD, int(count) if declared else None
            at += RECORD
    return None


def check_transport(path: Path, shown: str, rows: int, meta: Metadata) -> None:
    """A transport file holds whole 80-byte records, and after its rows only the blanks that
    fill the last record (version 8 also declares the number of rows). The reader takes a
    file cut short at a row's end for a shorter file, so a cut is found here: one line."""
    size = path.stat().st_size
    cut = DataError(f"{shown}: the transport file is truncated or damaged ({size} bytes, "
                    f"{rows} whole rows of {meta.row_bytes} bytes read, then bytes that are "
                    "neither a row nor the blanks that end the file)")
    if size % RECORD:
        raise cut
    found = _data_start(path)
    if found is None or meta.row_bytes <= 0:
        raise cut
    start, declared = found
    if declared is not None and declared != rows:
        raise DataError(f"{shown}: the file declares {declared} rows but holds {rows}; it is "
                        "truncated or damaged")
    if _another_member(path, start):
        raise DataError(f"{shown}: the transport file holds more than one dataset; give "
                        "prespec a file with one")
    end = start + rows * meta.row_bytes
    with path.open("rb") as handle:
        handle.seek(end)
        tail = handle.read(RECORD)
    if len(tail) >= RECORD or tail.strip(b" "):
        raise cut


def _another_member(path: Path, start: int) -> bool:
    """True when a record after ``start`` opens another member (dataset): the reader would
    read its header records as rows of the first."""
    block = 1 << 22  # a multiple of RECORD
    with path.open("rb") as handle:
        handle.seek(start)
        at = start
        while chunk := handle.read(block + len(_MEMBER_HEADER)):
            found = chunk.find(_MEMBER_HEADER)
            while found >= 0:
                if (at + found - start) % RECORD == 0:
                    return True
                found = chunk.find(_MEMBER_HEADER, found + 1)
            at += block
            handle.seek(at)
    return False


def labels(path: Path, shown: str | None = None) -> Labels:
    """The labels of a dataset file (from its header)."""
    return metadata(path, shown).labels


def _cells(values: Any, kind: str) -> np.ndarray:
    """One column of a chunk as the engines see it: text as an object array of Python strings
    (a blank cell ``""``), numbers as float64 with NaN for a missing value."""
    if kind == "text":
        out = np.array(values, dtype=object)
        out[pd.isna(out)] = ""
        return out
    return np.array([np.nan if v is None else v for v in values] if isinstance(values, list)
                    else values, dtype=np.float64)


def _as_objects(cells: np.ndarray) -> np.ndarray:
    """A converted column as the pandas engine holds cells: numbers as Python floats, None
    for a missing one; text unchanged."""
    if cells.dtype == object:
        return cells
    out = cells.astype(object)
    out[np.isnan(cells)] = None
    return out


def _columns(meta: Metadata, wanted: Iterable[str] | None) -> list[str]:
    """The file's own names (untrimmed) of the trimmed names ``wanted`` (all when None)."""
    if wanted is None:
        return list(meta.names)
    keep = set(wanted)
    return [n for n in meta.names if n.strip() in keep]


class _Window(io.RawIOBase):
    """A transport file as the reader sees it when given rows ``first`` to ``first + n`` only:
    the file's own header records, then those rows' bytes (their count written into a
    version 8 header), then the blanks that end the last record; or, for the last window
    (``n`` None), every byte from row ``first`` to the end of the file, padding included. Rows are fixed
    width, so a window costs its own rows, where a row offset makes the reader parse every
    row before it."""

    def __init__(self, path: Path, head: bytes, start: int, row_bytes: int, first: int,
                 n: int | None) -> None:
        super().__init__()
        with path.open("rb") as handle:
            handle.seek(start + first * row_bytes)
            body = handle.read(-1 if n is None else n * row_bytes)
        if n is not None:
            body += b" " * (-(len(head) + len(body)) % RECORD)
        self._bytes = io.BytesIO(head + body)

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def read(self, size: int | None = -1) -> bytes:
        return self._bytes.read(-1 if size is None else size)

    def seek(self, pos: int, whence: int = 0) -> int:
        return self._bytes.seek(pos, whence)

    def tell(self) -> int:
        return self._bytes.tell()


def _windowed_head(path: Path, start: int, declared: int | None, n: int | None,
                   rows_left: int | None) -> bytes:
    """The header records of a transport file, with a version 8 row count set to the
    window's rows (``n``, or the rows left for the last window)."""
    with path.open("rb") as handle:
        head = bytearray(handle.read(start))
    if declared is not None:
        count = n if n is not None else rows_left
        head[start - RECORD + 48:start] = f"{count:>15}".ljust(32).encode("ascii")
    return bytes(head)


def _next_filled_row(path: Path, start: int, row_bytes: int, after: int,
                     size: int) -> int | None:
    """The index of the first row from ``after`` on whose bytes are not all blanks, or None
    when every row to the end of the file is blank (the reader drops such rows at a file's
    end, taking them for the blanks that fill its last record)."""
    batch = max(1, (1 << 20) // row_bytes)
    with path.open("rb") as handle:
        at = after
        while start + at * row_bytes < size:
            handle.seek(start + at * row_bytes)
            block = handle.read(batch * row_bytes)
            for k in range(len(block) // row_bytes):
                if block[k * row_bytes:(k + 1) * row_bytes].strip(b" "):
                    return at + k
            if len(block) < batch * row_bytes:
                return None
            at += batch
    return None


def _transport_chunks(path: Path, shown: str, meta: Metadata, names: list[str],
                      chunk_rows: int) -> Iterator[tuple[int, dict[str, Any]]]:
    """(rows, the reader's lists) of each window of ``chunk_rows`` rows of a transport file.
    A window ends with a row that is not all blanks (one more than it keeps, or more when
    rows of blanks follow the chunk), so that such rows are never taken for the blanks that
    end a file: only at the file's real end does the reader drop them, as it does reading
    the whole file."""
    found = _data_start(path)
    if found is None or meta.row_bytes <= 0:
        return  # check_transport says what is wrong
    start, declared = found
    size = path.stat().st_size
    first = 0
    while True:
        filled = _next_filled_row(path, start, meta.row_bytes, first + chunk_rows, size)
        n = None if filled is None else filled - first + 1
        rows_left = None if declared is None else declared - first
        window = _Window(path, _windowed_head(path, start, declared, n, rows_left), start,
                         meta.row_bytes, first, n)
        got, _ = _call(path, shown, reader_input=window, usecols=names, output_format="dict")
        kept = len(next(iter(got.values()))) if got else 0
        if n is not None:
            if kept != n:
                raise DataError(f"{shown}: the transport file could not be read in windows of "
                                f"{chunk_rows} rows ({kept} rows read where {n} were given); "
                                "it is damaged")
            got = {c: v[:chunk_rows] for c, v in got.items()}
            kept = chunk_rows
        yield kept, got
        first += kept
        if n is None:
            return


def _chunks(path: Path, shown: str, meta: Metadata, names: list[str],
            chunk_rows: int) -> Iterator[dict[str, np.ndarray]]:
    """The columns ``names``, ``chunk_rows`` rows at a time (row offset and limit; a
    transport file by windows of its rows, :class:`_Window`), each converted by
    :func:`_cells`; the rows read must be those the header declares."""
    offset = 0
    if path.suffix.lower() == ".xpt":
        for n, found in _transport_chunks(path, shown, meta, names, chunk_rows):
            if n:
                yield {str(c).strip(): _cells(v, meta.kinds[str(c).strip()])
                       for c, v in found.items()}
            offset += n
        check_transport(path, shown, offset, meta)
        return
    while True:
        # the reader's plain lists (output_format "dict") are several times quicker to build
        # than its frame
        found, _ = _call(path, shown, usecols=names, row_offset=offset, row_limit=chunk_rows,
                         output_format="dict")
        n = len(next(iter(found.values()))) if found else 0
        if n == 0:
            break
        yield {str(c).strip(): _cells(v, meta.kinds[str(c).strip()]) for c, v in found.items()}
        offset += n
        if n < chunk_rows or (meta.rows is not None and offset >= meta.rows):
            break
    if meta.rows is not None and offset != meta.rows:
        raise DataError(f"{shown}: the file declares {meta.rows} rows but holds {offset}; it "
                        "is truncated or damaged")
    check_closing_tag(path, shown)


def check_closing_tag(path: Path, shown: str) -> None:
    """A dataset file written in tagged sections (it opens with ``<name>``, as the newer
    ``.dta`` versions do) must end with the closing ``</name>``: the reader stops after the
    rows, so a file cut in the sections after them would otherwise pass."""
    with path.open("rb") as handle:
        head = handle.read(64)
        if not head.startswith(b"<") or b">" not in head:
            return
        name = head[1:head.index(b">")]
        if not name or not all(32 < b < 127 and b not in b"<>/" for b in name):
            return
        closing = b"</" + name + b">"
        size = path.stat().st_size
        handle.seek(max(0, size - len(closing) - 2))
        tail = handle.read()
    if not tail.rstrip(b"\r\n").endswith(closing):
        raise DataError(f"{shown}: the file does not end with the section that closes it "
                        f"({closing.decode('ascii', 'replace')}); it is truncated or damaged")


def read_dataset(path: Path, columns: Iterable[str] | None, shown: str) -> pd.DataFrame:
    """The columns ``columns`` (trimmed names; all when None) of every row, cells converted by
    :func:`_cells` (object columns: str, float or None)."""
    meta = metadata(path, shown)
    names = _columns(meta, columns)
    parts = list(_chunks(path, shown, meta, names, max(CHUNK_ROWS, meta.rows or 0)))
    return pd.DataFrame({n.strip(): pd.Series(
        _as_objects(np.concatenate([p[n.strip()] for p in parts])) if parts else [],
        dtype=object) for n in names})


def stage_parquet(path: Path, columns: Iterable[str] | None, target: Path, shown: str,
                  chunk_rows: int | None = None) -> int:
    """Copy the columns ``columns`` (all when None) of ``path`` into the Parquet file
    ``target``, ``chunk_rows`` rows at a time; text as strings, numbers as doubles. Returns
    the rows copied. Only one chunk is in memory at a time."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    meta = metadata(path, shown)
    names = [n.strip() for n in _columns(meta, columns)]
    schema = pa.schema([(n, pa.string() if meta.kinds[n] == "text" else pa.float64())
                        for n in names])
    rows = 0
    chunk_rows = chunk_rows or CHUNK_ROWS
    with pq.ParquetWriter(str(target), schema) as writer:
        for chunk in _chunks(path, shown, meta, [n for n in meta.names if n.strip() in
                                                 set(names)], chunk_rows):
            arrays = [pa.array(chunk[n], type=pa.string()) if meta.kinds[n] == "text" else
                      pa.array(chunk[n], type=pa.float64(), mask=np.isnan(chunk[n]))
                      for n in names]
            writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
            rows += len(arrays[0]) if arrays else 0
    return rows
