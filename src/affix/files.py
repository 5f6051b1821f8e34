"""Reading and writing affix's own files (model, plan, emitted sources, manifest).

Writes are atomic: a reader sees the old content or the new, never half of
either, and a failed run leaves what was there before.  A single file goes
through a temporary file beside it and a rename; a set of files that belong
together (an emit, a build) is a :class:`FileSet`, staged whole in a
temporary folder and moved into place only when every file is written.
Every file gets the mode any other tool would give it: 0666 less the umask.

Nothing affix writes replaces a file the running command reads: the command
declares its inputs with :func:`protected`, and every write below checks
against them.

Reads turn every way a JSON file can be unreadable into one FileFormatError
naming the file; what the content must be is each file type's schema
(:mod:`affix.schema`).
"""
from __future__ import annotations

import contextlib
import contextvars
import hashlib
import json
import os
import secrets
import shutil
from collections.abc import Callable, Iterable
from pathlib import Path

from affix.errors import FileFormatError, UsageError, WriteError

# The mode a new file asks for; the kernel takes the umask off, as for any tool.
_FILE_MODE = 0o666
_FOLDER_MODE = 0o777
_STAGING = ".affix-staging-"
_NAME_KEPT = 100  # of a target's name in a temporary one, which must stay within the file system's 255 bytes

_protected: contextvars.ContextVar[frozenset] = contextvars.ContextVar("protected", default=frozenset())


@contextlib.contextmanager
def protected(paths: Iterable):
    """Within the block no write replaces or removes any of ``paths`` (the running command's inputs)."""
    identities = frozenset(filter(None, map(_identity, paths)))
    token = _protected.set(_protected.get() | identities)
    try:
        yield
    finally:
        _protected.reset(token)


def check_file_target(path, parameter: str) -> Path:
    """``path`` as a Path if a file can be written there, else a UsageError naming ``parameter``."""
    path = _target_path(path, parameter)
    with _unusable(path, parameter):
        if path.is_dir():
            raise UsageError(f"'{path}' is a folder; give a file name", parameter)
        _check_folder_of(path, parameter)
        if _is_protected(path):
            raise UsageError(f"'{path}' is an input of this command; writing there would replace it", parameter)
    return path


def check_folder_target(path, parameter: str) -> Path:
    """``path`` as a Path if a folder of files can be written there (made if missing), else a UsageError."""
    path = _target_path(path, parameter)
    with _unusable(path, parameter):
        if path.is_dir():
            if not os.access(path, os.W_OK | os.X_OK):
                raise UsageError(f"folder '{path}' is not writable", parameter)
            return path
        if path.exists():
            raise UsageError(f"'{path}' is a file, not a folder", parameter)
        _check_folder_of(path, parameter)
    return path


def write_text(path, text: str, *, parameter: str = "path") -> None:
    """Write via a temporary file in the same folder, then rename it into place.

    A device or a pipe (``/dev/null``, ``/dev/stdout``) is written as it is:
    renaming a file over it would replace the device itself.
    """
    path = check_file_target(path, parameter)
    if path.exists() and not path.is_file():
        try:
            with open(path, "w", encoding="utf-8", newline="\n") as handle:
                handle.write(text)
        except OSError as exc:
            raise WriteError(f"cannot write ({exc.strerror})", path) from None
        return
    _write_beside(path, text, os.replace)


def write_new_text(path, text: str, *, parameter: str = "path") -> None:
    """Write a file that must not exist yet: FileExistsError if it does, even if
    it appears while this runs (a hard link never replaces its target)."""
    _write_beside(check_file_target(path, parameter), text, os.link)


def _write_beside(path: Path, text: str, place) -> None:
    """``text`` into a temporary file beside ``path`` (a checked target), then ``place(temporary, path)``."""
    try:
        temporary = _new_file(path.parent, f".{path.name[:_NAME_KEPT]}.", lambda handle: handle.write(text))
    except OSError as exc:
        raise WriteError(f"cannot write ({exc.strerror})", path) from None
    try:
        place(temporary, path)
    except FileExistsError:
        raise
    except OSError as exc:
        raise WriteError(f"cannot write ({exc.strerror})", path) from None
    finally:
        if os.path.lexists(temporary):  # a rename consumed it; a link left it
            os.unlink(temporary)


def write_json(path, data, *, parameter: str = "path") -> None:
    write_text(path, json_text(data), parameter=parameter)


def json_text(data) -> str:
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


