"""The fit's one pass over its files as blocks any engine can run: the map and the ordered reduce.

A :class:`Block` is one file, or a part of one, with its place in the
ordered list of files.  :func:`block_outcome` is the map: the block's rows
reduced to a :class:`affix.statistics.Run` (which knows each row's place in
its file, so folds and rounding do not depend on the blocks).  The reduce
keeps the single-machine pass's order of errors, whatever order the blocks
finish in: user errors travel as values, and every merge keeps the first in
file order.  Within a file a bad cell anywhere comes first (the pass stops
there), then a file that changed while it was read, then invalid rows (the
pass counts them to the end); across files, the first file's error wins.
The engines (:mod:`affix.fit.passes` on one machine, :mod:`affix.fit.dask_engine`
on a cluster) only decide where each function runs.
"""
from __future__ import annotations

import os
from dataclasses import dataclass, field

from threadpoolctl import threadpool_limits

from affix.errors import AffixError, DataError
from affix.intake import count_rows, read_chunks
from affix.intake.digest import FileDigest, changed, stamp
from affix.intake.parts import Part
from affix.intake.sources import data_hash
from affix.intake.stream import check_invalid
from affix.statistics import Run, finish, join, merge_parts, run_of


@dataclass(frozen=True)
class Pass:
    """What every block of one fit reads and gathers: ``columns`` per fold, and
    per unit too where ``labels`` names a fleet log's unit column."""

    columns: tuple
    folds: int
    drop_invalid: bool
    chunk_rows: int | None = None
    labels: str | None = None

    @property
    def width(self) -> int:
        return len(self.columns)

    @property
    def read_columns(self) -> list:
        """Every column the pass reads: the unit column too."""
        return list(self.columns) + ([] if self.labels is None else [self.labels])


@dataclass(frozen=True)
class Block:
    """A file's ``part`` (None: the whole file, read with its digest).  ``position`` is the
    file's place in the ordered list; ``path`` where it is opened (absolute: a worker
    runs in a folder of its own), ``name`` what messages call it (as the user named it);
    ``stamp`` its size and modification time when the pass was planned, which every
    read checks (affix.intake.digest.stamp)."""

    position: int
    path: str
    name: str
    part: Part | None
    stamp: tuple

    @property
    def size(self) -> int:
        return self.stamp[0] if self.part is None else self.part.size


@dataclass(frozen=True, eq=False)
class Outcome:
    """What a stretch of one file's blocks found: their run, the rows left out and the
    first of them, the file's SHA-256 where the stretch is the whole file read with its
    digest; or the first error, which makes the rest moot."""

    run: Run | None = None
    dropped: int = 0
    first_invalid: tuple | None = None
    sha256: str | None = None
    error: AffixError | None = None


@dataclass(frozen=True, eq=False)
class Result:
    """Per-fold moments of files (a run of consecutive ones), the rows left out and each
    file's (name, SHA-256) in order; or the first error among them."""

    parts: list | None = None
    dropped: int = 0
    digests: list = field(default_factory=list)
    error: AffixError | None = None


def blocks_of(position: int, path, parts) -> list[Block]:
    """The blocks of one file, cut at ``parts`` (None: the file whole)."""
    now = stamp(path)
    return [Block(position, os.path.abspath(path), str(path), part, now) for part in (parts or [None])]


def block_outcome(block: Block, settings: Pass, first_row=None) -> Outcome:
    """The map: one block's rows reduced to a Run; ``first_row`` the rows of the file
    before the block where its part does not know it (counted beforehand: :func:`rows_in`,
    :func:`rows_after`), or the error that prevented counting them."""
    if isinstance(first_row, AffixError):
        return Outcome(error=first_row)
    try:
        _check_unchanged(block)
        stream = read_chunks(block.path, settings.columns, chunk_rows=settings.chunk_rows, drop_invalid=True,
                             part=block.part, first_row=first_row, labels=settings.labels)
        run = stream_run(stream, settings.width, settings.folds, block.position)
        _check_unchanged(block)
        return Outcome(run, stream.rows_dropped, stream.first_invalid, stream.sha256)
    except AffixError as exc:
        return Outcome(error=_named(exc, block))


