"""Parquet files read with pyarrow: only the needed columns, indexed by position from 1.

A stored pandas index is left out; the remaining column names are checked like a CSV header's.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from reportgen.errors import DataError
from reportgen.io.common import header_names, nfc


def read_parquet(path: Path, wanted: tuple[str, ...]) -> tuple[pd.DataFrame, list[str]]:
    """The wanted columns that the file has (only those are read), and the names of all its columns."""
    import pyarrow.parquet as pq

    def unreadable(exc: Exception) -> DataError:
        return DataError(f"{path}: not a readable Parquet file ({type(exc).__name__}); export it again, or set "
                         "data.format if it is not Parquet")

    try:
        schema = pq.read_schema(path)
        stored_index = (schema.pandas_metadata or {}).get("index_columns", [])
    except Exception as exc:  # pyarrow raises its own types for a broken file
        raise unreadable(exc) from None
    stored = [name for name in schema.names if name not in stored_index]
    names = header_names(stored, "the Parquet schema", path)  # repeated names are refused here, by name
    keys = {nfc(name) for name in wanted}
    chosen = [index for index, name in enumerate(names) if nfc(name) in keys]
    try:
        frame = pd.read_parquet(path, columns=[stored[index] for index in chosen])
    except Exception as exc:
        raise unreadable(exc) from None
    frame = frame.reset_index(drop=True)
    frame.columns = [names[index] for index in chosen]
    frame.index = pd.RangeIndex(1, len(frame) + 1, name="row")
    return frame, names

