"""How long work shows its progress: the ``bar`` a build or an engine is given.

``bar(total, label, unit="unit")`` is a context manager for one long step
(``total`` units of work: units of a fleet, bytes of blocks), yielding a
function that takes how many are done.  The library draws nothing itself;
the CLI gives a terminal bar (affix.workflow.progress.terminal_bar) where
stderr is a terminal.
"""
from __future__ import annotations

from contextlib import contextmanager


@contextmanager
def no_bar(total: int, label: str, unit: str = "unit"):
    """Shows nothing: the default."""
    yield lambda done: None
