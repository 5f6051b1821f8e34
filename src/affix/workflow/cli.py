"""The ``affix`` command line: one subcommand per pipeline stage, plus the demo.

Each subcommand lives in its own module with ``register(subparsers)``, which
adds its parser and sets ``run=`` to a function of the parsed arguments that
returns the exit status, ``reads=`` to the arguments naming files it reads and
``writes=`` to those naming what it writes ({argument: "file" or "folder"}).
Before a command runs, every output is checked here (a folder where a file
goes, a missing or read-only parent, an input it would replace), and while it
runs no write may replace one of its inputs.  User errors
(:class:`affix.errors.AffixError`) become one ``affix: error: ...`` line on
stderr and their exit status, with library parameter names spelt as options.
"""
from __future__ import annotations

import argparse
import functools
import importlib
import os
import re
import signal
import sys

from affix import __version__, files
from affix.errors import AffixError

COMMAND_MODULES = (
    "affix.workflow.fit_command",
    "affix.workflow.quantize_command",
    "affix.workflow.emit_command",
    "affix.workflow.verify_command",
    "affix.workflow.report_command",
    "affix.workflow.init_command",
    "affix.workflow.build_command",
    "affix.workflow.diff_command",
    "affix.workflow.demo_command",
)

_NEGATIVE_VALUE = re.compile(r"^-(\d|\.\d)")

# Library parameters whose name differs from the argument that sets them:
# parameter -> the argparse dest that spells it.  Any other parameter is
# spelt by the argument of the same name, where the command has one.
PARAMETER_ARGUMENTS = {
    "input_ranges": "range",
    "output_lsb": "lsb",
    "output_ctype": "output_type",
    "input_ctype": "input_type",
    "search": "plain_coefficients",
    "out_dir": "out",
    "path": "out",
}
# A command whose output is cut short by a closed pipe ('affix ... | head')
# ends quietly with the status a shell reports for a process that SIGPIPE
# ended: 128 + 13.
BROKEN_PIPE_STATUS = 128 + 13
INTERRUPTED, INTERRUPTED_STATUS = "affix: interrupted", 128 + 2  # the shell's status for SIGINT


class OneLineParser(argparse.ArgumentParser):
    """argparse, but usage mistakes are one stderr line, like every other error."""

    def error(self, message):
        self.exit(2, f"affix: error: {self.prog}: {message} (see '{self.prog} --help')\n")

    def _print_message(self, message, file=None):
        # argparse ignores a failed write; a closed pipe must end --help as it ends every command.
        if message:
            (file or sys.stderr).write(message)


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
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=OneLineParser)
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    parser.set_defaults(reads=(), writes={})
    parser.commands = sub.choices  # command name -> its parser
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run one command line; the exit status.  Bare 'affix' lists the commands on stderr and exits 2."""
    # A file-size limit (ulimit -f) makes a write fail with EFBIG, reported
    # like any other failed write, instead of killing the process mid-write.
    if hasattr(signal, "SIGXFSZ"):  # POSIX only
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    try:
        try:
            status = _run(join_negative_values(list(sys.argv[1:] if argv is None else argv)))
        except SystemExit as exc:  # argparse's --help, --version and usage mistakes
            status = exc.code if isinstance(exc.code, int) else 0 if exc.code is None else 2
        sys.stdout.flush()
    except KeyboardInterrupt:  # in the command, and also while parsing or flushing what it printed
        print(INTERRUPTED, file=sys.stderr)
        return INTERRUPTED_STATUS
    except BrokenPipeError:
        # Whoever read stdout has gone: send what is left to nowhere, so the
        # interpreter's final flush cannot fail again with a traceback.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return BROKEN_PIPE_STATUS
    return status


def _run(argv: list[str]) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    spell = functools.partial(_spelling, parser.commands[args.command])
    try:
        with files.protected(_paths(args, args.reads)):
            for dest, kind in args.writes.items():
                check = files.check_folder_target if kind == "folder" else files.check_file_target
                check(getattr(args, dest), dest)
            return int(args.run(args) or 0)
    except AffixError as exc:
        print(exc.format_message(spell), file=sys.stderr)
        return exc.exit_code


def _paths(args, dests) -> list:
    """The paths the arguments ``dests`` name; an argument may name several (nargs='+', repeatable),
    and calibration data (the argument ``data``) a glob pattern or a Parquet dataset folder: the files it means."""
    from affix.errors import DataError
    from affix.intake.sources import data_files

    paths = []
    for dest in dests:
        value = getattr(args, dest)
        for entry in value if isinstance(value, list) else [value] if value else []:
            try:
                paths += data_files([entry]) if dest == "data" else [entry]
            except DataError:  # names nothing: the command reports it in its own words
                paths.append(entry)
    return paths


def _spelling(command: argparse.ArgumentParser, parameter: str) -> str:
    """How ``command``'s user writes ``parameter``: its option (--range) or argument (OUTDIR), else the name."""
    dest = PARAMETER_ARGUMENTS.get(parameter, parameter)
    for action in command._actions:
        if action.dest == dest:
            if action.option_strings:
                return max(action.option_strings, key=len)
            return action.metavar or action.dest.upper()
    return parameter


if __name__ == "__main__":
    sys.exit(main())