class FileSet:
    """Files that land in one folder together, or not at all.

    ::

        with FileSet(out_dir, parameter="out_dir", earlier=names_written_before) as staged:
            staged.write_text("probe.c", text)
            staged.write_json("probe.manifest.json", manifest)
            records = staged.entry("records")  # a path to fill in any other way: a file or a folder

    The entries are written into a staging folder (``staged.staging``);
    leaving the block without an exception moves them into place, and with
    one (a full disk, a file-size limit, Ctrl-C) removes the staging folder
    and leaves ``folder`` as it was.

    A folder that does not exist yet is staged beside it and appears with one
    rename.  An existing folder keeps its identity (its mode, a symbolic link
    to it, a shell whose working folder it is): the set is staged inside it,
    then every file the set replaces, and every file ``earlier(folder)`` names
    that the new set does not (what an earlier set wrote, so no mix of two
    sets remains), is moved aside and the new files renamed in; renames need
    no space, and if one fails all are undone.  Other files in the folder are
    left alone, and one the set would overwrite is refused unless ``earlier``
    names it: affix replaces only what it wrote.  A folder is replaced only
    by a folder, and one that the new set lacks stays.
    """

    def __init__(self, folder, *, parameter: str, earlier: Callable[[Path], Iterable[str]] | None = None):
        self.shown = check_folder_target(folder, parameter)  # the path as the user gave it, for messages
        self.folder = Path(os.path.realpath(self.shown))  # a link to a folder is written through, never replaced
        self.parameter = parameter
        self.earlier = earlier
        self.names: list[str] = []
        self.staging: Path | None = None

    def __enter__(self) -> "FileSet":
        self.existed = self.folder.is_dir()
        where, prefix = ((self.folder, _STAGING) if self.existed
                         else (self.folder.parent, f".{self.folder.name[:_NAME_KEPT]}{_STAGING}"))
        try:
            self.staging = _new_folder(where, prefix)
        except OSError as exc:
            raise WriteError(f"cannot write ({exc.strerror})", self.shown) from None
        return self

    def __exit__(self, kind, exc, traceback) -> None:
        try:
            if kind is None:
                self._commit()
        finally:
            if self.staging is not None and self.staging.exists():
                shutil.rmtree(self.staging, ignore_errors=True)

    def entry(self, name: str) -> Path:
        """The staging path of entry ``name``, for the caller to create (a file or a folder)."""
        if name in self.names or not _is_plain_name(name):
            raise ValueError(f"not a new plain file name: {name!r}")  # a bug in the caller, not a user error
        self.names.append(name)
        return self.staging / name

    def write_text(self, name: str, text: str) -> None:
        try:
            with open(self.entry(name), "x", encoding="utf-8", newline="\n") as handle:
                handle.write(text)
        except OSError as exc:
            raise WriteError(f"cannot write ({exc.strerror})", self.shown / name) from None

    def write_json(self, name: str, data) -> None:
        self.write_text(name, json_text(data))

    def _commit(self) -> None:
        if not self.existed:
            try:
                os.rename(self.staging, self.folder)
            except OSError as exc:
                raise WriteError(f"cannot create the folder ({exc.strerror})", self.shown) from None
            return
        earlier = {n for n in (self.earlier(self.folder) if self.earlier else ()) if _is_plain_name(n)}
        gone = sorted(n for n in earlier - set(self.names)
                      if os.path.lexists(self.folder / n) and not _is_folder(self.folder / n))
        self._check_replaced(self.names + gone)
        for name in self.names:
            target = self.folder / name
            if _is_folder(target) and not _is_folder(self.staging / name):
                raise UsageError(f"'{self.shown / name}' is a folder where affix would write a file", self.parameter)
            if os.path.lexists(target) and name not in earlier:
                raise UsageError(f"'{self.shown / name}' exists and affix did not write it; move it away or "
                                 f"write to another folder", self.parameter)
        self._swap(gone)

    def _check_replaced(self, names) -> None:
        for name in names:
            target = self.folder / name
            inside = (Path(top) / f for top, _, found in os.walk(target) for f in found) if _is_folder(target) else ()
            if any(map(_is_protected, (target, *inside))):
                raise UsageError(f"'{self.shown / name}' is an input of this command; writing the folder "
                                 f"would replace it", self.parameter)

    def _swap(self, gone) -> None:
        aside = self.staging / ".earlier"
        aside.mkdir()
        moved_aside, moved_in = [], []
        try:
            for name in self.names + gone:
                if os.path.lexists(self.folder / name):
                    os.rename(self.folder / name, aside / name)
                    moved_aside.append(name)
            for name in self.names:
                os.rename(self.staging / name, self.folder / name)
                moved_in.append(name)
        except BaseException as exc:
            for name in moved_in:
                os.rename(self.folder / name, self.staging / name)
            for name in moved_aside:
                os.rename(aside / name, self.folder / name)
            if isinstance(exc, OSError):
                raise WriteError(f"cannot write ({exc.strerror})", self.shown) from None
            raise


