"""NumPy files: .npy holds one 2-D array, .npz a set of arrays.

Columns of a 2-D array are named by their index: "0", "1", ...  In a .npz,
each 1-D array is one column named by its key (``np.savez(path, Fx=..., b1=...)``);
a .npz holding a single 2-D array is read like a .npy.  These files have no
lines, so messages name a row by its number, counted from 1.

Both are streamed with plain sequential reads of a few rows at a time (no
memory map, whose touched pages would count against the process), so memory
stays constant whatever the file size.  No size a header declares is taken
on trust: the shape and dtype must account for exactly the bytes the file
(or the archive member) holds before anything is allocated for them.
"""
from __future__ import annotations

import functools
import os
import tokenize
import zipfile
import zlib
from collections.abc import Sequence
from contextlib import ExitStack

import numpy as np

from affix.errors import DataError
from affix.intake.digest import FileDigest
from affix.intake.parts import Part

# Rows per read: the statistics' block size (affix.statistics.folds.BLOCK_ROWS),
# so a block read stays in the CPU cache while the statistics work through it.
CHUNK_ROWS = 1 << 14
# ...and fewer for very wide rows, so that one read never needs much more memory than this.
CHUNK_BYTES = 1 << 24
# What reading a damaged archive member can raise.
_READ_ERRORS = (OSError, EOFError, zipfile.BadZipFile, zlib.error)


def column_names(path) -> Sequence[str]:
    with ExitStack() as stack:
        return _names(_open_sources(path, stack))


def raw_chunks(path, columns, chunk_rows, span=None, first_row=0, labels=None):
    """Float64 chunks (k, len(columns)) of the chosen columns, in file order.

    A whole .npy file gives a :class:`HashedRows`, which reads the file once
    for both its rows and its SHA-256; a .npz, whose digest is of the archive
    and not of the arrays, a plain generator; ``span``, the rows [start, end)
    of a .npy file (a :func:`partition` part), a plain generator of those.
    An array file's unit column (``labels``) is one more column of numbers,
    the last, which the stream splits off.
    """
    columns = list(columns) + ([] if labels is None else [labels])
    if span is not None:
        return _row_range(path, columns, chunk_rows, span)
    if not _is_npz(path):
        return HashedRows(path, columns, chunk_rows)
    return _archive_chunks(path, columns, chunk_rows)


