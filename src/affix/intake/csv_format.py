"""CSV with a header line: columns are picked by name.

Parsed in chunks by pandas' C parser with type inference (integer columns
parse several times faster than when every cell is forced through the float
parser).  A chunk whose column did not come out numeric is searched for the
first offending cell, so the error names its row and column.  Empty cells and
"nan" are missing values (reported, or dropped with drop_invalid, by the
caller); so is a blank line (a row of empty cells) and a cell missing at the
end of a short row.  Fields past the header's count are not read.  Cells must
not contain line breaks: a file is split into parts at line breaks, so that
parts can be parsed in parallel (see :func:`partition`).
"""
from __future__ import annotations

import csv
import io
import os
import re

import numpy as np

from affix.errors import DataError

CHUNK_ROWS = 1 << 16  # pandas' per-chunk overhead is small against this many rows
MISSING = ["", "nan", "NaN", "NAN"]
_BLOCK = 1 << 20
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


def data_start(path) -> int:
    """Byte offset of the first data line (just past the header line)."""
    with open(path, "rb") as f:
        return len(f.readline())


def partition(path, parts: int) -> list[tuple[int, int]]:
    """Up to ``parts`` byte ranges of whole lines that together cover the data rows."""
    start, size = data_start(path), os.path.getsize(path)
    cuts = [start]
    with open(path, "rb") as f:
        for i in range(1, parts):
            f.seek(start + (size - start) * i // parts)
            f.readline()  # move on to the start of the next line
            if cuts[-1] < f.tell() < size:
                cuts.append(f.tell())
    return list(zip(cuts, cuts[1:] + [size]))


def rows_before(path, offset: int) -> int:
    """How many data rows lie before byte ``offset`` (a line start)."""
    start, count = data_start(path), 0
    block = np.empty(_BLOCK, np.uint8)  # one buffer; NumPy counts in it about 3x faster than bytes.count
    with open(path, "rb", buffering=0) as f:
        f.seek(start)
        while size := f.readinto(block[: min(_BLOCK, offset - f.tell())]):
            count += int(np.count_nonzero(block[:size] == ord("\n")))
    return count


def raw_chunks(path, columns, chunk_rows, byte_range=None, rows_skipped=0):
    """Float64 arrays (k, len(columns)) in file order; NaN marks missing cells.

    ``byte_range`` (from :func:`partition`) reads only those lines, which
    follow ``rows_skipped`` data rows; by default all data lines.
    """
    import pandas as pd  # here, not at the top: only CSV needs it, and it is slow to import

    header = column_names(path)
    positions = [header.index(name) for name in columns]
    used = sorted(set(positions))
    order = [used.index(p) for p in positions]
    start, end = byte_range or (data_start(path), os.path.getsize(path))
    first_row = stream_first = 1 + rows_skipped  # rows count from 1, the header not included
    if start >= end:
        return  # a header and no rows: the fit reports too few rows
    lines = io.BufferedReader(_ByteRange(path, start, end), _BLOCK)
    try:
        with lines, pd.read_csv(
            lines,
            header=None,
            usecols=used,
            chunksize=chunk_rows,
            keep_default_na=False,
            na_values=MISSING,
            skip_blank_lines=False,  # a blank line is a row of empty cells, and keeps row numbers right
            encoding="utf-8",
        ) as reader:
            for frame in reader:
                values = _numeric(frame, path, first_row, [header[p] for p in used])
                first_row += len(values)
                yield values if order == list(range(len(order))) else values[:, order]
    except pd.errors.ParserError as exc:
        raise DataError(_parser_message(exc, stream_first), path) from None
    except UnicodeDecodeError:
        raise DataError("not a text CSV file (it is not UTF-8)", path) from None


class _ByteRange(io.RawIOBase):
    """The bytes [start, end) of a file, as a file of their own."""

    def __init__(self, path, start, end):
        self._file = open(path, "rb", buffering=0)
        self._file.seek(start)
        self._left = end - start

    def readable(self):
        return True

    def readinto(self, buffer):
        view = memoryview(buffer)[: self._left]
        count = self._file.readinto(view)
        self._left -= count
        return count

    def close(self):
        self._file.close()
        super().close()


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


def _parser_message(exc, first_row) -> str:
    found = _FIELD_COUNT.search(str(exc))
    if found:
        expected, line, saw = found.groups()
        return f"row {first_row + int(line) - 1}: has {saw} fields where the first row has {expected}"
    return f"malformed CSV ({' '.join(str(exc).split())})"
