"""SHA-256 of a data file, computed by a background thread while the file is parsed.

hashlib releases the GIL on large updates, so on a multi-core machine the
digest costs little wall time next to parsing.  The thread reads the file in
blocks into one reused buffer, which stays in the CPU cache for hashlib
(measured here: as fast as hashing through a memory map, and a file cut
short while it is hashed is a short read, where a memory map would kill the
process with SIGBUS).

The digest is only ever returned whole and right: a failure in the thread,
or a file that changed between the start of the digest and the end of the
pass that used the file, is a DataError naming the file, never the hash of
what happened to be read.
"""
from __future__ import annotations

import hashlib
import os
import threading

from affix.errors import DataError

_BLOCK = 1 << 20


def identity(path) -> tuple:
    """What changes when a file's content does: device, inode, size, modification time."""
    s = os.stat(path)
    return s.st_dev, s.st_ino, s.st_size, s.st_mtime_ns


class FileDigest:
    """Start hashing ``path`` now; :meth:`hexdigest` waits for the result.

    Call :meth:`hexdigest` after the last read of the file's data: it also
    checks that the file is still the one that was hashed.
    """

    def __init__(self, path):
        self._path = path
        self._sha = hashlib.sha256()
        self._failure = None
        self._read = 0
        try:
            self._identity = identity(path)
        except OSError as exc:
            raise DataError(f"cannot read the file ({exc.strerror})", path) from None
        self._thread = threading.Thread(target=self._run, daemon=True)
        self._thread.start()

    def _run(self):
        try:
            buffer = bytearray(_BLOCK)
            view = memoryview(buffer)
            with open(self._path, "rb", buffering=0) as f:
                while count := f.readinto(buffer):
                    self._sha.update(view[:count])
                    self._read += count
        except BaseException as exc:  # reported by wait(), in the thread that asks
            self._failure = exc

    def wait(self) -> None:
        """Block until the thread is done; raise DataError if it failed."""
        self._thread.join()
        if self._failure is not None:
            exc = self._failure
            reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc) or type(exc).__name__
            raise DataError(f"cannot read the file to compute its SHA-256 ({reason})", self._path)

    def hexdigest(self) -> str:
        self.wait()
        try:
            unchanged = self._read == self._identity[2] and identity(self._path) == self._identity
        except OSError:
            unchanged = False
        if not unchanged:
            raise DataError(
                "the file changed while it was read, so the fit and its SHA-256 could disagree; "
                "fit a copy that nothing writes to",
                self._path,
            )
        return self._sha.hexdigest()