def read_json(path, what: str):
    """The parsed content of a JSON file; ``what`` ("model", "plan", ...) words the missing-file error.

    A key given twice (of which Python's json module keeps the last,
    silently) is refused.  NaN and Infinity, which it reads as floats, are
    left to the file's schema, which refuses them naming the field.
    """
    path = Path(path)
    try:
        return json.loads(path.read_text(encoding="utf-8"), object_pairs_hook=_unique_keys)
    except FileNotFoundError:
        raise FileFormatError(f"no such {what} file", path) from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:  # ValueError: bad JSON, over-long integers
        raise FileFormatError(f"not readable as JSON ({exc})", path) from None
    except RecursionError:
        raise FileFormatError("not readable as JSON (nested too deeply)", path) from None


def check_format(data, expected: str, what: str, path) -> dict:
    """``data`` itself if it is a dict tagged ``"format": expected``, else a FileFormatError
    (what a file type without a schema of its own checks first; see affix.schema)."""
    if not isinstance(data, dict) or data.get("format") != expected:
        raise FileFormatError(f'not an affix {what} file (expected "format": "{expected}")', path)
    return data


def _unique_keys(pairs) -> dict:
    data = {}
    for key, value in pairs:
        if key in data:
            raise ValueError(f"key '{key}' appears twice in one object")
        data[key] = value
    return data


def file_sha256(path) -> str:
    """SHA-256 of a file's bytes."""
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def content_sha256(data) -> str:
    """Hash of a file's content as canonical JSON (sorted keys, no spaces), so
    the same model or plan has the same hash however it was indented."""
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


def _target_path(path, parameter: str) -> Path:
    if path is None or (isinstance(path, (str, bytes)) and not path):
        raise UsageError("an empty path names no file", parameter)
    return Path(path)


@contextlib.contextmanager
def _unusable(path: Path, parameter: str):
    """Whatever else the file system says about ``path`` (a name too long, a loop of links) as a UsageError."""
    try:
        yield
    except OSError as exc:
        raise UsageError(f"'{path}' cannot be written ({exc.strerror})", parameter) from None


def _check_folder_of(path: Path, parameter: str) -> None:
    folder = path.parent
    if os.path.islink(folder) and not folder.exists():
        raise UsageError(f"'{folder}' is a symbolic link that leads to no folder", parameter)
    if not folder.exists():
        below = next((p for p in folder.parents if p.exists()), None)
        if below is not None and not below.is_dir():
            raise UsageError(f"'{below}' is a file, so '{path}' cannot be written below it", parameter)
        raise UsageError(f"folder '{folder}' does not exist", parameter)
    if not folder.is_dir():
        raise UsageError(f"'{folder}' is a file, so '{path}' cannot be written below it", parameter)
    if not os.access(folder, os.W_OK | os.X_OK):
        raise UsageError(f"folder '{folder}' is not writable", parameter)


def _identity(path) -> tuple[int, int] | None:
    """(device, inode) of an existing file: the same for every spelling of it (links, './x', symlinks)."""
    try:
        status = os.stat(path)
    except (OSError, ValueError):
        return None
    return status.st_dev, status.st_ino


def _is_protected(path: Path) -> bool:
    return _identity(path) in _protected.get()


def _is_folder(path: Path) -> bool:
    """A folder itself, not a link to one (a link is replaced like a file)."""
    return path.is_dir() and not path.is_symlink()


def _is_plain_name(name) -> bool:
    """A file name with no folder part: nothing a set writes or removes can leave its folder."""
    return isinstance(name, str) and name not in ("", ".", "..") and not any(c in name for c in ("/", os.sep, "\0"))


def _new_file(folder: Path, prefix: str, write) -> Path:
    """A new file ``folder/prefix<random>.tmp`` with the usual mode, filled by ``write(handle)``."""
    while True:
        candidate = folder / f"{prefix}{secrets.token_hex(6)}.tmp"
        try:
            fd = os.open(candidate, os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0), _FILE_MODE)
        except FileExistsError:
            continue
        try:
            with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
                write(handle)
        except BaseException:
            os.unlink(candidate)
            raise
        return candidate


def _new_folder(where: Path, prefix: str) -> Path:
    while True:
        candidate = where / f"{prefix}{secrets.token_hex(6)}"
        try:
            os.mkdir(candidate, _FOLDER_MODE)
        except FileExistsError:
            continue
        return candidate
