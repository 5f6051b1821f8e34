"""The one pass over a data file, split across processes for large CSV files.

Parsing text is what a fit spends its time on, so a large CSV is cut into
byte ranges of whole lines, one per CPU, and each worker process reduces its
range to per-fold moments.  Folds follow the global row index, so the merged
result is the same as one sequential pass (up to rounding).  The digest of
the whole file runs in a thread of the parent while it prepares the workers.
"""
from __future__ import annotations

import os
import signal
import traceback

from threadpoolctl import threadpool_limits

from affix.errors import AffixError
from affix.intake import partition, read_chunks, splittable
from affix.intake.digest import FileDigest
from affix.intake.stream import check_invalid
from affix.statistics import UnitMoments, accumulate, accumulate_units, merge_folds

PARALLEL_MIN_BYTES = 32 << 20  # below this, starting processes costs more than it saves


def usable_cpus() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def file_moments(path, columns, folds, *, chunk_rows, drop_invalid, workers=None, labels=None):
    """Per-fold moments of the chosen columns and what the pass found:
    (parts, rows_dropped, sha256).  Raises DataError for invalid rows unless drop_invalid.
    With ``labels`` (the unit column) the parts are UnitMoments, per unit and fold."""
    stream = read_chunks(path, columns, chunk_rows=chunk_rows, drop_invalid=drop_invalid, labels=labels)  # checks names first
    if workers is None:
        workers = usable_cpus() if os.path.getsize(path) >= PARALLEL_MIN_BYTES else 1
    if workers == 1 or not splittable(path):
        return stream_moments(stream, len(columns), folds), stream.rows_dropped, stream.sha256
    # The digest runs on another CPU while partition() loads pandas for the
    # workers, rather than later against them; it must be done before they fork.
    digest = FileDigest(path)
    ranges = partition(path, workers)
    digest.wait()
    results = in_workers(_part_moments, [(path, columns, folds, chunk_rows, part, labels) for part in ranges])
    sha256 = digest.hexdigest()  # after the workers' reads: it checks that the file did not change meanwhile
    parts, dropped, first_invalid = results[0]
    for more, count, first in results[1:]:
        parts, dropped = merge_parts(parts, more), dropped + count
        first_invalid = first_invalid or first
    if not drop_invalid:
        check_invalid(path, dropped, first_invalid)
    return parts, dropped, sha256


def in_workers(function, jobs) -> list:
    """function(*job) for each job, in one forked process each; the
    results in job order, so the first error raised is the first in the file,
    as in one pass.

    A terminal sends Ctrl-C's SIGINT to every process of its group: workers
    ignore it and leave it to this process, whose KeyboardInterrupt (like any
    error) ends them all before it goes on, so none prints a traceback or
    outlives the command.  SIGINT stays blocked here from before the forks
    until every worker has started, so none is caught half set up and the
    interrupt is taken once there are workers to end.
    """
    import multiprocessing  # here: a serial pass need not load it

    context = multiprocessing.get_context("fork")  # the workers share the pandas this process loaded
    workers = []
    unblocked = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        for job in jobs:
            receive, send = context.Pipe(duplex=False)
            process = context.Process(target=_worker, args=(send, function, job), daemon=True)
            process.start()
            send.close()
            workers.append((process, receive))
        signal.pthread_sigmask(signal.SIG_SETMASK, unblocked)
        results = []
        for process, receive in workers:
            try:
                succeeded, value = receive.recv()
            except EOFError:  # killed, by the out-of-memory killer say: no user error, but no hang either
                process.join()
                raise RuntimeError(f"a worker process ended with status {process.exitcode} before its result") from None
            if not succeeded:
                raise value
            results.append(value)
        return results
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, unblocked)
        for process, receive in workers:
            process.terminate()  # nothing to do for those that are done
            process.join()
            receive.close()


def _worker(send, function, job):
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, {signal.SIGINT})
    try:
        send.send((True, function(*job)))
    except AffixError as exc:
        send.send((False, exc))
    except BaseException as exc:  # a bug: its traceback goes to the parent, whose stderr the user sees
        send.send((False, RuntimeError("in a worker process:\n" + "".join(traceback.format_exception(exc)))))


def _part_moments(path, columns, folds, chunk_rows, part, labels):
    stream = read_chunks(path, columns, chunk_rows=chunk_rows, drop_invalid=True, part=part, labels=labels)
    return stream_moments(stream, len(columns), folds), stream.rows_dropped, stream.first_invalid


def stream_moments(stream, width, folds):
    """Per-fold moments of one ChunkStream; UnitMoments for a stream with a unit column."""
    # The products here are skinny (rows x a few columns): one BLAS thread
    # does them at memory speed, and more would spin against the threads that
    # parse and hash the file, which on a small machine costs many times over.
    with threadpool_limits(limits=1, user_api="blas"):
        if stream.label_column is not None:
            return accumulate_units(stream, width, folds)
        return accumulate(stream, width, folds, first_row=stream.first_row)


def merge_parts(a, b):
    """Two passes' results merged: per-fold lists of Moments, or UnitMoments."""
    return a.merge(b) if isinstance(a, UnitMoments) else merge_folds(a, b)
