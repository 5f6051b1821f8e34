"""The one pass over the data files on this machine, a large CSV split across processes.

Parsing text is what a fit spends its time on, so a large CSV is cut into
byte ranges of whole lines, one per CPU, and each worker process reduces its
range to a run of per-fold moments (affix.fit.blocks).  Rows keep their
places in the file, so the result is the same to the last bit as one
sequential pass.  The digest of the whole file and the line counts that
place each part run in processes of their own while the workers are
prepared.  Files are read one after the other, each checked to the end
before the next, and the first error ends the pass.
"""
from __future__ import annotations

import itertools
import os
import signal
import traceback
from contextlib import contextmanager
from dataclasses import replace

from affix.errors import AffixError
from affix.fit.blocks import (Pass, Result, block_outcome, blocks_of, file_digest, finish_file, join_outcomes,
                              merge_results, outcome_of, rows_after, rows_in, stream_run, tree)
from affix.intake import check_columns, partition, preload, splittable
from affix.statistics import finish

PARALLEL_MIN_BYTES = 32 << 20  # below this, starting processes costs more than it saves


def usable_cpus() -> int:
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1)


def file_moments(path, columns, folds, *, chunk_rows, drop_invalid, workers=None, labels=None):
    """Per-fold moments of one file's chosen columns and what the pass found: (parts,
    rows_dropped, sha256), on this machine in ``workers`` processes (see LocalEngine).
    Raises DataError for invalid rows unless drop_invalid.  With ``labels`` (the unit
    column) the parts are UnitMoments, per unit and fold."""
    return LocalEngine(workers).moments([path], Pass(tuple(columns), folds, drop_invalid, chunk_rows, labels))


def stream_moments(stream, width: int, folds: int):
    """Per-fold moments of one ChunkStream of a whole file or of data in memory; UnitMoments
    for a stream with a unit column."""
    return finish(stream_run(stream, width, folds))


class LocalEngine:
    """The pass on this machine: files in order, a large CSV in one process per CPU
    (``workers``: how many; by default as many as there are CPUs, for files of
    PARALLEL_MIN_BYTES and more)."""

    def __init__(self, workers: int | None = None):
        self.workers = workers

    def moments(self, paths, settings: Pass):
        """(per-fold moments, rows left out, data hash) of the files, in order."""
        for path in paths:  # every file's columns, before any row is read
            check_columns(path, settings.read_columns)
        results = []
        for position, path in enumerate(paths):
            results.append(self.file_result(position, path, settings))
            if results[-1].error is not None:
                break
        return outcome_of(tree(results, merge_results))

    def file_result(self, position: int, path, settings: Pass) -> Result:
        workers = self.workers
        if workers is None:
            workers = usable_cpus() if os.path.getsize(path) >= PARALLEL_MIN_BYTES else 1
        if workers == 1 or not splittable(path):
            (block,) = blocks_of(position, path, None)
            return finish_file(block_outcome(block, settings), None, path, settings)
        # While this process loads pandas for the workers, the digest runs in
        # a process of its own (in a thread here it would wait for the GIL
        # through most of that import), and each part but the last counts its
        # lines in another, so that no worker first counts the lines before
        # its part (the last one's would be nearly the whole file).  Every
        # block bears the file's stamp from before the digest starts, and each
        # reader checks it before and after its reads, so the digest, the
        # counts and the statistics are of one version of the file.
        (whole,) = blocks_of(position, path, None)
        with forked(file_digest, [(whole,)]) as digest:
            blocks = [replace(whole, part=part) for part in partition(path, workers)]
            with forked(rows_in, [(block,) for block in blocks[:-1]]) as counted:
                preload(path)
                counts = counted()
            first_rows = itertools.accumulate(counts, rows_after, initial=0)
            jobs = [(block, settings, first_row) for block, first_row in zip(blocks, first_rows)]
            outcome = tree(in_workers(block_outcome, jobs), join_outcomes)
            (sha256,) = digest()
        return finish_file(outcome, sha256, path, settings)


def in_workers(function, jobs) -> list:
    """function(*job) for each job, in one forked process each; the results in
    job order (an AffixError raised in a worker is raised here, the first in
    job order; block_outcome returns them as values instead)."""
    with forked(function, jobs) as results:
        return results()


@contextmanager
def forked(function, jobs):
    """Start function(*job) for each job in a forked process of its own, now;
    the value of the context is a function that waits for their results (as
    :func:`in_workers` returns them).  Leaving the context ends every one
    still running, so a command that stops early (an error, Ctrl-C) leaves none.

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

    def results() -> list:
        values = []
        for process, receive in workers:
            try:
                succeeded, value = receive.recv()
            except EOFError:  # killed, by the out-of-memory killer say: no user error, but no hang either
                process.join()
                raise RuntimeError(f"a worker process ended with status {process.exitcode} before its result") from None
            if not succeeded:
                raise value
            values.append(value)
        return values

    unblocked = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        for job in jobs:
            receive, send = context.Pipe(duplex=False)
            process = context.Process(target=_worker, args=(send, function, job), daemon=True)
            process.start()
            send.close()
            workers.append((process, receive))
        signal.pthread_sigmask(signal.SIG_SETMASK, unblocked)
        yield results
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

