"""Reading and writing affix's own files (model, plan, emitted sources, manifest).

Writes are atomic: a reader sees the old content or the new, never half of
either, and a failed run leaves what was there before.  Reads turn every way
a JSON file can be unreadable into one FileFormatError naming the file.
"""
from __future__ import annotations

import hashlib
import json
import os
import tempfile
from pathlib import Path

from affix.errors import FileFormatError


def write_text(path, text: str) -> None:
    """Write via a temporary file in the same folder, then rename it into place."""
    path = Path(path)
    fd, temporary = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as handle:
            handle.write(text)
        os.replace(temporary, path)
    except BaseException:
        os.unlink(temporary)
        raise


def write_json(path, data) -> None:
    write_text(path, json.dumps(data, indent=2, allow_nan=False) + "\n")


def read_json(path, what: str):
    """The parsed content of a JSON file; ``what`` ("model", "plan", ...) words the missing-file error."""
    path = Path(path)
    try:
        return json.loads(path.read_text())
    except FileNotFoundError:
        raise FileFormatError(f"no such {what} file", path) from None
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FileFormatError(f"not readable as JSON ({exc})", path) from None


def check_format(data, expected: str, what: str, path) -> dict:
    """``data`` itself if it is a dict tagged ``"format": expected``, else a FileFormatError."""
    if not isinstance(data, dict) or data.get("format") != expected:
        raise FileFormatError(f'not an affix {what} file (expected "format": "{expected}")', path)
    return data


def content_sha256(data) -> str:
    """Hash of a file's content as canonical JSON (sorted keys, no spaces), so
    the same model or plan has the same hash however it was indented."""
    text = json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()
