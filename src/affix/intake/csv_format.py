"""CSV with a header line: columns are picked by name.

Parsed in chunks by pandas' C parser with type inference (integer columns
parse several times faster than when every cell is forced through the float
parser).  A chunk whose column did not come out numeric is searched for the
first offending cell, so the error names its line and column.  One rule for
every row, wherever it falls (the first, or the first of a worker's part):
it has the header's fields.  Empty cells and "nan" are missing values
(reported, or dropped with drop_invalid, by the caller); so is a blank line (a
row of empty cells) and a cell missing at the end of a short row.  Fields past
the header's count are not read.  NUL bytes and text that is not UTF-8 are
errors.  Errors name the line as an editor shows it: the header is line 1.
Cells must not contain line breaks: a file is split into parts at line breaks,
so that parts can be parsed in parallel (see :func:`partition`).
"""
from __future__ import annotations

import codecs
import csv
import io
import os
import re

import numpy as np

from affix.errors import DataError
from affix.intake.parts import Part

CHUNK_ROWS = 1 << 16  # pandas' per-chunk overhead is small against this many rows
MISSING = ["", "nan", "NaN", "NAN"]
_BLOCK = 1 << 20
_HEADER_LIMIT = 1 << 20
FIRST_DATA_LINE = 2  # the header is line 1, and every row is one line
_NOT_UTF8 = "not a text CSV file (it is not UTF-8)"
_SHOWN = 40  # characters of a bad cell quoted in a message
_NUL_BYTES = "holds NUL bytes, which no text CSV does (a log preallocated with zeros, or cut short by a crash?)"
# Where pandas' C parser says which row it stopped at: counted from 0 in the text it was given.
_PARSER_ROW = re.compile(r"starting at row (\d+)")


def column_names(path) -> list[str]:
    try:
        text = _header_line(path).decode("utf-8-sig")
        header = next(csv.reader([text]), None)
    except UnicodeDecodeError:
        raise DataError(_NOT_UTF8, path, line=1) from None
    except csv.Error as exc:
        raise DataError(f"not a CSV header ({exc})", path, line=1) from None
    if not header:
        raise DataError("empty file: expected a header line naming the columns", path)
    if any("\0" in name for name in header):
        raise DataError(_NUL_BYTES, path, line=1)
    return [name.strip() for name in header]


def data_start(path) -> int:
    """Byte offset of the first data line (just past the header line)."""
    return len(_header_line(path))


def _header_line(path) -> bytes:
    with open(path, "rb") as f:
        line = f.readline(_HEADER_LIMIT + 1)
    if len(line) > _HEADER_LIMIT:
        raise DataError(f"the first line is longer than {_HEADER_LIMIT} bytes, so it is no CSV header", path, line=1)
    return line


