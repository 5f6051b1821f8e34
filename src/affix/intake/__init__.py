"""Intake: read calibration data (CSV, .npy, .npz, Parquet) in bounded-memory chunks.

Formats, chosen by the file suffix:

* ``.npy`` -- one 2-D array; its columns are named by index: "0", "1", ...
* ``.npz`` -- 1-D arrays of equal length, each a column named by its key
  (``np.savez("cal.npz", b1=..., Fx=...)``); or a single 2-D array, read
  like a .npy.
* ``.parquet``, ``.parq`` -- columns by name, read with pyarrow (the
  ``parquet`` extra).
* anything else -- CSV with a header line; columns are named by the header.

Messages name a CSV row by its line as an editor shows it (the header is
line 1, the first data row line 2), and a row of the other formats by its
number counted from 1, as those have no lines.  Which files a list of
names, glob patterns and Parquet dataset folders means is
:func:`affix.intake.sources.data_files`.
"""
from __future__ import annotations

import itertools
from pathlib import Path

import numpy as np

from affix.errors import DataError, UsageError
from affix.intake import array_format, csv_format, parquet_format
from affix.intake.parts import Part
from affix.intake.stream import ChunkStream

__all__ = ["ChunkStream", "Part", "check_columns", "column_names", "count_rows", "from_array", "partition",
           "preload", "read_chunks", "read_files", "splittable"]


def column_names(path) -> list[str]:
    """The names of the columns the file offers, in file order (a sequence: a 2-D
    array's "0", "1", ... are made when asked for, not all at once)."""
    path = _existing(path)
    return _format(path).column_names(path)


def read_chunks(path, columns, *, chunk_rows: int | None = None, drop_invalid: bool = False, part: Part | None = None,
                first_row: int | None = None, labels: str | None = None) -> ChunkStream:
    """The chosen columns of the file as one pass of float64 chunks (see ChunkStream).

    Chunks hold at most ``chunk_rows`` rows; by default as many as the format
    reads efficiently (``CHUNK_ROWS`` of its module), which bounds memory.

    Missing files and columns, ambiguous names and unreadable headers are
    reported here, before any row is read; cell-level problems during the pass.
    ``part``, one of :func:`partition`'s parts, reads only that part of the
    file (without the digest, which covers whole files); ``first_row`` is the
    number of rows before it where the part does not know it (counted here
    when not given: see :func:`count_rows`).  ``labels`` names a column of
    unit ids: the stream then yields labelled chunks (see ChunkStream).
    """
    path = _existing(path)
    columns = list(columns)
    fmt = _format(path)
    check_columns(path, columns + ([] if labels is None else [labels]))
    if labels is not None and labels in columns:
        raise UsageError(f"the unit column '{labels}' cannot also be an input or output", parameter="unit_column")
    chunk_rows = _chunk_rows(chunk_rows, fmt.CHUNK_ROWS)
    first_line = csv_format.FIRST_DATA_LINE if fmt is csv_format else None
    span, options = None, {}
    if part is not None:
        if part.first_row is not None:
            first_row = part.first_row
        elif first_row is None:
            first_row = csv_format.rows_before(path, part.span[0])
        span, options = part.span, {"first_row": first_row, "digest": False}
    raw = fmt.raw_chunks(path, columns, chunk_rows, span=span, first_row=first_row or 0, labels=labels)
    return ChunkStream(path, columns, raw, drop_invalid, first_line=first_line, label_column=labels, **options)


def check_columns(path, columns) -> None:
    """DataError unless the file offers each of ``columns`` exactly once."""
    available = _format(_existing(path)).column_names(path)
    for name in columns:
        count = available.count(name)
        if not count:
            raise DataError(f"no column '{name}' (available: {_listing(available)}){_separator_hint(available)}", path)
        if count > 1:
            raise DataError(f"the header names column '{name}' {count} times, so it is ambiguous", path)


