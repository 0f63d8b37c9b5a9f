"""Reading a data file (CSV as text, Parquet, or a statistical dataset file) into a DataFrame
of raw cells.

Only the columns a plan names are parsed: the header is read on its own (the csv module for a
CSV, the schema for a Parquet file), and pandas is given the positions of the named columns.
A file with 100,000 columns in its header costs what a file with the named columns costs,
instead of one pandas column object per header name. Transport and dataset files (``.xpt``,
``.sas7bdat``, ``.sav``, ``.zsav``, ``.dta``) are read by ``datasets.py``, their named columns
only.

:func:`open_data_file` is the one door every engine uses to a data file of any supported
format: the frame for pandas, or a CSV or Parquet file that an SQL reader can scan.
"""

from __future__ import annotations

import codecs
import csv
from collections.abc import Iterable, Iterator, Mapping
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa

from prespec.common.departures import listed

from ..errors import DataError
from . import datasets

#: How many column names a missing-column message lists before "… and N more".
COLUMNS_SHOWN = 20
#: Separators a CSV written by a spreadsheet in another locale may use instead of a comma.
OTHER_SEPARATORS = {";": "';' (semicolon)", "\t": "a tab", "|": "'|' (vertical bar)"}
#: The longest field the csv module reads here (its default, 131,072 characters, is a guard
#: against runaway quotes; pandas has no such limit, and a full read did not either).
FIELD_LIMIT = 1 << 30


@contextmanager
def _csv_reader(path: Path) -> Iterator[Any]:
    """A csv reader over ``path`` (UTF-8, a byte-order mark skipped) with FIELD_LIMIT in force
    while it is open (the limit is process-wide, so it is set back afterwards)."""
    before = csv.field_size_limit(FIELD_LIMIT)
    try:
        with path.open(encoding="utf-8-sig", newline="") as handle:
            yield csv.reader(handle)
    finally:
        csv.field_size_limit(before)


def separator_hint(present: list[str]) -> str:
    """``; the header looks separated by ';' …`` when the header is one column that holds
    another separator (a semicolon, tab or bar), else ``""``."""
    if len(present) != 1:
        return ""
    counts = {sep: present[0].count(sep) for sep in OTHER_SEPARATORS}
    sep, n = max(counts.items(), key=lambda kv: kv[1])
    if n == 0:
        return ""
    return (f"; the header is one column and looks separated by {OTHER_SEPARATORS[sep]}: "
            "prespec reads comma-separated files, so save the file with commas")


def missing_column(source: str, column: str, role: str, present: list[str]) -> DataError:
    """The one-line error for a column the plan names that the data lack: the columns that
    are there (at most COLUMNS_SHOWN of them) and a hint when the separator looks wrong."""
    return DataError(f"{source}: column {column!r} ({role}) is not in the data "
                     f"(columns: {listed(present, COLUMNS_SHOWN)}){separator_hint(present)}")


