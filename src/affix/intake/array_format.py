"""NumPy files: .npy holds one 2-D array, .npz a set of arrays.

Columns of a 2-D array are named by their index: "0", "1", ...  In a .npz,
each 1-D array is one column named by its key (``np.savez(path, Fx=..., b1=...)``);
a .npz holding a single 2-D array is read like a .npy.

Both are streamed with plain sequential reads of a few rows at a time (no
memory map, whose touched pages would count against the process), so memory
stays constant whatever the file size.
"""
from __future__ import annotations

import zipfile
from contextlib import ExitStack

import numpy as np

from affix.errors import DataError

# Rows per read: the statistics' block size (affix.statistics.folds.BLOCK_ROWS),
# so a block read stays in the CPU cache while the statistics work through it.
CHUNK_ROWS = 1 << 14


def column_names(path) -> list[str]:
    with ExitStack() as stack:
        return list(_open_columns(path, stack))


def raw_chunks(path, columns, chunk_rows):
    with ExitStack() as stack:
        sources = _open_columns(path, stack)
        wanted = {}  # source -> [(column in the result, position in the stored rows)]
        for j, name in enumerate(columns):
            source = sources[name]
            wanted.setdefault(source, []).append((j, source.names.index(name)))
        remaining = next(iter(sources.values())).rows
        while remaining:
            k = min(chunk_rows, remaining)
            remaining -= k
            if len(wanted) == 1:  # one stored array: a single copy, gathering columns only if needed
                ((source, pairs),) = wanted.items()
                positions = [p for _, p in pairs]
                rows = source.read(k)
                if positions != list(range(source.width)):
                    rows = rows[:, positions]
                yield rows.astype(np.float64, copy=False)
                continue
            chunk = np.empty((k, len(columns)))
            for source, pairs in wanted.items():
                chunk[:, [j for j, _ in pairs]] = source.read(k)[:, [p for _, p in pairs]]
            yield chunk


class _Source:
    """One stored array read row block by row block: its column names and rows."""

    def __init__(self, stream, path, key=None):
        self.stream, self.path = stream, path
        try:
            version = np.lib.format.read_magic(stream)
            read_header = np.lib.format.read_array_header_1_0 if version == (1, 0) else np.lib.format.read_array_header_2_0
            shape, fortran, dtype = read_header(stream)
        except (ValueError, OSError) as exc:
            raise DataError(f"not a valid NumPy array{_of(key)} ({exc})", path) from None
        if dtype.hasobject or dtype.names or dtype.kind not in "biuf":
            raise DataError(f"array{_of(key)} has dtype {dtype}; expected plain numbers", path)
        if len(shape) == 1 and key is not None:
            self.width, self.names = 1, [key]
        elif len(shape) == 2:
            self.width, self.names = shape[1], [str(j) for j in range(shape[1])]
        else:
            raise DataError(f"array{_of(key)} has shape {shape}; expected a 2-D array (rows, columns)", path)
        if fortran and self.width > 1:
            raise DataError(
                f"array{_of(key)} is stored in Fortran order and cannot be read row by row; "
                "save np.ascontiguousarray(a) instead",
                path,
            )
        self.dtype, self.rows = dtype, shape[0]

    def read(self, k) -> np.ndarray:
        """The next k rows, read straight into a fresh array (no intermediate bytes object)."""
        rows = np.empty((k, self.width), dtype=self.dtype)
        target = memoryview(rows.reshape(-1).view(np.uint8))
        filled = 0
        while filled < len(target):
            count = self.stream.readinto(target[filled:])
            if not count:
                raise DataError("the file ends before the array it declares", self.path)
            filled += count
        return rows


def _of(key):
    return f" '{key}'" if key else ""


def _open_columns(path, stack) -> dict:
    """Column name -> the _Source that delivers it."""
    if str(path).lower().endswith(".npz"):
        return _open_npz(path, stack)
    source = _Source(stack.enter_context(open(path, "rb")), path)
    return {name: source for name in source.names}


def _open_npz(path, stack) -> dict:
    try:
        archive = stack.enter_context(zipfile.ZipFile(path))
    except zipfile.BadZipFile:
        raise DataError("not a valid .npz archive", path) from None
    keys = [n[: -len(".npy")] for n in archive.namelist() if n.endswith(".npy")]
    if not keys:
        raise DataError("the .npz archive holds no arrays", path)
    sources = {key: _Source(stack.enter_context(archive.open(key + ".npy")), path, key) for key in keys}
    if len(keys) == 1:
        (source,) = sources.values()
        return {name: source for name in source.names}
    for key, source in sources.items():
        if source.names != [key]:
            raise DataError(
                f"array '{key}' is not 1-D; a .npz holds either one 2-D array or 1-D arrays, one per column",
                path,
            )
    lengths = {key: s.rows for key, s in sources.items()}
    if len(set(lengths.values())) > 1:
        detail = ", ".join(f"'{k}' {n}" for k, n in lengths.items())
        raise DataError(f"the column arrays differ in length ({detail})", path)
    return sources
