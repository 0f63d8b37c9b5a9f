"""Reading a data file (CSV as text, or Parquet) into a DataFrame of raw cells."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pyarrow as pa

from ..errors import DataError


def read_data(path: Path) -> pd.DataFrame:
    """Read CSV (every cell as text, no NA conversion) or Parquet (nulls stay None).

    Returns a frame whose columns are the file's, cells unconverted, so the matching rule of
    ``values.py`` sees exactly what the file holds.
    """
    if not path.exists():
        raise DataError(f"{path}: no such data file")
    if path.is_dir():
        raise DataError(f"{path}: is a folder, not a data file")
    suffix = path.suffix.lower()
    try:
        if suffix in {".parquet", ".pq"}:
            frame = pd.read_parquet(path)
            frame = frame.astype(object).where(frame.notna(), None)
        elif suffix in {".csv", ".txt", ""}:
            if path.stat().st_size == 0:
                raise DataError(f"{path}: the data file is empty")
            frame = pd.read_csv(
                path,
                dtype=str,
                keep_default_na=False,
                na_filter=False,
                encoding="utf-8",
                skipinitialspace=False,
            )
        else:
            raise DataError(f"{path}: unknown data format {suffix!r} (use .csv or .parquet)")
    except DataError:
        raise
    except UnicodeDecodeError:
        raise DataError(f"{path}: the data file is not UTF-8 text") from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{path}: the data file is empty") from None
    except (pd.errors.ParserError, ValueError, OSError, pa.ArrowException) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise DataError(f"{path}: cannot read the data file ({first})") from None
    frame.columns = [str(c).strip() for c in frame.columns]
    if len(frame.index) == 0:
        raise DataError(f"{path}: the data file has a header but no rows")
    return frame