def _first_bad_byte(path: Path) -> tuple[int, int, int]:
    """(offset from 0, value, line) of the first byte of ``path`` that is not UTF-8."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    fed, lines = 0, 1  # bytes given to the decoder so far; the line they end on
    with path.open("rb") as handle:
        while block := handle.read(1 << 20):
            pending = len(decoder.getstate()[0])  # an unfinished character, never a newline
            try:
                decoder.decode(block)
            except UnicodeDecodeError as exc:
                return (fed - pending + exc.start, exc.object[exc.start],
                        lines + exc.object[: exc.start].count(b"\n"))
            lines += block.count(b"\n")
            fed += len(block)
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError as exc:
            return fed - len(exc.object) + exc.start, exc.object[exc.start], lines
    return fed, 0, lines


#: How much of a file that is not UTF-8 is tried as Windows-1252 for the hint.
HINT_BYTES = 64 << 20


def not_utf8(path: Path, shown: str | None = None) -> DataError:
    """The one-line error for a data file that is not UTF-8: the offset and line of the first
    bad byte, and whether the text reads as Windows-1252 (Latin-1)."""
    offset, byte, line = _first_bad_byte(path)
    with path.open("rb") as handle:
        head = handle.read(HINT_BYTES)
    try:
        head.decode("cp1252")
        hint = "the file reads as Windows-1252 (Latin-1) text: save it as UTF-8"
    except UnicodeDecodeError:
        hint = "save the file as UTF-8"
    return DataError(f"{shown or path}: byte offset {offset} (line {line}) is 0x{byte:02x}, "
                     f"which is not UTF-8; {hint} (encodings tried: UTF-8, Windows-1252)")


def _csv_header(path: Path) -> tuple[list[str], int]:
    """The header's fields as pandas names them (an empty name ``Unnamed: i``, a repeated one
    ``name.1``, …, as ``pandas.io.common.dedup_names``) and the physical lines it took."""
    with _csv_reader(path) as reader:
        raw = next((row for row in reader if row), [])
        lines = reader.line_num
    names = [name if name else f"Unnamed: {i}" for i, name in enumerate(raw)]
    if len(set(names)) == len(names):
        return [n.strip() for n in names], lines
    counts: dict[str, int] = {}
    for i, col in enumerate(names):
        seen = counts.get(col, 0)
        while seen > 0:
            counts[col] = seen + 1
            col = f"{col}.{seen}"
            seen = counts.get(col, 0)
        names[i] = col
        counts[col] = seen + 1
    return [n.strip() for n in names], lines


_CSV_OPTIONS = {"dtype": str, "keep_default_na": False, "na_filter": False,
                "encoding": "utf-8", "skipinitialspace": False}


def _row_widths(path: Path, width: int) -> tuple[int, int]:
    """The number of data rows and the most fields a row has; a row with more fields than
    the header is an error, as a full read by pandas makes it."""
    rows = widest = 0
    with _csv_reader(path) as reader:
        next((row for row in reader if row), None)
        for row in reader:
            if not row:
                continue  # a blank line, which pandas skips too
            if len(row) > width:
                raise pd.errors.ParserError(f"Expected {width} fields in line "
                                            f"{reader.line_num}, saw {len(row)}")
            rows += 1
            widest = max(widest, len(row))
    return rows, widest


def _read_csv(path: Path, columns: Mapping[str, str] | None, shown: str) -> pd.DataFrame:
    if columns is None:
        frame = pd.read_csv(path, **_CSV_OPTIONS)
        frame.columns = [str(c).strip() for c in frame.columns]
        return frame
    header, lines = _csv_header(path)
    present = set(header)
    for column, role in columns.items():
        if column not in present:
            raise missing_column(shown, column, role, header)
    at = [i for i, name in enumerate(header) if name in columns]
    rows, widest = _row_widths(path, len(header))
    frame: pd.DataFrame | None = None
    if rows == 0:
        frame = pd.DataFrame({i: pd.Series([], dtype=str) for i in at})
    elif lines == 1:
        # Without the header pandas makes no column object per header name; the rows are
        # as wide as the widest row, so none is padded to the header's width. A named column
        # past every row's end is blank, as a full read pads it.
        read = pd.read_csv(path, header=None, skiprows=1, names=range(widest),
                           usecols=[i for i in at if i < widest], **_CSV_OPTIONS)
        if len(read.index) == rows:
            frame = pd.DataFrame({i: read[i] if i < widest else pd.Series([""] * rows,
                                                                          dtype=str)
                                  for i in at})
    if frame is None:  # a header over several lines, or a file the two readers split apart
        frame = pd.read_csv(path, usecols=at, **_CSV_OPTIONS)
    frame.columns = [header[i] for i in at]
    return frame


def _read_parquet(path: Path, columns: Mapping[str, str] | None, shown: str) -> pd.DataFrame:
    if columns is None:
        frame = pd.read_parquet(path)
    else:
        import pyarrow.parquet as pq

        names = list(pq.read_schema(path).names)
        header = [str(n).strip() for n in names]
        for column, role in columns.items():
            if column not in header:
                raise missing_column(shown, column, role, header)
        frame = pd.read_parquet(path, columns=[n for n, h in zip(names, header, strict=True)
                                               if h in columns])
    frame = frame.astype(object).where(frame.notna(), None)
    frame.columns = [str(c).strip() for c in frame.columns]
    return frame


def _read_dataset(path: Path, columns: Mapping[str, str] | None, shown: str) -> pd.DataFrame:
    if columns is not None:
        meta = datasets.metadata(path, shown)
        header = [n.strip() for n in meta.names]
        for column, role in columns.items():
            if column not in header:
                raise missing_column(shown, column, role, header)
    return datasets.read_dataset(path, None if columns is None else list(columns), shown)


#: The extensions read, by kind (``open_data_file``); "" (no extension) is read as CSV.
CSV_SUFFIXES = (".csv", ".txt", "")
PARQUET_SUFFIXES = (".parquet", ".pq")
KNOWN_FORMATS = ".csv, .parquet, .xpt, .sas7bdat, .sav, .zsav or .dta"


def unknown_format(shown: str, suffix: str) -> DataError:
    return DataError(f"{shown}: unknown data format {suffix!r} (use {KNOWN_FORMATS})")


def read_data(path: Path, columns: Mapping[str, str] | None = None,
              source: str | None = None) -> pd.DataFrame:
    """Read CSV (every cell as text, no NA conversion), Parquet (nulls stay None) or a
    transport or dataset file (stored values: text, floats, None for a missing value;
    ``datasets.py``).

    Returns a frame whose columns are the file's, cells unconverted, so the matching rule of
    ``values.py`` sees exactly what the file holds. ``columns`` (each column the caller reads,
    with the plan key that names it): only those are parsed, and one the file lacks is a
    one-line error naming its key (``source`` names the data in messages).
    """
    shown = source or str(path)
    if not path.exists():
        raise DataError(f"{path}: no such data file")
    if path.is_dir():
        raise DataError(f"{path}: is a folder, not a data file")
    suffix = path.suffix.lower()
    try:
        if suffix in PARQUET_SUFFIXES:
            frame = _read_parquet(path, columns, shown)
        elif suffix in CSV_SUFFIXES or datasets.is_dataset(path):
            if path.stat().st_size == 0:
                raise DataError(f"{path}: the data file is empty")
            frame = (_read_dataset(path, columns, shown) if datasets.is_dataset(path) else
                     _read_csv(path, columns, shown))
        else:
            raise unknown_format(str(path), suffix)
    except DataError:
        raise
    except UnicodeDecodeError:
        raise not_utf8(path, shown) from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{path}: the data file is empty") from None
    except (pd.errors.ParserError, csv.Error, ValueError, OSError, pa.ArrowException) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"{path}: cannot read the data file ({first})") from None
    if len(frame.index) == 0:
        raise DataError(f"{path}: the data file has a header but no rows")
    return frame


@dataclass(frozen=True)
class DataFile:
    """A data file of a supported format, as the engines open it (:func:`open_data_file`).

    ``format``: ``csv``, ``parquet``, or a dataset extension without its dot (``xpt``,
    ``sas7bdat``, ``sav``, ``zsav``, ``dta``)."""

    path: Path
    shown: str
    format: str

    @property
    def is_dataset(self) -> bool:
        return self.format not in ("csv", "parquet")

    def frame(self, columns: Mapping[str, str] | None = None) -> pd.DataFrame:
        """The raw cells of ``columns`` (each with the plan key naming it), every row, as the
        pandas engine counts them (:func:`read_data`)."""
        return read_data(self.path, columns, self.shown)

    def kinds(self) -> dict[str, str]:
        """A dataset file's columns (trimmed) and their kinds, ``text`` or ``float``, as
        :meth:`scannable` writes them, from its header (a CSV's or Parquet file's kinds are
        its SQL reader's)."""
        if not self.is_dataset:
            raise ValueError("kinds() reads the header of a transport or dataset file")
        return dict(datasets.metadata(self.path, self.shown).kinds)

    def labels(self) -> datasets.Labels:
        """The file's column and value labels (none for CSV and Parquet)."""
        if not self.is_dataset:
            return datasets.Labels()
        return datasets.labels(self.path, self.shown)

    def scannable(self, folder: Path, columns: Iterable[str] | None = None
                  ) -> tuple[str, Path]:
        """``(kind, path)`` of a file an SQL reader scans: the file itself for CSV and
        Parquet (kind ``csv`` or ``parquet``), or for a dataset file a Parquet copy of
        ``columns`` (all when None) written into ``folder`` a chunk of rows at a time, never
        the whole file in memory (``datasets.stage_parquet``)."""
        if not self.is_dataset:
            return self.format, self.path
        import hashlib

        wanted = None if columns is None else sorted(set(columns))
        key = "\x1f".join([str(self.path), *(wanted if wanted is not None else ["\x00all"])])
        target = folder / f"staged-{hashlib.sha256(key.encode()).hexdigest()[:16]}.parquet"
        if not target.exists():
            partial = target.with_suffix(".partial")
            datasets.stage_parquet(self.path, wanted, partial, self.shown)
            partial.rename(target)
        return "parquet", target


def open_data_file(path: Path, shown: str | None = None) -> DataFile:
    """Any supported data file, chosen by its extension, as the engines open it; an unknown
    extension, a missing file or a folder is a one-line error. (A dataset file that is not
    what its extension says is found when it is read: one line too.)"""
    shown = shown or str(path)
    suffix = path.suffix.lower()
    if suffix in PARQUET_SUFFIXES:
        kind = "parquet"
    elif suffix in CSV_SUFFIXES:
        kind = "csv"
    elif datasets.is_dataset(path):
        kind = suffix[1:]
    else:
        raise unknown_format(shown, suffix)
    if not path.exists():
        raise DataError(f"{shown}: no such data file")
    if path.is_dir():
        raise DataError(f"{shown}: is a folder, not a data file")
    return DataFile(path, shown, kind)