def _separator_hint(available) -> str:
    """A note for a header read as one column that holds another common separator (a CSV written with ';')."""
    if len(available) == 1:
        for separator, called in ((";", "';'"), ("\t", "tabs"), ("|", "'|'")):
            if separator in available[0]:
                return f"; the header is one column holding {called}: affix reads values separated by commas"
    return ""


def read_files(entries, columns, *, drop_invalid: bool = False, labels: str | None = None):
    """The chosen columns of the files that ``entries`` name (files, glob patterns,
    Parquet dataset folders: see :func:`affix.intake.sources.data_files`), one after
    the other, as one iterable of float64 chunks (a single file's own ChunkStream,
    whose ``path`` messages can name); labelled chunks with ``labels``.

    Every file and its column names are checked here, before any row is read."""
    from affix.intake.sources import data_files

    streams = [read_chunks(path, columns, drop_invalid=drop_invalid, labels=labels) for path in data_files(entries)]
    return streams[0] if len(streams) == 1 else itertools.chain.from_iterable(streams)


def splittable(path) -> bool:
    """Whether splitting the file into parts read in parallel pays on one machine: CSV
    only, as parsing text is slow and reading the other formats costs too little."""
    return _format(_existing(path)) is csv_format


def partition(path, parts: int) -> list[Part]:
    """Up to ``parts`` parts that together cover the file's rows, each to be
    read on its own (``read_chunks(..., part=part)``), in file order: byte
    ranges of whole lines of a CSV, row ranges of a .npy, runs of row groups
    of a Parquet file; a .npz is one part."""
    path = _existing(path)
    return _format(path).partition(path, max(1, parts))


def preload(path) -> None:
    """Load what reading the file's format takes (pandas, for a CSV) into this
    process, so that processes forked next share it instead of each loading it."""
    if _format(_existing(path)) is csv_format:
        import pandas  # noqa: F401


def count_rows(path, part: Part) -> int:
    """The data rows in a part of a CSV file (its lines); what the parts after it need to know where they start."""
    return csv_format.count_rows(path, part.span)


def from_array(values, columns, *, chunk_rows: int | None = None, drop_invalid: bool = False,
               units=None) -> ChunkStream:
    """Rows already in memory (k, len(columns)) as the same kind of pass as a file gives;
    with ``units`` (k labels, text or integers), labelled chunks."""
    values = np.asarray(values, dtype=np.float64)
    chunk_rows = _chunk_rows(chunk_rows, array_format.CHUNK_ROWS)
    starts = range(0, len(values), chunk_rows)
    if units is None:
        return ChunkStream(None, columns, (values[start : start + chunk_rows] for start in starts), drop_invalid)
    units = np.asarray(units)
    if units.shape != (len(values),):
        raise UsageError(f"{len(values)} rows need as many unit labels, got {units.shape[0] if units.ndim else 0}",
                         parameter="units")
    if units.dtype.kind not in "iu":  # text; integers are turned into text by the stream
        units = units.astype(object)
    slices = ((values[start : start + chunk_rows], units[start : start + chunk_rows]) for start in starts)
    return ChunkStream(None, columns, slices, drop_invalid, label_column="unit")


def _chunk_rows(chunk_rows, default) -> int:
    if chunk_rows is None:
        return default
    if not (isinstance(chunk_rows, int) and chunk_rows >= 1):
        raise UsageError(f"must be a whole number >= 1, got {chunk_rows!r}", parameter="chunk_rows")
    return chunk_rows


def _listing(names, shown: int = 20) -> str:
    """Column names for a message: the first few, and how many in all (a header can name thousands)."""
    if len(names) <= shown:
        return ", ".join(names)
    return ", ".join(names[:shown]) + f", ... ({len(names)} columns)"


def _existing(path) -> Path:
    path = Path(path)
    if not path.is_file():
        raise DataError("no such file" if not path.exists() else "not a regular file", path)
    return path


def _format(path: Path):
    suffix = path.suffix.lower()
    if suffix in (".npy", ".npz"):
        return array_format
    return parquet_format if suffix in parquet_format.SUFFIXES else csv_format
