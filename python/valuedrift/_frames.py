"""Data frames in and out: trial tables to Parquet for the command's own reader, result tables
from the Parquet files the commands write.

Dtypes of the frames returned (the Parquet files carry the types the command wrote):

============  =====================  =============
file type     pandas                 polars
============  =====================  =============
text          ``string``             ``String``
flag          ``boolean``            ``Boolean``
whole number  ``Int64``              ``Int64``
real number   ``float64`` (NaN when  ``Float64``
              missing)               (null)
============  =====================  =============

pandas frames use pandas' nullable ``string``, ``boolean`` and ``Int64`` dtypes so that a
missing value stays missing (``pd.NA``) instead of turning a flag or a count into floats.
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

#: The kinds of frame the package returns.
FRAME_KINDS = ("pandas", "polars")


def kind_of(frame: Any) -> str | None:
    """``"pandas"``, ``"polars"`` or ``None`` (not a data frame of either library)."""
    module = type(frame).__module__
    if module.startswith("pandas"):
        return "pandas"
    if module.startswith("polars"):
        return "polars"
    return None


def to_arrow(frame: Any, what: str) -> pa.Table:
    """A pandas or polars DataFrame (or a pyarrow Table) as an Arrow table: the pandas index is
    left out, every column kept with its type."""
    if isinstance(frame, pa.Table):
        return frame
    kind = kind_of(frame)
    if kind == "pandas":
        try:
            return pa.Table.from_pandas(frame, preserve_index=False)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            return pa.table({str(c): _column(frame[c]) for c in frame.columns})
    if kind == "polars":
        return frame.to_arrow()
    raise TypeError(
        f"{what}: expected a pandas or polars DataFrame, a pyarrow Table or a path to a "
        f"file; got {type(frame).__name__}"
    )


def _column(values: Any) -> pa.Array:
    """A pandas column as Arrow; a column of mixed types (an object column with numbers and
    text) as text, so that the reader names the cell that is not what it expects."""
    try:
        return pa.array(values, from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError):
        import pandas as pd

        return pa.array([None if pd.isna(v) else str(v) for v in values], type=pa.string())


def write_parquet(frame: Any, path: Path, what: str) -> Path:
    """Writes ``frame`` to ``path`` as Parquet (Arrow underneath; no text round trip)."""
    pq.write_table(to_arrow(frame, what), path)
    return path


def write_csv(frame: Any, path: Path, what: str) -> Path:
    """Writes ``frame`` to ``path`` as CSV for the inputs the command line reads only as CSV
    (a parameter file): numbers as Python's shortest round-trip text, missing cells empty."""
    table = to_arrow(frame, what)
    with open(path, "w", newline="", encoding="utf-8") as out:
        writer = csv.writer(out)
        writer.writerow(table.column_names)
        for row in table.to_pylist():
            writer.writerow([_cell(v) for v in row.values()])
    return path


def _cell(value: Any) -> Any:
    """A CSV cell: empty when missing, a float as its shortest round-trip text."""
    if value is None:
        return ""
    return repr(value) if isinstance(value, float) else value


def read_parquet(path: Path, kind: str) -> Any:
    """The Parquet file at ``path`` as a ``kind`` frame, dtypes as in this module's table."""
    if kind == "polars":
        import polars as pl

        return pl.read_parquet(path)
    if kind == "pandas":
        import pandas as pd

        table = pq.read_table(path)
        mapping = {
            pa.string(): pd.StringDtype(),
            pa.large_string(): pd.StringDtype(),
            pa.bool_(): pd.BooleanDtype(),
            pa.int64(): pd.Int64Dtype(),
        }
        return table.to_pandas(types_mapper=mapping.get)
    raise ValueError(f"frame={kind!r}: expected one of {', '.join(FRAME_KINDS)}")


def check_kind(kind: str) -> str:
    """``kind`` if it is a frame kind the package returns."""
    if kind not in FRAME_KINDS:
        raise ValueError(f"frame={kind!r}: expected one of {', '.join(FRAME_KINDS)}")
    return kind
