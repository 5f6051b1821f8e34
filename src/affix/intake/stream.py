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

    With ``label_column`` (the unit column of a fleet log) each item is a
    labelled chunk ``(values, units, rows)``: the float64 values, each row's
    unit id as text (checked against :mod:`affix.unit_ids`; an empty one
    makes the row invalid), and the rows' places in the file, as
    :func:`affix.statistics.unit_shares` takes them: the index of the first
    row (from 0) when they are consecutive, else an array of indices (rows
    left out by ``drop_invalid`` keep their places, so folds never shift).
    A raw item is then a pair (values, labels), or one array whose last
    column holds the labels as numbers (array files).
    """

    def __init__(self, path, columns, raw_chunks, drop_invalid=False, first_row=0, digest=True, first_line=None,
                 label_column=None):
        self.path, self.columns, self.drop_invalid = path, list(columns), drop_invalid
        self.label_column = label_column
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
        for first, _, rows, kept, units in self.numbered():
            if not len(rows):
                continue
            if units is None:
                yield rows
            else:  # what affix.statistics.unit_shares takes: rows placed by their index in the file
                yield rows, units, first if kept is None else first + kept

    def numbered(self):
        """The same pass as (first, count, rows, kept, units) per chunk: the file
        rows first .. first+count-1 were read, ``rows`` are the valid ones,
        ``kept`` their offsets from ``first`` (None when all are valid) and
        ``units`` their unit ids (None without a label column): what
        :func:`affix.statistics.run_of` takes, so rows keep their places in the file."""
        # A source that reads the whole file itself hashes it as it goes (see
        # array_format.HashedRows); any other gets a thread that reads it again.
        hashing = self._raw if hasattr(self._raw, "hexdigest") else None
        digest = (hashing or FileDigest(self.path)) if self._digest else None
        for chunk in self._raw:
            labels = None
            if self.label_column is not None:
                chunk, labels = chunk if isinstance(chunk, tuple) else (chunk[:, :-1], chunk[:, -1])
            count = len(chunk)
            # One BLAS sum of squares is finite and small unless some cell is
            # NaN, infinite or very large: a cheap screen before the row-by-row look.
            cells = chunk.ravel(order="K")
            with np.errstate(over="ignore", invalid="ignore"):
                squares = float(np.dot(cells, cells))
            valid = None
            if not squares <= LARGEST_VALUE**2:
                valid = self._screen(chunk)
            if labels is not None:
                labels, valid = self._unit_labels(labels, valid)
            first = self.first_row + self.rows_read
            self.rows_read += count
            kept = None
            if valid is not None and not valid.all():
                self._note_invalid(valid, first, chunk)
                chunk, kept = chunk[valid], np.flatnonzero(valid)
                labels = None if labels is None else labels[valid]
            if self.drop_invalid or not self.rows_dropped:
                yield first, count, chunk, kept, labels
        self.sha256 = digest.hexdigest() if digest else None
        if not self.drop_invalid:
            check_invalid(self.path, self.rows_dropped, self.first_invalid)

    def _screen(self, chunk):
        """Which of the chunk's rows hold only finite values; refuses values too large."""
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
        return finite.all(axis=1)

    def _note_invalid(self, valid, first, chunk) -> None:
        """Counts the rows ``valid`` leaves out and notes the first, with the column at fault."""
        if self.first_invalid is None:
            i = int(np.argmin(valid))
            finite = np.isfinite(chunk[i])
            column = self.columns[int(np.argmin(finite))] if not finite.all() else self.label_column
            self.first_invalid = (self.place(first + i), column)
        self.rows_dropped += int(np.count_nonzero(~valid))

    def _unit_labels(self, labels, valid):
        """The unit ids as text and the rows that have one (an empty cell is a missing value);
        an id that breaks the rule of affix.unit_ids is an error at its first row."""
        import pandas as pd

        from affix.unit_ids import unit_id_problem

        labels = np.asarray(labels)
        if labels.dtype.kind == "f":  # an array file's column: whole numbers only
            present = np.isfinite(labels)
            whole = present & (labels == np.floor(labels)) & (labels >= 0) & (labels < 2.0**53)
            if (present & ~whole).any():
                i = int(np.argmax(present & ~whole))
                raise DataError(f"unit id {float(labels[i])!r} is not a whole number >= 0 (an array file's unit column "
                                "holds integers)", self.path, column=self.label_column,
                                **self.place(self.first_row + self.rows_read + i))
            text = np.full(len(labels), None, dtype=object)
            text[present] = labels[present].astype(np.int64).astype(str)
            labels = text
        elif labels.dtype.kind in "iu":
            present = np.ones(len(labels), bool)
            labels = labels.astype(str).astype(object)
        else:
            present = None
        codes, uniques = pd.factorize(labels)  # a missing id (None, NaN) is code -1
        if present is None:
            present = codes >= 0
        if not present.all():
            valid = present if valid is None else valid & present
        for code, label in enumerate(uniques):
            problem = unit_id_problem(str(label))
            if problem:
                i = int(np.argmax(codes == code))
                raise DataError(problem, self.path, column=self.label_column,
                                **self.place(self.first_row + self.rows_read + i))
        return labels, valid


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