def partition(path, parts: int) -> list[Part]:
    """Up to ``parts`` pieces of whole lines that together cover the data rows;
    the rows before each are counted when it is read (:func:`count_rows`)."""
    start, size = data_start(path), os.path.getsize(path)
    cuts = [start]
    with open(path, "rb") as f:
        for i in range(1, parts):
            f.seek(start + (size - start) * i // parts)
            f.readline()  # move on to the start of the next line
            if cuts[-1] < f.tell() < size:
                cuts.append(f.tell())
    return [Part((a, b), 0 if a == start else None, b - a) for a, b in zip(cuts, cuts[1:] + [size])]


def rows_before(path, offset: int) -> int:
    """How many data rows lie before byte ``offset`` (a line start)."""
    return count_rows(path, (data_start(path), offset))


def count_rows(path, span) -> int:
    """How many lines start in bytes [start, end) of the file (whole lines: every one ends in a line break)."""
    start, end = span
    count = 0
    block = np.empty(_BLOCK, np.uint8)  # one buffer; NumPy counts in it about 3x faster than bytes.count
    with open(path, "rb", buffering=0) as f:
        f.seek(start)
        while size := f.readinto(block[: min(_BLOCK, end - f.tell())]):
            count += int(np.count_nonzero(block[:size] == ord("\n")))
    return count


def raw_chunks(path, columns, chunk_rows, span=None, first_row=0, labels=None):
    """Float64 arrays (k, len(columns)) in file order; NaN marks missing cells.

    ``span`` (of a :func:`partition` part) reads only those lines, which
    follow ``first_row`` data rows; by default all data lines.  Errors name
    the line as an editor numbers it.  With ``labels`` (a column name, not
    one of ``columns``), pairs (values, labels): that column's cells as text,
    exactly as written (a unit id "0042" stays "0042"), NaN where empty.
    """
    import pandas as pd  # here, not at the top: only CSV needs it, and it is slow to import

    header = column_names(path)
    positions = [header.index(name) for name in columns]
    label_position = None if labels is None else header.index(labels)
    used = sorted(set(positions))
    order = [used.index(p) for p in positions]
    # The unit ids as Python strings, each exactly as written: object, not pandas' str dtype, whose
    # conversion to and from its own storage (pyarrow's, where installed) costs more than the parse of them.
    text = {} if label_position is None else {label_position: object}
    start, end = span or (data_start(path), os.path.getsize(path))
    line = first_line = FIRST_DATA_LINE + first_row
    if start >= end:
        return  # a header and no rows: the caller reports too few rows
    lines = io.BufferedReader(_ByteRange(path, start, end), _BLOCK)
    try:
        with lines, pd.read_csv(
            lines,
            header=None,
            # Every row has the header's fields, so a short first row (or a
            # blank line) is read as missing cells like any other, instead of
            # setting a smaller field count for the rows after it.
            names=range(len(header)),
            usecols=used if label_position is None else sorted({*used, label_position}),
            dtype=text,
            chunksize=chunk_rows,
            keep_default_na=False,
            na_values=MISSING,
            skip_blank_lines=False,  # a blank line is a row of empty cells, and keeps line numbers right
            encoding="utf-8",
        ) as reader:
            for frame in reader:
                label_cells = None
                if label_position is not None:
                    label_cells = frame.pop(label_position).to_numpy(dtype=object)
                    frame = frame[used]
                values = _numeric(frame, path, line, [header[p] for p in used])
                line += len(values)
                values = values if order == list(range(len(order))) else values[:, order]
                yield values if label_cells is None else (values, label_cells)
    except pd.errors.ParserError as exc:
        found = _PARSER_ROW.search(str(exc))
        if found:
            raise DataError(f"malformed CSV ({_one_line(exc)})", path, line=first_line + int(found.group(1))) from None
        raise _unreadable(path, start, end, first_line) or DataError(f"malformed CSV ({_one_line(exc)})", path) from None
    except UnicodeDecodeError:
        raise _unreadable(path, start, end, first_line) or DataError(_NOT_UTF8, path) from None


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


def _numeric(frame, path, first_line, names) -> np.ndarray:
    import pandas as pd

    for position, name in enumerate(names):
        column = frame.iloc[:, position]
        if column.dtype.kind in "iuf":
            continue
        converted = pd.to_numeric(column, errors="coerce") if column.dtype.kind == "O" else None
        bad = np.ones(len(column), bool) if converted is None else (converted.isna() & column.notna()).to_numpy()
        if bad.any():
            i = int(np.argmax(bad))
            cell = str(column.iloc[i])
            message = _NUL_BYTES if "\0" in cell else f"not a number: {quoted(cell)}"
            raise DataError(message, path, line=first_line + i, column=name)
        frame.isetitem(position, converted)
    return frame.to_numpy(dtype=np.float64)


def _unreadable(path, start, end, first_line) -> DataError | None:
    """The error for the first line in bytes [start, end) that holds a NUL byte
    or is not UTF-8, if there is one: what pandas' own errors cannot place."""
    decoder = codecs.getincrementaldecoder("utf-8")()
    line = first_line
    with _ByteRange(path, start, end) as source:
        while block := source.read(_BLOCK):
            nul = block.find(b"\0")
            pending = len(decoder.getstate()[0])  # bytes of a character cut by the last block
            try:
                decoder.decode(block if nul < 0 else block[:nul])
            except UnicodeDecodeError as exc:
                return DataError(_NOT_UTF8, path, line=line + block.count(b"\n", 0, max(exc.start - pending, 0)))
            if nul >= 0:
                return DataError(_NUL_BYTES, path, line=line + block.count(b"\n", 0, nul))
            line += block.count(b"\n")
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError:
        return DataError(_NOT_UTF8, path, line=line)
    return None


def quoted(cell: str) -> str:
    """A cell as the message quotes it: repr, and cut short (a runaway cell can be megabytes)."""
    return repr(cell) if len(cell) <= _SHOWN else repr(cell[:_SHOWN]) + f"... ({len(cell)} characters)"


def _one_line(exc) -> str:
    return " ".join(str(exc).split())
