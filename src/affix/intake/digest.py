"""SHA-256 of a data file, computed by a background thread while the file is parsed.

hashlib releases the GIL on large updates, so on a multi-core machine the
digest costs little wall time next to parsing.  The thread reads the file
sequentially on its own; the parser's reads of the same pages then come from
the operating system's cache rather than the disk.
"""
from __future__ import annotations

import hashlib
import threading

_BLOCK = 1 << 22


class FileDigest:
    def __init__(self, path):
        self._sha = hashlib.sha256()
        self._thread = threading.Thread(target=self._run, args=(path,), daemon=True)
        self._thread.start()

    def _run(self, path):
        with open(path, "rb") as f:
            while block := f.read(_BLOCK):
                self._sha.update(block)

    def hexdigest(self) -> str:
        self._thread.join()
        return self._sha.hexdigest()
