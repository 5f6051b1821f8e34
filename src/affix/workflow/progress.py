"""The progress bar on the terminal (tqdm, on stderr) that the CLI gives long work; see affix.progress."""
from __future__ import annotations

import sys
from contextlib import contextmanager

from affix.progress import no_bar


@contextmanager
def terminal_bar(total: int, label: str, unit: str = "unit"):
    """A progress bar on stderr for one long step; gone when the step ends, so what stays on
    the terminal is the command's own output.  Bytes (``unit="B"``) in kB, MB, GB."""
    from tqdm import tqdm

    with tqdm(total=total, desc=f"{label:<16}", unit=unit, unit_scale=unit == "B", leave=False,
              file=sys.stderr) as shown:
        yield lambda done: shown.update(done - shown.n)


def bar_for(quiet: bool = False):
    """The bar a command draws with: a terminal bar where stderr is a terminal, else none."""
    return no_bar if quiet or not sys.stderr.isatty() else terminal_bar
