"""Which files a list of data entries means, in which order, and the one hash of them all.

An entry is a file, a glob pattern (``logs/*.csv``, ``runs/**/*.parquet``)
or a folder, read as a Parquet dataset: every ``.parquet``/``.parq`` file
below it, in the order of their paths, leaving out names that start with
``_`` or ``.`` (``_SUCCESS``, ``_metadata``, hidden files: not data).  A
pattern's matches are taken in name order.  Each file is read once, where it
is first named.  The same order is read by every engine, so the fold of a
row and the data hash depend only on the ordered list of files.
"""
from __future__ import annotations

import glob
import hashlib
import os
from pathlib import Path

from affix.errors import DataError
from affix.intake.parquet_format import SUFFIXES as PARQUET_SUFFIXES

_GLOB_CHARACTERS = "*?["


def data_files(entries, folder=None) -> tuple[Path, ...]:
    """The files the entries name, in order, each once; relative entries are
    taken from ``folder`` (default: the working folder).  DataError for an
    entry that names nothing."""
    found: list[Path] = []
    where = "" if folder is None else f" in {folder}"
    for entry in entries:
        path = Path(entry) if folder is None else Path(folder) / entry
        if path.is_file():
            matches = [path]
        elif path.is_dir():
            matches = dataset_files(path)
            if not matches:
                raise DataError(f"'{entry}' is a folder holding no Parquet files (*.parquet){where}")
        elif any(c in str(entry) for c in _GLOB_CHARACTERS):
            matches = sorted(Path(p) for p in glob.glob(str(path), recursive=True) if os.path.isfile(p))
            if not matches:
                raise DataError(f"'{entry}' matches no file{where}")
        else:
            problem = "not a regular file" if path.exists() else "no such file"
            raise DataError(problem, path) if folder is None else DataError(f"'{entry}': {problem}{where}")
        found += [m for m in matches if m not in found]
    return tuple(found)


def dataset_files(folder: Path) -> list[Path]:
    """The Parquet files of a dataset folder, in the order of their paths below it."""
    found = []
    for root, folders, names in os.walk(folder):
        folders[:] = [name for name in folders if not name.startswith(("_", "."))]
        found += [Path(root) / name for name in names
                  if not name.startswith(("_", ".")) and Path(name).suffix.lower() in PARQUET_SUFFIXES]
    return sorted(found, key=lambda p: p.relative_to(folder).as_posix())


def data_hash(files) -> str:
    """The hash of the data: ``files`` is (name, SHA-256 hex) per file in the order read.

    One file: its own SHA-256.  Several: the SHA-256 of one line per file,
    ``<its SHA-256>  <its name>``, the name being the file's own name
    without its folder, so the same files give the same hash however they
    were named or found (and wherever the cluster's workers mount them):
    what ``sha256sum a.csv b.csv | sha256sum`` prints, run in the files' folder.
    """
    files = [(Path(name).name, sha256) for name, sha256 in files]
    if len(files) == 1:
        return files[0][1]
    text = "".join(f"{sha256}  {name}\n" for name, sha256 in files)
    return hashlib.sha256(text.encode("utf-8", "surrogateescape")).hexdigest()
