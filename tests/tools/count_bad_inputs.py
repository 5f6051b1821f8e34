"""Count the bad-input cases of the suite per affix command (the hardening figures).

    .venv/bin/python tests/tools/count_bad_inputs.py [pytest collection arguments]

Collects the suite without running it and tallies the ``bad_input(COMMAND)``
marks; a parametrized test counts once per case.
"""
from __future__ import annotations

import collections
import sys

import pytest


class _Tally:
    def __init__(self):
        self.per_command = collections.Counter()

    def pytest_collection_modifyitems(self, items):
        for item in items:
            mark = item.get_closest_marker("bad_input")
            if mark:
                self.per_command[mark.args[0]] += 1


def main(argv: list[str]) -> int:
    tally = _Tally()
    status = pytest.main(["-q", "--collect-only", "-p", "no:cacheprovider", *argv], plugins=[tally])
    print()
    for command, count in sorted(tally.per_command.items()):
        print(f"{command:<10} {count:>5}")
    print(f"{'all':<10} {sum(tally.per_command.values()):>5}")
    return int(status)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
