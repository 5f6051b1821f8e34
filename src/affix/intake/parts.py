"""A part of a data file that can be read on its own, by another process or machine."""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Part:
    """``span`` in the format's own terms: a CSV's bytes [start, end) of whole
    lines, a .npy's rows [start, end), a Parquet file's row groups [start, end);
    None for the whole file (a format that cannot be split, .npz).
    ``first_row`` is how many data rows of the file come before it, or None
    where that takes counting (a CSV's lines: see :func:`affix.intake.count_rows`).
    ``size`` is the bytes it covers in the file, which block sizes and progress go by."""

    span: tuple[int, int] | None
    first_row: int | None
    size: int


def even_cuts(sizes, parts: int) -> list[int]:
    """Where to cut a sequence of pieces of these sizes into up to ``parts`` runs of
    about equal total size: the indices at which each run starts, the first being 0."""
    total, cuts, running = sum(sizes), [0], 0
    for index, size in enumerate(sizes[:-1]):
        running += size
        if running * parts >= total * len(cuts) and len(cuts) < parts:
            cuts.append(index + 1)
    return cuts
