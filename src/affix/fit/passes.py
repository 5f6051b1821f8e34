"""The one pass over a data file, split across processes for large CSV files.

Parsing text is what a fit spends its time on, so a large CSV is cut into
byte ranges of whole lines, one per CPU, and each worker process reduces its
range to per-fold moments.  Folds follow the global row index, so the merged
result is the same as one sequential pass (up to rounding).  The digest of
the whole file runs in a thread of the parent while it prepares the workers.
"""
from __future__ import annotations

import os

from threadpoolctl import threadpool_limits

from affix.intake import partition, read_chunks, splittable
from affix.intake.digest import FileDigest
from affix.intake.stream import check_invalid
from affix.statistics import accumulate, merge_folds

PARALLEL_MIN_BYTES = 32 << 20  # below this, starting processes costs more than it saves


def usable_cpus() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def file_moments(path, columns, folds, *, chunk_rows, drop_invalid, workers=None):
    """Per-fold moments of the chosen columns and what the pass found:
    (parts, rows_dropped, sha256).  Raises DataError for invalid rows unless drop_invalid."""
    stream = read_chunks(path, columns, chunk_rows=chunk_rows, drop_invalid=drop_invalid)  # checks names first
    if workers is None:
        workers = usable_cpus() if os.path.getsize(path) >= PARALLEL_MIN_BYTES else 1
    if workers == 1 or not splittable(path):
        return stream_moments(stream, len(columns), folds), stream.rows_dropped, stream.sha256
    # The digest runs on another CPU while partition() loads pandas for the
    # workers, rather than later against them; it must be done before they fork.
    digest = FileDigest(path)
    ranges = partition(path, workers)
    sha256 = digest.hexdigest()
    from concurrent.futures import ProcessPoolExecutor  # here: a serial pass need not load multiprocessing

    with ProcessPoolExecutor(len(ranges)) as pool:
        jobs = [pool.submit(_part_moments, path, columns, folds, chunk_rows, part) for part in ranges]
        results = [job.result() for job in jobs]
    parts, dropped, first_invalid = results[0]
    for more, count, first in results[1:]:
        parts, dropped = merge_folds(parts, more), dropped + count
        first_invalid = first_invalid or first
    if not drop_invalid:
        check_invalid(path, dropped, first_invalid)
    return parts, dropped, sha256


def _part_moments(path, columns, folds, chunk_rows, part):
    stream = read_chunks(path, columns, chunk_rows=chunk_rows, drop_invalid=True, part=part)
    return stream_moments(stream, len(columns), folds), stream.rows_dropped, stream.first_invalid


def stream_moments(stream, width, folds):
    """Per-fold moments of one ChunkStream."""
    # The products here are skinny (rows x a few columns): one BLAS thread
    # does them at memory speed, and more would spin against the threads that
    # parse and hash the file, which on a small machine costs many times over.
    with threadpool_limits(limits=1, user_api="blas"):
        return accumulate(stream, width, folds, first_row=stream.first_row)
