"""The `affix` command's entry point.

It lives outside the affix package because importing any part of the package
loads the package itself, NumPy with it, which takes a tenth of a second or
more: a Ctrl-C in that time would otherwise end in Python's traceback instead
of the one line and status of an interrupted command (affix.workflow.cli).
"""
import sys


def main() -> int:
    try:
        from affix.workflow.cli import main as run_command
    except KeyboardInterrupt:
        print("affix: interrupted", file=sys.stderr)  # as affix.workflow.cli.INTERRUPTED
        return 128 + 2
    return run_command()
