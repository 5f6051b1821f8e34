"""CSV with a header line: columns are picked by name.

Parsed in chunks by pandas' C parser with type inference (integer columns
parse several times faster than when every cell is forced through the float
parser).  A chunk whose column did not come out numeric is searched for the
first offending cell, so the error names its row and column.  Empty cells and
"nan" are missing values (reported, or dropped with drop_invalid, by the
caller); cells must not contain line breaks.
"""
from __future__ import annotations

import csv
import re

import numpy as np

from affix.errors import DataError

MISSING = ["", "nan", "NaN", "NAN"]
_FIELD_COUNT = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")


def column_names(path) -> list[str]:
    try:
        with open(path, newline="", encoding="utf-8-sig") as f:
            header = next(csv.reader(f), None)
    except UnicodeDecodeError:
        raise DataError("not a text CSV file (it is not UTF-8)", path) from None
    if not header:
        raise DataError("empty file: expected a header line naming the columns", path)
    return [name.strip() for name in header]


def raw_chunks(path, columns, chunk_rows):
    """Float64 arrays (k, len(columns)) in file order; NaN marks missing cells."""
    import pandas as pd  # here, not at the top: only CSV needs it, and it is slow to import

    header = column_names(path)
    positions = [header.index(name) for name in columns]
    used = sorted(set(positions))
    order = [used.index(p) for p in positions]
    reader = pd.read_csv(
        path,
        header=None,
        skiprows=1,
        usecols=used,
        chunksize=chunk_rows,
        keep_default_na=False,
        na_values=MISSING,
        skipinitialspace=True,
        encoding="utf-8-sig",
    )
    first_row = 1  # rows are counted from 1, the header not included
    try:
        with reader:
            for frame in reader:
                values = _numeric(frame, path, first_row, [header[p] for p in used])
                first_row += len(values)
                yield values[:, order]
    except pd.errors.ParserError as exc:
        raise DataError(_parser_message(exc), path) from None
    except UnicodeDecodeError:
        raise DataError("not a text CSV file (it is not UTF-8)", path) from None


def _numeric(frame, path, first_row, names) -> np.ndarray:
    import pandas as pd

    for position, name in enumerate(names):
        column = frame.iloc[:, position]
        if column.dtype.kind in "iuf":
            continue
        converted = pd.to_numeric(column, errors="coerce") if column.dtype.kind == "O" else None
        bad = np.ones(len(column), bool) if converted is None else (converted.isna() & column.notna()).to_numpy()
        if bad.any():
            i = int(np.argmax(bad))
            raise DataError(f"not a number: {str(column.iloc[i])!r}", path, row=first_row + i, column=name)
        frame.isetitem(position, converted)
    return frame.to_numpy(dtype=np.float64)


def _parser_message(exc) -> str:
    found = _FIELD_COUNT.search(str(exc))
    if found:
        expected, line, saw = found.groups()
        return f"row {int(line) - 1}: has {saw} fields where the header has {expected}"
    return f"malformed CSV ({' '.join(str(exc).split())})"
