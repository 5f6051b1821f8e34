"""SHA-256 of a data file, computed by a background thread while the file is parsed.

hashlib releases the GIL on large updates, so on a multi-core machine the
digest costs little wall time next to parsing.  The thread reads the file in
blocks of 1 MiB and hashes each block right after reading it, while it is in
the CPU cache (this beats hashing through a memory map; and a file cut short
while it is hashed is a short read, where a memory map would kill the
process with SIGBUS).

The thread can also read the file *for* its reader (``into=``): it fills the
buffers the reader gives, hashing as it goes, and hands them over, so a
format that reads the file byte for byte in order (.npy) reads it once, and
the digest is of exactly the bytes the data came from.  Each buffer is
filled by one read and hashed by one update, not block by block: the thread
takes the GIL back after every read and every update, and beside a reader
that runs Python code between its NumPy calls each of those waits can last
up to the interpreter's switch interval (in 1 MiB blocks they made the digest
a fifth slower).

The digest is only ever returned whole and right: a failure in the thread,
or a file that changed between the start of the digest and the end of the
pass that used the file, is a DataError naming the file, never the hash of
what happened to be read.
"""
from __future__ import annotations

import hashlib
import os
import queue
import threading

from affix.errors import DataError

_BLOCK = 1 << 20
_AHEAD = 2  # filled buffers waiting for the reader: enough to keep both threads busy


def identity(path) -> tuple:
    """What changes when a file's content does: device, inode, size, modification time."""
    s = os.stat(path)
    return s.st_dev, s.st_ino, s.st_size, s.st_mtime_ns


def stamp(path) -> tuple[int, int]:
    """Size and modification time: what changes with a file's content, and reads
    the same on every machine that mounts it (device and inode numbers need not)."""
    s = os.stat(path)
    return s.st_size, s.st_mtime_ns


class FileDigest:
    """Start hashing ``path`` now; :meth:`hexdigest` waits for the result.

    ``into``, when given, is an iterable of writable buffers (bytearrays,
    C-contiguous arrays) that together cover the file in order: the thread
    reads the file into them and :meth:`next_filled` returns each one filled,
    then None.  Call :meth:`hexdigest` after the last read of the file's data:
    it also checks that the file is still the one that was hashed; call
    :meth:`close` to let the thread go when the reader stops early.
    """

    def __init__(self, path, into=None):
        self._path = path
        self._sha = hashlib.sha256()
        self._failure = None
        self._read = 0
        self._filled = None if into is None else queue.Queue(maxsize=_AHEAD)
        self._stopped = threading.Event()
        try:
            self._identity = identity(path)
        except OSError as exc:
            raise DataError(f"cannot read the file ({exc.strerror})", path) from None
        self._thread = threading.Thread(target=self._run, args=(into,), daemon=True)
        self._thread.start()

    def _run(self, into):
        try:
            with open(self._path, "rb", buffering=0) as f:
                if into is None:
                    self._fill(f, bytearray(_BLOCK), reuse=True)
                    return
                for target in into:
                    if not self._fill(f, target) or not self._hand_over(target):
                        return  # the file ended early (hexdigest() says it changed), or the reader left
                self._read += len(f.read(1))  # a byte past the buffers fails the size check
        except BaseException as exc:  # reported by wait(), in the thread that asks
            self._failure = exc
        finally:
            if self._filled is not None:
                self._hand_over(None)

    def _fill(self, f, target, reuse=False) -> bool:
        """Read into ``target``, hashing what each read brings as it arrives.
        False if the file ended before ``target`` was full; ``reuse`` reads the
        whole file through ``target`` instead."""
        view = memoryview(target).cast("B")
        filled = 0
        while reuse or filled < len(view):
            block = view if reuse else view[filled:]
            count = f.readinto(block)
            if not count:
                return reuse
            self._sha.update(block[:count])
            self._read += count
            filled += 0 if reuse else count
        return True

    def _hand_over(self, item) -> bool:
        while not self._stopped.is_set():
            try:
                self._filled.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def next_filled(self):
        """The next buffer of ``into``, filled; None after the last (or if the thread failed: see :meth:`wait`)."""
        item = self._filled.get()
        if item is None:
            self.wait()
        return item

    def close(self) -> None:
        """Let the thread stop, for a reader that leaves before the end."""
        self._stopped.set()

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
            raise changed(self._path)
        return self._sha.hexdigest()


def changed(path) -> DataError:
    """The error for a file that changed while it was read."""
    return DataError(
        "the file changed while it was read, so the fit and its SHA-256 could disagree; fit a copy that nothing "
        "writes to",
        path,
    )

