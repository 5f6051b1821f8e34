"""One pass over the chosen columns of a data file, screening invalid rows."""
from __future__ import annotations

import numpy as np

from affix.errors import DataError, parameter
from affix.intake.digest import FileDigest

# The largest magnitude a value may have: the statistics square values and
# sum the squares over the rows, and (1e150)^2 summed over 10^8 rows still
# stays below float64's largest number, 1.8e308.
LARGEST_VALUE = 1e150


class ChunkStream:
    """Iterate once for float64 chunks (k, len(columns)) in file order.

    Rows holding NaN, an infinity or an empty cell in a chosen column are
    never yielded.  Without ``drop_invalid`` the pass still runs to the end, to
    count them, and then raises DataError naming the count and the first one.
    A value beyond ``LARGEST_VALUE`` is a DataError at once.
    After a complete pass the attributes hold what the pass found:
    ``rows_read`` (data rows in the file), ``rows_dropped``, ``first_invalid``
    ((place, column) or None, place being DataError's keywords: {"line": n}
    or {"row": n}) and ``sha256`` (of the whole file; None for data in memory).

    ``raw_chunks`` is an iterable of float64 chunks; one that reads the whole
    file itself and offers ``hexdigest()`` is taken at its word for the
    file's SHA-256 (it hashes what it reads), any other gets a FileDigest
    thread of its own.  ``first_row`` is the number of data rows of the file before this pass
    (when it reads one part); ``first_line`` the line of the file's first data
    row (2 for a CSV, whose header is line 1), or None for sources without
    lines, whose rows are named by their number from 1.
    """

    def __init__(self, path, columns, raw_chunks, drop_invalid=False, first_row=0, digest=True, first_line=None):
        self.path, self.columns, self.drop_invalid = path, list(columns), drop_invalid
        self.first_row, self.first_line = first_row, first_line
        self._raw = raw_chunks
        self._digest = digest and path is not None
        self.rows_read = 0
        self.rows_dropped = 0
        self.first_invalid = None
        self.sha256 = None

    def place(self, index: int) -> dict:
        """Where the data row ``index`` (from 0, in the whole file) is, as DataError keywords."""
        return {"row": index + 1} if self.first_line is None else {"line": self.first_line + index}

    def __iter__(self):
        # A source that reads the whole file itself hashes it as it goes (see
        # array_format.HashedRows); any other gets a thread that reads it again.
        hashing = self._raw if hasattr(self._raw, "hexdigest") else None
        digest = (hashing or FileDigest(self.path)) if self._digest else None
        for chunk in self._raw:
            count = len(chunk)
            # One BLAS sum of squares is finite and small unless some cell is
            # NaN, infinite or very large: a cheap screen before the row-by-row look.
            cells = chunk.ravel(order="K")
            with np.errstate(over="ignore", invalid="ignore"):
                squares = float(np.dot(cells, cells))
            if not squares <= LARGEST_VALUE**2:
                chunk = self._screen(chunk)
            self.rows_read += count
            if len(chunk) and (self.drop_invalid or not self.rows_dropped):
                yield chunk
        self.sha256 = digest.hexdigest() if digest else None
        if not self.drop_invalid:
            check_invalid(self.path, self.rows_dropped, self.first_invalid)

    def _screen(self, chunk):
        """The chunk's valid rows; notes the invalid ones, refuses values too large."""
        finite = np.isfinite(chunk)
        large = finite & (np.abs(chunk) > LARGEST_VALUE)
        if large.any():
            i, j = np.argwhere(large)[0]
            raise DataError(
                f"{chunk[i, j]:.6g} is beyond ±{LARGEST_VALUE:.0e}, the largest magnitude whose square "
                "the statistics can sum in double precision; rescale the column",
                self.path,
                column=self.columns[j],
                **self.place(self.first_row + self.rows_read + int(i)),
            )
        valid = finite.all(axis=1)
        if valid.all():
            return chunk
        if self.first_invalid is None:
            i = int(np.argmin(valid))
            j = int(np.argmin(finite[i]))
            self.first_invalid = (self.place(self.first_row + self.rows_read + i), self.columns[j])
        self.rows_dropped += int(np.count_nonzero(~valid))
        return chunk[valid]


def check_invalid(path, count: int, first_invalid) -> None:
    """The error for rows holding NaN, infinities or empty cells, when they are not to be dropped."""
    if count:
        place, column = first_invalid
        raise DataError(
            f"{count} row(s) hold NaN, infinite or empty values, the first in column "
            f"'{column}'; fix them or leave such rows out with {parameter('drop_invalid')}",
            path,
            **place,
        )
