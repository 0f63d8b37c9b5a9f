"""What every engine checks about the columns before it counts: one rule and one message each.

The engines see the same file through different readers (pandas and pyarrow, DuckDB, Spark,
a database's catalog), and each reader has its own habits with names and types. These checks
run on what each engine reports in a common vocabulary, so that every engine gives the same
answer on the same data: the same counts, or the same one-line refusal.

- **Names.** Two columns whose names are equal once trimmed and compared ignoring case are
  refused, always, naming the name and the positions: the readers disagree on such a header
  (pandas and DuckDB keep the first ``arm`` and rename the second, Spark renames both, pyarrow
  and Spark cannot read a Parquet file that repeats a name, and DuckDB matches names ignoring
  case), so no engine could say which column the plan means.
- **Nested values.** A column the plan reads that holds lists, maps, records (structs) or JSON
  documents is refused, naming the column and the kind: a cell must be one value to be
  compared with the plan's values.
- **Bytes.** A column the plan reads that holds bytes (Parquet ``BINARY`` without a string
  annotation, as some writers store text; a database ``bytea``) is read as UTF-8 text; a cell
  that is not UTF-8, or that holds a NUL character (which a PostgreSQL text cannot), is
  refused, with the number of such cells.
"""

from __future__ import annotations

import csv
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import Any

from ...errors import DataError
from .base import CountRequest

#: the kinds of nested column, as messages name them (every engine maps its types to these)
NESTED_KINDS: tuple[str, ...] = ("list", "map", "struct", "JSON")
BINARY_KIND = "binary"

# valid UTF-8 without NUL, over the lower-case hex text of the bytes (two digits a byte; the
# well-formed byte sequences of the Unicode Standard, table 3-7)
UTF8_HEX_PATTERN = (
    "^(0[1-9a-f]|[1-7][0-9a-f]"
    "|c[2-9a-f][89ab][0-9a-f]|d[0-9a-f][89ab][0-9a-f]"
    "|e0[ab][0-9a-f][89ab][0-9a-f]|e[1-9a-cef][89ab][0-9a-f][89ab][0-9a-f]"
    "|ed[89][0-9a-f][89ab][0-9a-f]"
    "|f0[9ab][0-9a-f][89ab][0-9a-f][89ab][0-9a-f]"
    "|f[1-3][89ab][0-9a-f][89ab][0-9a-f][89ab][0-9a-f]"
    "|f48[0-9a-f][89ab][0-9a-f][89ab][0-9a-f])*$"
)


def _roles(request: CountRequest) -> dict[str, str]:
    return dict(request.needed)


def _role(request: CountRequest, column: str) -> str:
    role = _roles(request).get(column)
    return f" ({role})" if role else ""


def check_names(names: Sequence[str], where: str) -> None:
    """Refuse a header (or a table) in which two names are equal trimmed and ignoring case
    (blank names aside)."""
    seen: dict[str, list[int]] = {}
    for position, name in enumerate(names, start=1):
        key = str(name).strip().casefold()
        if key:  # blank names (trailing commas) every reader names apart; no plan names one
            seen.setdefault(key, []).append(position)
    for positions in seen.values():
        if len(positions) > 1:
            shown = [f"{p} {str(names[p - 1])!r}" for p in positions]
            listed = ", ".join(shown[:-1]) + f" and {shown[-1]}"
            first = str(names[positions[0] - 1]).strip()
            raise DataError(
                f"{where}: {len(positions)} columns are named {first!r} (columns {listed}; "
                "names are compared trimmed and ignoring case); rename all but one")


def check_nested(kinds: Mapping[str, str], request: CountRequest) -> None:
    """Refuse a column the plan reads whose kind is one of ``NESTED_KINDS``."""
    for column in request.read:
        kind = kinds.get(column)
        if kind in NESTED_KINDS:
            raise DataError(
                f"{request.source}: column {column!r}{_role(request, column)} holds {kind} "
                "values; prespec compares single values (text, numbers, true or false), so "
                "give the plan a column of those")


