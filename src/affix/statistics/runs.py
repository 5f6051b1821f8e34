"""Per-fold moments of a file, the same to the last bit however the file is cut into parts.

Merging moments in another order rounds differently, and the error
covariance (a small difference of large scatter terms) magnifies that
rounding by the square of the signal-to-noise ratio.  So the merges follow
one fixed tree, whoever computes them.  A file's rows are grouped in tiles
of ``TILE_ROWS`` by their index in the file (left-out rows count too);
tile t's per-fold moments are computed from exactly its valid rows, and tiles
are merged along a binary tree: node (level L, position k) is the merge of
nodes (L-1, 2k) and (L-1, 2k+1) and holds tiles k*2^L .. (k+1)*2^L - 1.

Any stretch of a file's rows (a worker's byte range, a Dask block) reduces
to a :class:`Run`: the complete nodes it holds, in row order, and at either
end the rows of a tile it holds only in part (a :class:`Fragment`).  Runs of
adjacent stretches join in any grouping: the fragments of a shared tile are
put together, and sibling nodes merged, bottom up.  The whole file's run is
then the file's tiles split into maximal aligned nodes, which
:func:`finish` merges from left to right.  Each merge has the same two
operands however the file was partitioned, so a laptop and a cluster agree
exactly (given the same NumPy and BLAS).

A fleet log's run is ``labelled``: its rows carry unit ids, and a tile's
node is the tile's :class:`~affix.statistics.units.UnitMoments` (per unit and
fold, grouped on the unit column inside the tile), merged per unit along
the same tree.
"""
from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np

from affix.statistics.folds import BLOCK_ROWS, FOLD_SEED, fold_shares, merge_folds
from affix.statistics.moments import Moments
from affix.statistics.units import UnitMoments, unit_shares

TILE_ROWS = BLOCK_ROWS  # the statistics' block: a tile is reduced while it sits in the CPU cache


@dataclass(frozen=True, eq=False)
class Fragment:
    """Part of one tile: the file rows [start, end) and the valid ones among them.

    ``pieces`` holds the valid rows as the arrays they came in (joined only
    when the tile is complete), ``units`` their unit ids likewise (None for a
    run without them); ``kept`` gives their offsets from ``start``, or is None
    when every row of the span is valid."""

    start: int
    end: int
    pieces: tuple
    kept: np.ndarray | None
    units: tuple | None = None

    @property
    def tile(self) -> int:
        return self.start // TILE_ROWS


@dataclass(frozen=True, eq=False)
class Node:
    """Tiles position*2^level .. (position+1)*2^level - 1 of a file: one Moments per fold,
    or the UnitMoments of a labelled run."""

    level: int
    position: int
    parts: tuple


@dataclass(frozen=True, eq=False)
class Run:
    """The statistics of the file rows [start, end): fragments and nodes in row order.
    A plain value, cheap to send between processes (nodes are a few KB; a
    fragment is at most one tile of rows)."""

    start: int
    end: int
    pieces: tuple
    width: int
    folds: int
    file_position: int  # the file's place among the files read: where its rows start in the fold pattern
    labelled: bool = False  # its rows carry unit ids: nodes are UnitMoments

    @classmethod
    def empty(cls, start: int, width: int, folds: int, file_position: int = 0, labelled: bool = False) -> "Run":
        return cls(start, start, (), width, folds, file_position, labelled)


def run_of(numbered, width: int, folds: int, *, start: int = 0, file_position: int = 0, labelled: bool = False,
           seed: int = FOLD_SEED) -> Run:
    """The run of a stretch of a file that begins at file row ``start``, from
    ``numbered``: (first row, raw row count, valid rows, kept, units) per chunk
    in file order, ``kept`` being the valid rows' offsets from the first row
    (None when all are valid) and ``units`` their unit ids (None unless
    ``labelled``): see ChunkStream.numbered.  Rows a chunk skips count as left out."""
    builder = _Builder(Run.empty(start, width, folds, file_position, labelled), seed)
    for first, count, rows, kept, units in numbered:
        builder.add(first, count, rows, kept, units)
    return builder.run()


def join(left: Run, right: Run, seed: int = FOLD_SEED) -> Run:
    """The run of two adjacent stretches of one file (``left`` ends where ``right`` starts)."""
    if left.end != right.start or left.file_position != right.file_position:
        raise ValueError(f"runs {left.start}..{left.end} and {right.start}..{right.end} are not adjacent")
    builder = _Builder(left, seed)
    for piece in right.pieces:
        builder.push(piece)
    builder.end = right.end
    return builder.run()


def finish(run: Run, seed: int = FOLD_SEED) -> list[Moments]:
    """Per-fold moments of a whole file from its run (which starts at row 0 and ends at its last row)."""
    if run.start != 0:
        raise ValueError(f"a file's run starts at row 0, not {run.start}")
    builder = _Builder(run, seed)
    if builder.stack and isinstance(builder.stack[-1], Fragment):
        builder.push(builder.node(builder.stack.pop()))  # the last tile: complete, as the file ends there
    parts = _empty(run)
    for node in builder.stack:
        parts = merge_parts(parts, node.parts)
    return parts


def merge_parts(a, b):
    """Two results merged: per-fold lists of Moments, or UnitMoments."""
    return a.merge(b) if isinstance(a, UnitMoments) else merge_folds(a, b)


