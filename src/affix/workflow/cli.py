"""The ``affix`` command line: one subcommand per pipeline stage, plus the demo.

Each subcommand lives in its own module with ``register(subparsers)``, which
adds its parser and sets ``run=`` to a function of the parsed arguments that
returns the exit status.  User errors (:class:`affix.errors.AffixError`)
become one ``affix: error: ...`` line on stderr and their exit status.
"""
from __future__ import annotations

import argparse
import importlib
import re
import sys

from affix import __version__
from affix.errors import AffixError

COMMAND_MODULES = (
    "affix.workflow.fit_command",
    "affix.workflow.quantize_command",
    "affix.workflow.emit_command",
    "affix.workflow.verify_command",
    "affix.workflow.demo_command",
)

_NEGATIVE_VALUE = re.compile(r"^-(\d|\.\d)")


class OneLineParser(argparse.ArgumentParser):
    """argparse, but usage mistakes are one stderr line, like every other error."""

    def error(self, message):
        self.exit(2, f"affix: error: {self.prog}: {message} (see '{self.prog} --help')\n")


def join_negative_values(argv: list[str]) -> list[str]:
    """Let users write ``--range -2048:2047``: glue a value that starts with
    '-digit' to the long option before it, as ``--range=-2048:2047``;
    argparse would otherwise take it for an unknown option."""
    out: list[str] = []
    for token in argv:
        prev = out[-1] if out else ""
        if _NEGATIVE_VALUE.match(token) and prev.startswith("--") and "=" not in prev:
            out[-1] = f"{prev}={token}"
        else:
            out.append(token)
    return out


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(
        prog="affix",
        description="Fit a linear estimator from calibration data, plan it in fixed point, "
        "emit C or MicroPython and verify it bit for bit.",
    )
    parser.add_argument("--version", action="version", version=f"affix {__version__}")
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = join_negative_values(list(sys.argv[1:] if argv is None else argv))
    args = build_parser().parse_args(argv)
    try:
        return int(args.run(args) or 0)
    except AffixError as exc:
        print(exc.format_message(), file=sys.stderr)
        return exc.exit_code
    except KeyboardInterrupt:
        print("affix: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