def binary_columns(kinds: Mapping[str, str], request: CountRequest) -> list[str]:
    """The columns the plan reads that hold bytes, in the order the request reads them."""
    return [c for c in request.read if kinds.get(c) == BINARY_KIND]


def refuse_bad_bytes(request: CountRequest, bad: Mapping[str, int]) -> None:
    """Refuse the first column (in ``request.read`` order) with cells that are not text."""
    for column in request.read:
        n = int(bad.get(column) or 0)
        if n:
            cells = "1 cell is" if n == 1 else f"{n} cells are"
            raise DataError(
                f"{request.source}: column {column!r}{_role(request, column)} holds bytes, "
                f"read as UTF-8 text, and {cells} not UTF-8 text (or hold a NUL character)")


# -- the pandas side -------------------------------------------------------------------------
def valid_text(cell: bytes) -> bool:
    """True when the bytes are UTF-8 text without a NUL (the rule of ``UTF8_HEX_PATTERN``)."""
    if b"\x00" in cell:
        return False
    try:
        cell.decode("utf-8", errors="strict")
    except UnicodeDecodeError:
        return False
    return True


def decode_bytes(cells: Iterable[Any]) -> tuple[list[Any], int]:
    """The cells with bytes decoded as UTF-8, and how many bytes cells are not text (kept)."""
    out: list[Any] = []
    bad = 0
    for cell in cells:
        if isinstance(cell, bytes | bytearray | memoryview):
            raw = bytes(cell)
            if valid_text(raw):
                out.append(raw.decode("utf-8"))
                continue
            bad += 1
            out.append(raw)
        else:
            out.append(cell)
    return out, bad


def arrow_kind(arrow_type: Any) -> str:
    """The kind of a pyarrow type: ``binary``, one of ``NESTED_KINDS``, or ``other``."""
    import pyarrow as pa

    t = arrow_type
    if pa.types.is_dictionary(t):
        t = t.value_type
    if (pa.types.is_binary(t) or pa.types.is_large_binary(t)
            or pa.types.is_fixed_size_binary(t) or pa.types.is_binary_view(t)):
        return BINARY_KIND
    if pa.types.is_map(t):
        return "map"
    if (pa.types.is_list(t) or pa.types.is_large_list(t) or pa.types.is_fixed_size_list(t)
            or pa.types.is_list_view(t) or pa.types.is_large_list_view(t)):
        return "list"
    if pa.types.is_struct(t) or pa.types.is_union(t):
        return "struct"
    return "other"


def parquet_columns(path: Path) -> tuple[list[str], dict[str, str]]:
    """A Parquet file's column names in order, and their kinds (``arrow_kind``) by trimmed name."""
    import pyarrow.parquet as pq

    schema = pq.read_schema(path)
    return list(schema.names), {f.name.strip(): arrow_kind(f.type) for f in schema}


def csv_header(path: Path) -> list[str] | None:
    """The first record of a CSV file (RFC 4180 quotes, UTF-8, a byte-order mark dropped), or
    None when it cannot be read so (the engine's own reader then says what is wrong)."""
    try:
        with path.open(encoding="utf-8-sig", newline="") as handle:
            return next(csv.reader(handle), None)
    except (OSError, UnicodeDecodeError, csv.Error):
        return None


def file_names(path: Path) -> list[str] | None:
    """The column names of a data file as its header (CSV, a dataset file) or schema
    (Parquet) holds them."""
    if path.suffix.lower() in (".parquet", ".pq"):
        try:
            return parquet_columns(path)[0]
        except Exception:  # noqa: BLE001 - the engine's own reader says what is wrong
            return None
    from ..datasets import is_dataset, metadata

    if is_dataset(path):  # a transport or dataset file: the names its header declares
        try:
            return metadata(path).names
        except DataError:
            return None
    return csv_header(path)


def check_file(path: Path, where: str) -> None:
    """``check_names`` on a file's header or schema (nothing when it cannot be read: the
    engine's reader then says why)."""
    names = file_names(path)
    if names is not None:
        check_names(names, where)


def check_files(paths: Iterable[str | Path]) -> None:
    """``check_file`` on each file of a glob, each named in the message."""
    for name in paths:
        check_file(Path(name), str(name))
