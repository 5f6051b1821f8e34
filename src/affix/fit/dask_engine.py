"""The fit's pass on a Dask cluster: the blocks, map and ordered reduce of
:mod:`affix.fit.blocks`, run by ``dask.distributed``.

Every file is cut into blocks of about ``block_bytes``: whole lines of a
CSV, rows of a .npy, row groups of a Parquet file (a .npz is one block).
Where a block cannot know how many rows come before it (a CSV's), a small
task per block counts its lines first, at memory speed, and a chain of
additions gives each block its first row; so every row keeps its place in
its file, and with it its fold and the merge tree of
:mod:`affix.statistics.runs`.  A task per file hashes it.  The reduce runs
on the workers: a file's block outcomes are joined pairwise, then finished
with the file's digest, then the files' results merged as the same balanced
tree as on one machine; only the result (a few KB per fold) reaches the
client.  A worker that dies takes its tasks with it and Dask runs them again
elsewhere (up to ``distributed.scheduler.allowed-failures`` times); the
result does not change.

The workers open the files by the paths given here: on a cluster of
several machines the data must be at the same path on every one (a shared
or mounted file system), and every worker needs affix (the same version).
"""
from __future__ import annotations

import logging
import math
import os
import signal
import threading
from contextlib import contextmanager
from dataclasses import replace

from affix.errors import ToolError, UsageError, parameter
from affix.fit.blocks import (Pass, block_outcome, blocks_of, file_digest, finish_file, join_outcomes,
                              merge_results, outcome_of, rows_after, rows_in, tree)
from affix.fit.passes import usable_cpus
from affix.intake import check_columns, partition
from affix.intake.digest import changed, stamp
from affix.progress import no_bar

INSTALL_HINT = "pip install 'affix[dask]'"
# Dask's own default for dask.dataframe.read_csv: large enough that a task's
# overhead (a few ms) is small against its parsing (about a second), small
# enough that a file of a few GB keeps many workers busy.
BLOCK_BYTES = 64 << 20


class DaskEngine:
    """Runs the pass on the Dask cluster at ``scheduler`` ("tcp://host:8786"), or
    on a ``distributed.Client`` given as it is; without one, on a LocalCluster
    started for the fit with one single-threaded worker process per CPU
    (``workers`` of them, if given) and shut down after it.

    ``bar`` shows the progress (see :mod:`affix.progress`): it is told the bytes
    of the blocks done as each one finishes.  ``scheduler_parameter`` is what
    an unreachable scheduler's error names (a build names its project key)."""

    def __init__(self, scheduler=None, *, block_bytes: int = BLOCK_BYTES, workers: int | None = None, bar=no_bar,
                 scheduler_parameter: str = "scheduler"):
        if isinstance(block_bytes, bool) or not (isinstance(block_bytes, int) and block_bytes >= 1):
            raise UsageError(f"must be a whole number of bytes >= 1, got {block_bytes!r}", parameter="block_bytes")
        self.scheduler, self.block_bytes, self.workers, self.bar = scheduler, block_bytes, workers, bar
        self.scheduler_parameter = scheduler_parameter

    def moments(self, paths, settings: Pass):
        """(per-fold moments, rows left out, data hash) of the files, in order."""
        for path in paths:  # every file's columns, before any block is sent
            check_columns(path, settings.read_columns)
        with self._client() as client:
            files = [blocks_of(position, path, partition(path, self._pieces(path))) for position, path in enumerate(paths)]
            outcomes, result = self._submit(client, files, settings)
            self._wait(client, outcomes, [block for blocks in files for block in blocks])
            final = _result(result)
        for blocks in files:  # a file that changed after its tasks ran
            if stamp(blocks[0].path) != blocks[0].stamp:
                raise changed(blocks[0].name)
        return outcome_of(final)

    def _pieces(self, path) -> int:
        return max(1, math.ceil(os.path.getsize(path) / self.block_bytes))

    def _submit(self, client, files, settings):
        """Every task of the pass: the block outcomes (to follow) and the final result."""
        outcomes, results = [], []
        for blocks in files:
            whole = replace(blocks[0], part=None)
            digest = client.submit(file_digest, whole, pure=False)
            first_row, mine = 0, []
            for index, block in enumerate(blocks):
                counted = None
                if block.part.first_row is None:  # a CSV's lines: the block before counts its own
                    lines = client.submit(rows_in, blocks[index - 1], pure=False)
                    first_row = counted = client.submit(rows_after, first_row, lines, pure=False)
                mine.append(client.submit(block_outcome, block, settings, counted, pure=False))
            outcomes += mine
            joined = tree(mine, lambda a, b: client.submit(join_outcomes, a, b, pure=False))
            results.append(client.submit(finish_file, joined, digest, blocks[0].name, settings, pure=False))
        return outcomes, tree(results, lambda a, b: client.submit(merge_results, a, b, pure=False))

    def _wait(self, client, outcomes, blocks) -> None:
        from distributed import as_completed

        sizes = {future.key: block.size for future, block in zip(outcomes, blocks)}
        done = 0
        with self.bar(sum(sizes.values()), "fitting on Dask", unit="B") as update:
            for future in as_completed(outcomes, loop=client.loop):
                done += sizes[future.key]
                update(done)

    @contextmanager
    def _client(self):
        distributed = _distributed()
        if isinstance(self.scheduler, distributed.Client):
            yield self.scheduler
            return
        if self.scheduler is not None:
            try:
                client = distributed.Client(self.scheduler, set_as_default=False)
            except (OSError, ValueError, TypeError) as exc:
                raise ToolError(f"{parameter(self.scheduler_parameter)}: cannot reach the Dask scheduler at {self.scheduler} "
                                f"({_one_line(exc)})") from None
            with client:
                yield client
            return
        with _quiet_children():  # started with Ctrl-C ignored: the interrupt is this process's to handle
            # No dashboard, and the scheduler's web server (health checks) on a free port, not 8787,
            # where another cluster of this machine may already listen.
            cluster = distributed.LocalCluster(n_workers=self.workers or usable_cpus(), threads_per_worker=1,
                                               processes=True, dashboard_address=None, silence_logs=logging.ERROR,
                                               scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})
        with cluster, distributed.Client(cluster, set_as_default=False) as client:
            yield client


def _result(future):
    """The final result, with Dask's own failures as one-line errors."""
    from distributed import KilledWorker

    try:
        return future.result()
    except KilledWorker as exc:
        raise ToolError(f"Dask gave up on a task after its workers died while running it "
                        f"(distributed.scheduler.allowed-failures): {_one_line(exc)}") from None
    except ImportError as exc:
        raise ToolError(f"the Dask workers cannot run affix's tasks ({_one_line(exc)}); install affix, the same "
                        f"version, on every worker") from None


def _distributed():
    try:
        import distributed
    except ImportError:
        raise ToolError(f"the Dask engine needs dask.distributed: {INSTALL_HINT}") from None
    return distributed


@contextmanager
def _quiet_children():
    """Child processes started inside ignore SIGINT (an ignored signal stays ignored
    across exec), so a Ctrl-C at the terminal reaches only this process, which
    shuts the cluster down."""
    if threading.current_thread() is not threading.main_thread():  # only the main thread sets handlers
        yield
        return
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def _one_line(exc) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__