def partition(path, parts: int) -> list[Part]:
    """Up to ``parts`` row ranges of a .npy file; a .npz (compressed members
    cannot be entered midway) is one part, the whole file."""
    if _is_npz(path):
        return [Part(None, 0, os.path.getsize(path))]
    (source,) = _open_sources(path, None)
    cuts = sorted({source.rows * i // parts for i in range(parts)})
    ends = cuts[1:] + [source.rows]
    return [Part((a, b), a, (b - a) * source.row_bytes) for a, b in zip(cuts, ends) if b > a or source.rows == 0]


def _row_range(path, columns, chunk_rows, span):
    with ExitStack() as stack:
        (source,) = _open_sources(path, stack)
        positions = [source.names.index(name) for name in columns]
        source.open(stack, first_row=span[0])
        chunk_rows = _rows_per_read(chunk_rows, source.row_bytes)
        for start in range(span[0], span[1], chunk_rows):
            yield _as_chunk(source.read(min(chunk_rows, span[1] - start)), positions)


class HashedRows:
    """The chosen columns of a .npy file, read by a FileDigest thread that
    hashes every byte as it reads it (``FileDigest(into=...)``): one read of
    the file, on the other core, and a digest of exactly the bytes the rows
    came from.  Iterate once for the chunks, then :meth:`hexdigest`."""

    def __init__(self, path, columns, chunk_rows):
        self.path, self.columns, self.chunk_rows = path, list(columns), chunk_rows
        self._digest = None

    def __iter__(self):
        (source,) = _open_sources(self.path, None)
        positions = [source.names.index(name) for name in self.columns]
        chunk_rows = _rows_per_read(self.chunk_rows, source.row_bytes)

        def buffers():
            yield bytearray(source.header_bytes)  # hashed like the rest; already parsed
            for start in range(0, source.rows, chunk_rows):
                yield np.empty((min(chunk_rows, source.rows - start), source.width), dtype=source.dtype)

        self._digest = FileDigest(self.path, into=buffers())
        try:
            self._digest.next_filled()
            while (rows := self._digest.next_filled()) is not None:
                yield _as_chunk(rows, positions)
        finally:
            self._digest.close()

    def hexdigest(self) -> str:
        return self._digest.hexdigest()


def _archive_chunks(path, columns, chunk_rows):
    with ExitStack() as stack:
        sources = _open_sources(path, stack)
        wanted = {}  # source -> [(column in the result, position in the stored rows)]
        for j, name in enumerate(columns):
            source, position = _find(sources, name)
            wanted.setdefault(source, []).append((j, position))
        for source in wanted:
            source.open(stack)
        chunk_rows = _rows_per_read(chunk_rows, max(s.row_bytes for s in wanted))
        remaining = sources[0].rows
        while remaining:
            k = min(chunk_rows, remaining)
            remaining -= k
            if len(wanted) == 1:  # one stored array
                ((source, pairs),) = wanted.items()
                yield _as_chunk(source.read(k), [p for _, p in pairs])
                continue
            chunk = np.empty((k, len(columns)))
            for source, pairs in wanted.items():
                chunk[:, [j for j, _ in pairs]] = source.read(k)[:, [p for _, p in pairs]]
            yield chunk


def _rows_per_read(chunk_rows, row_bytes) -> int:
    """chunk_rows, fewer for very wide rows, so that one read stays near CHUNK_BYTES."""
    return max(1, min(chunk_rows, CHUNK_BYTES // row_bytes))


def _as_chunk(rows, positions) -> np.ndarray:
    """The stored rows' chosen columns as float64: one copy at most, gathering columns only if needed."""
    if positions != list(range(rows.shape[1])):
        rows = rows[:, positions]
    return rows.astype(np.float64, copy=False)


class IndexNames(Sequence):
    """The names "0", "1", ... of a 2-D array's columns, without building them
    all: a header may declare millions of columns."""

    def __init__(self, width: int):
        self.width = width

    def __len__(self):
        return self.width

    def __getitem__(self, j):
        if isinstance(j, slice):
            return [str(k) for k in range(self.width)[j]]
        return str(range(self.width)[j])

    def __contains__(self, name):
        return isinstance(name, str) and name.isdecimal() and name == str(int(name)) and int(name) < self.width

    def index(self, name, *_):
        if name not in self:
            raise ValueError(f"{name!r} is not a column")
        return int(name)

    def count(self, name):
        return int(name in self)


class _Source:
    """One stored array read row block by row block: its column names and rows.

    ``opener()`` gives a fresh stream of the stored bytes, ``size`` bytes long
    (the file's size, or the archive member's uncompressed size).  The header
    is read and checked at once and the stream closed: only the arrays a pass
    reads are opened again (:meth:`open`), so an archive of many members
    costs one decompressor at a time, not one per member."""

    def __init__(self, opener, path, size, key=None):
        self.opener, self.path, self.key, self.stream = opener, path, key, None
        try:
            with opener() as stream:
                version = np.lib.format.read_magic(stream)
                read_header = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
                shape, fortran, dtype = read_header(stream)
                header_bytes = stream.tell()
        except (ValueError, TypeError, SyntaxError, RecursionError, tokenize.TokenError, *_READ_ERRORS) as exc:
            # numpy parses the header (at most 10000 characters) as a Python literal, retrying
            # the tokens of an old one: any of these is a damaged header.
            raise DataError(f"not a valid NumPy array{_of(key)} ({_one_line(exc)})", path) from None
        if dtype.hasobject or dtype.names or dtype.kind not in "biuf":
            raise DataError(f"array{_of(key)} has dtype {dtype}; expected plain numbers", path)
        if len(shape) == 1 and key is not None:
            self.width, self.names = 1, [key]
        elif len(shape) == 2:
            self.width, self.names = shape[1], IndexNames(max(shape[1], 0))
        else:
            raise DataError(f"array{_of(key)} has shape {shape}; expected a 2-D array (rows, columns)", path)
        declared = shape[0] * self.width * dtype.itemsize  # Python integers: no overflow
        if min(shape) < 0 or declared != size - header_bytes:
            raise DataError(
                f"array{_of(key)} declares the shape {shape} of {dtype} ({declared} bytes), "
                f"but {'its member' if key else 'the file'} holds {size - header_bytes} bytes after the header",
                path,
            )
        if fortran and self.width > 1:
            raise DataError(
                f"array{_of(key)} is stored in Fortran order and cannot be read row by row; "
                "save np.ascontiguousarray(a) instead",
                path,
            )
        self.dtype, self.rows = dtype, shape[0]
        self.row_bytes = max(1, self.width * dtype.itemsize)
        self.header_bytes = header_bytes

    def open(self, stack, first_row: int = 0) -> None:
        """Open the stored bytes again, at ``first_row``, for :meth:`read`."""
        try:
            self.stream = stack.enter_context(self.opener())
            self.stream.seek(self.header_bytes + first_row * self.row_bytes)
        except (*_READ_ERRORS, NotImplementedError, RuntimeError) as exc:
            raise DataError(f"cannot read array{_of(self.key)} ({_one_line(exc)})", self.path) from None

    def read(self, k) -> np.ndarray:
        """The next k rows, read straight into a fresh array (no intermediate bytes object)."""
        rows = np.empty((k, self.width), dtype=self.dtype)
        target = memoryview(rows.reshape(-1).view(np.uint8))
        filled = 0
        try:
            while filled < len(target):
                count = self.stream.readinto(target[filled:])
                if not count:
                    raise DataError(f"array{_of(self.key)} ends before the size its header declares", self.path)
                filled += count
        except _READ_ERRORS as exc:
            raise DataError(f"cannot read array{_of(self.key)} ({_one_line(exc)})", self.path) from None
        return rows


def _of(key):
    return f" '{key}'" if key else ""


def _one_line(exc) -> str:
    return " ".join(str(exc).split())


def _names(sources) -> Sequence[str]:
    return sources[0].names if len(sources) == 1 else [source.key for source in sources]


def _find(sources, name):
    """(the source that holds column ``name``, its position in that source's rows)."""
    if len(sources) == 1:
        return sources[0], sources[0].names.index(name)
    return next(source for source in sources if source.key == name), 0


def _is_npz(path) -> bool:
    return str(path).lower().endswith(".npz")


def _open_sources(path, stack) -> list:
    """The stored arrays: one 2-D array, or 1-D arrays, one per column (a
    .npz's archive stays open in ``stack``)."""
    if _is_npz(path):
        return _open_npz(path, stack)
    return [_Source(lambda: open(path, "rb"), path, os.path.getsize(path))]


def _open_npz(path, stack) -> list:
    try:
        archive = stack.enter_context(zipfile.ZipFile(path))
        members = [info for info in archive.infolist() if info.filename.endswith(".npy")]
        if not members:
            raise DataError("the .npz archive holds no arrays", path)
        sources = [
            _Source(functools.partial(archive.open, info), path, info.file_size, info.filename[: -len(".npy")])
            for info in members
        ]
    except (zipfile.BadZipFile, NotImplementedError, RuntimeError, *_READ_ERRORS) as exc:
        # RuntimeError: an encrypted member; NotImplementedError: an unknown compression.
        raise DataError(f"not a valid .npz archive ({_one_line(exc)})", path) from None
    if len(sources) == 1:
        return sources
    for source in sources:
        if source.names != [source.key]:
            raise DataError(
                f"array '{source.key}' is not 1-D; a .npz holds either one 2-D array or 1-D arrays, one per column",
                path,
            )
    lengths = {source.key: source.rows for source in sources}
    if len(set(lengths.values())) > 1:
        detail = ", ".join(f"'{k}' {n}" for k, n in lengths.items())
        raise DataError(f"the column arrays differ in length ({detail})", path)
    return sources