def stream_run(stream, width: int, folds: int, file_position: int = 0) -> Run:
    """The run of a ChunkStream's rows (per unit too, where it has a unit column)."""
    # The products here are skinny (rows x a few columns): one BLAS thread
    # does them at memory speed, and more would spin against the threads that
    # parse and hash the file, which on a small machine costs many times over.
    with threadpool_limits(limits=1, user_api="blas"):
        return run_of(stream.numbered(), width, folds, start=stream.first_row, file_position=file_position,
                      labelled=stream.label_column is not None)


def file_digest(block: Block):
    """The whole file's SHA-256, or the error that prevented it (an AffixError as a value)."""
    try:
        _check_unchanged(block)
        sha256 = FileDigest(block.path).hexdigest()
        _check_unchanged(block)
        return sha256
    except AffixError as exc:
        return _named(exc, block)


def rows_in(block: Block):
    """The data rows in the block's part of a CSV (its lines: what the blocks after it need
    to know where they start), or the error that prevented counting them (an AffixError as a value)."""
    try:
        _check_unchanged(block)
        return count_rows(block.path, block.part)
    except OSError as exc:
        return _named(DataError(f"cannot read the file ({exc.strerror})", block.path), block)
    except AffixError as exc:
        return _named(exc, block)


def rows_after(before, rows):
    """The rows before the next block: those ``before`` this one plus its own ``rows``
    (:func:`rows_in`), or the first error of the two."""
    for value in (before, rows):
        if isinstance(value, AffixError):
            return value
    return before + rows


def join_outcomes(left: Outcome, right: Outcome) -> Outcome:
    """Two adjacent stretches of one file as one."""
    if left.error is not None:
        return left
    if right.error is not None:
        return right
    return Outcome(join(left.run, right.run), left.dropped + right.dropped, left.first_invalid or right.first_invalid)


def finish_file(outcome: Outcome, digest, path, settings: Pass) -> Result:
    """A whole file's outcome (and its digest, where a separate read made it) as a Result."""
    try:
        if outcome.error is not None:
            raise outcome.error
        sha256 = outcome.sha256 if digest is None else digest
        if isinstance(sha256, AffixError):
            raise sha256
        if not settings.drop_invalid:
            check_invalid(path, outcome.dropped, outcome.first_invalid)
        return Result(finish(outcome.run), outcome.dropped, [(os.fspath(path), sha256)])
    except AffixError as exc:
        return Result(error=exc)


def merge_results(left: Result, right: Result) -> Result:
    """Consecutive files as one Result: the first error in file order, or the merged moments."""
    if left.error is not None:
        return left
    if right.error is not None:
        return right
    return Result(merge_parts(left.parts, right.parts), left.dropped + right.dropped, left.digests + right.digests)


def tree(items, combine):
    """``items`` combined pairwise as a balanced binary tree, always of the same shape
    for the same number of items (so the same rounding), whatever ``combine`` runs on."""
    items = list(items)
    while len(items) > 1:
        merged = [combine(a, b) for a, b in zip(items[::2], items[1::2])]
        items = merged + ([items[-1]] if len(items) % 2 else [])
    return items[0]


def outcome_of(result: Result):
    """(per-fold moments, rows left out, data hash) of all the files, or their first error raised."""
    if result.error is not None:
        raise result.error
    return result.parts, result.dropped, data_hash(result.digests)


def _named(error: AffixError, block: Block) -> AffixError:
    """The error naming the file as the user did, not by the absolute path it was opened by."""
    if isinstance(error, DataError) and error.path is not None and os.fspath(error.path) == block.path:
        return error.at(block.name)
    return error


def _check_unchanged(block: Block) -> None:
    try:
        now = stamp(block.path)
    except OSError:
        raise DataError("no such file" if not os.path.exists(block.path) else "cannot read the file",
                        block.path) from None
    if now != block.stamp:
        raise changed(block.path)
