"""One pass over the chosen columns of a data file, screening invalid rows."""
from __future__ import annotations

import numpy as np

from affix.errors import DataError, parameter
from affix.intake.digest import FileDigest


class ChunkStream:
    """Iterate once for float64 chunks (k, len(columns)) in file order.

    Rows holding NaN, an infinity or an empty cell in a chosen column are
    never yielded.  Without ``drop_invalid`` the pass still runs to the end, to
    count them, and then raises DataError naming the count and the first one.
    After a complete pass the attributes hold what the pass found:
    ``rows_read`` (data rows in the file), ``rows_dropped``, ``first_invalid``
    ((row, column) or None) and ``sha256`` (of the whole file; None for
    data in memory).
    """

    def __init__(self, path, columns, raw_chunks, drop_invalid=False, first_row=0, digest=True):
        self.path, self.columns, self.drop_invalid = path, list(columns), drop_invalid
        self.first_row = first_row  # rows of the file before this pass (when it reads one part)
        self._raw = raw_chunks
        self._digest = digest and path is not None
        self.rows_read = 0
        self.rows_dropped = 0
        self.first_invalid = None
        self.sha256 = None

    def __iter__(self):
        digest = FileDigest(self.path) if self._digest else None
        for chunk in self._raw:
            count = len(chunk)
            # One sum is non-finite when any cell is (or when finite ones
            # overflow): a cheap screen before the row-by-row look.
            if not np.isfinite(chunk.sum()):
                valid = np.isfinite(chunk).all(axis=1)
                self._note_invalid(chunk, valid)
                chunk = chunk[valid]
            self.rows_read += count
            if len(chunk) and (self.drop_invalid or not self.rows_dropped):
                yield chunk
        self.sha256 = digest.hexdigest() if digest else None
        if not self.drop_invalid:
            check_invalid(self.path, self.rows_dropped, self.first_invalid)

    def _note_invalid(self, chunk, valid):
        if valid.all():
            return
        if self.first_invalid is None:
            i = int(np.argmin(valid))
            j = int(np.argmin(np.isfinite(chunk[i])))
            self.first_invalid = (self.first_row + self.rows_read + i + 1, self.columns[j])
        self.rows_dropped += int(np.count_nonzero(~valid))


def check_invalid(path, count: int, first_invalid) -> None:
    """The error for rows holding NaN, infinities or empty cells, when they are not to be dropped."""
    if count:
        row, column = first_invalid
        raise DataError(
            f"{count} row(s) hold NaN, infinite or empty values, the first in column "
            f"'{column}'; fix them or leave such rows out with {parameter('drop_invalid')}",
            path,
            row=row,
        )