def _empty(run: Run):
    if run.labelled:
        return UnitMoments.empty(run.width, run.folds)
    return [Moments.empty(run.width)] * max(run.folds, 1)  # Moments are immutable: one empty one serves all


def accumulate(chunks, width: int, folds: int, seed: int = FOLD_SEED):
    """Per-fold moments of chunks of rows from the first row of a file on (in
    memory, or a stream's valid rows where their places do not matter); folds
    <= 1 gives one part.  Labelled chunks (values, units, rows), as a labelled
    ChunkStream yields them, give UnitMoments."""
    chunks = iter(chunks)
    head = next(chunks, None)
    labelled = isinstance(head, tuple)
    stream = numbered(itertools.chain([] if head is None else [head], chunks), labelled)
    return finish(run_of(stream, width, folds, labelled=labelled, seed=seed), seed)


def numbered(chunks, labelled: bool = False):
    """Chunks as :func:`run_of` takes them: consecutive arrays of valid rows, or
    labelled chunks (values, units, rows), ``rows`` placing them in the file (the
    first row's index, the rest following; or each row's index)."""
    first = 0
    for chunk in chunks:
        if not labelled:
            yield first, len(chunk), chunk, None, None
            first += len(chunk)
            continue
        values, units, rows = chunk
        if np.ndim(rows) == 0:
            yield int(rows), len(values), values, None, units
        elif len(rows):
            rows = np.asarray(rows, dtype=np.int64)
            yield int(rows[0]), int(rows[-1] - rows[0]) + 1, values, rows - rows[0], units


class _Builder:
    """A run being extended row by row or piece by piece: a stack of fragments and nodes
    in which no two sibling nodes stand side by side."""

    def __init__(self, run: Run, seed: int):
        self.template, self.seed = run, seed
        self.stack, self.end = list(run.pieces), run.end

    def run(self) -> Run:
        t = self.template
        return Run(t.start, self.end, tuple(self.stack), t.width, t.folds, t.file_position, t.labelled)

    def add(self, first: int, count: int, rows, kept, units=None) -> None:
        """Rows first .. first+count-1 of the file, cut at tile boundaries into fragments."""
        if first < self.end:
            raise ValueError(f"rows from {first} follow a run that ends at {self.end}")
        if first > self.end:  # rows skipped: left out
            gap = np.empty((0, self.template.width))
            self.add(self.end, first - self.end, gap, np.empty(0, np.int64), None if units is None else units[:0])
        cut = first
        while cut < first + count:
            stop = min((cut // TILE_ROWS + 1) * TILE_ROWS, first + count)
            if kept is None:
                lo, hi, offsets = cut - first, stop - first, None
            else:
                lo, hi = np.searchsorted(kept, [cut - first, stop - first])
                offsets = kept[lo:hi] - (cut - first)
            self.push(Fragment(cut, stop, (rows[lo:hi],), offsets, None if units is None else (units[lo:hi],)))
            cut = stop
        self.end = first + count

    def push(self, piece) -> None:
        top = self.stack[-1] if self.stack else None
        if isinstance(piece, Fragment) and isinstance(top, Fragment) and top.tile == piece.tile:
            piece = _joined(self.stack.pop(), piece)
        if isinstance(piece, Fragment) and piece.start % TILE_ROWS == 0 and piece.end - piece.start == TILE_ROWS:
            piece = self.node(piece)
        self.stack.append(piece)
        # Merge sibling nodes bottom up: (L, 2k) and (L, 2k+1) make (L+1, k).
        while len(self.stack) >= 2:
            left, right = self.stack[-2], self.stack[-1]
            if not (isinstance(left, Node) and isinstance(right, Node) and left.level == right.level
                    and left.position % 2 == 0 and right.position == left.position + 1):
                break
            self.stack[-2:] = [Node(left.level + 1, left.position // 2, merge_parts(left.parts, right.parts))]

    def node(self, fragment: Fragment) -> Node:
        """A tile's node from all its rows: one Moments per fold, or its UnitMoments."""
        t = self.template
        rows = _joined_arrays(fragment.pieces)
        pattern_row = t.file_position * t.folds + fragment.start  # see affix.statistics.folds
        if t.labelled:
            places = pattern_row if fragment.kept is None else pattern_row + fragment.kept
            return Node(0, fragment.tile, unit_shares(rows, _joined_arrays(fragment.units), places, t.folds, self.seed))
        parts = _empty(t)
        for fold, share in fold_shares(rows, pattern_row, t.folds, self.seed, kept=fragment.kept):
            parts[fold] = share
        return Node(0, fragment.tile, parts)


def _joined(a: Fragment, b: Fragment) -> Fragment:
    if a.end != b.start:
        raise ValueError(f"fragments {a.start}..{a.end} and {b.start}..{b.end} are not adjacent")
    if a.kept is None and b.kept is None:
        kept = None
    else:
        kept = np.concatenate([_offsets(a), _offsets(b) + (b.start - a.start)])
    return Fragment(a.start, b.end, a.pieces + b.pieces, kept, None if a.units is None else a.units + b.units)


def _joined_arrays(pieces):
    return pieces[0] if len(pieces) == 1 else np.concatenate(pieces)


def _offsets(fragment: Fragment) -> np.ndarray:
    if fragment.kept is not None:
        return fragment.kept
    return np.arange(fragment.end - fragment.start)
