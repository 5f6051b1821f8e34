"""Write a file so that a reader sees the old content or the new, never half of either.

Every file affix writes (model, plan, emitted sources, manifest) goes through
here: a failed run leaves what was there before.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path


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
