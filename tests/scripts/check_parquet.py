"""Reads every .parquet file under a folder with the pyarrow of the running Python and checks it
against its CSV twin (same stem): the same columns in the same order, text as Arrow strings,
flags (CSV cells true/false) as booleans, numbers as double or int64, and equal values.

Usage: python check_parquet.py FOLDER. Exits non-zero on the first mismatch; prints one line per
file and a closing count. Standard library and pyarrow only.
"""

import csv
import math
import pathlib
import sys

import pyarrow as pa
import pyarrow.parquet as pq


def fail(path, message):
    print(f"FAIL {path}: {message}")
    sys.exit(1)


def check(path):
    table = pq.read_table(path)
    twin = path.with_suffix(".csv")
    if not twin.is_file():
        fail(path, "has no CSV twin")
    with open(twin, newline="") as f:
        rows = list(csv.reader(f))
    header, rows = rows[0], rows[1:]
    if table.column_names != header:
        fail(path, f"columns {table.column_names} differ from the CSV's {header}")
    if table.num_rows != len(rows):
        fail(path, f"{table.num_rows} rows, the CSV has {len(rows)}")
    for k, name in enumerate(header):
        column = table.column(name)
        kind = column.type
        cells = [r[k] for r in rows]
        values = column.to_pylist()
        flag_text = all(c in ("true", "false", "") for c in cells) and any(cells)
        if pa.types.is_string(kind) or pa.types.is_large_string(kind):
            if flag_text:
                fail(path, f"flag column {name} is text, expected bool")
            expected = [c for c in cells]
            got = ["" if v is None else v for v in values]
        elif pa.types.is_boolean(kind):
            expected = cells
            got = ["" if v is None else ("true" if v else "false") for v in values]
        elif pa.types.is_float64(kind):
            if flag_text:
                fail(path, f"flag column {name} is numeric, expected bool")
            expected = [None if c == "" else float(c) for c in cells]
            got = values
            # NaN compares unequal to itself; the writer never writes NaN, so treat it as a miss.
            if any(v is not None and math.isnan(v) for v in got):
                fail(path, f"column {name} holds NaN")
        elif pa.types.is_int64(kind):
            expected = [int(c) for c in cells]
            got = values
        else:
            fail(path, f"column {name} has type {kind}, expected string, bool, double or int64")
        for i, (e, g) in enumerate(zip(expected, got)):
            if e != g:
                fail(path, f"column {name}, row {i + 1}: CSV {cells[i]!r}, Parquet {g!r}")


def main():
    folder = pathlib.Path(sys.argv[1])
    files = sorted(folder.rglob("*.parquet"))
    if not files:
        fail(folder, "holds no .parquet file")
    for path in files:
        check(path)
        print(f"ok pyarrow {pa.__version__}: {path.relative_to(folder)}")
    print(f"{len(files)} passed, 0 failed")


main()
