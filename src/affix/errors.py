"""User errors: one hierarchy, each with its exit status and a one-line message.

The CLI prints ``affix: error: <message>`` on stderr and exits with
``exit_code``; it never shows a traceback for these.  Anything else that
escapes is a bug in affix, not a user error.

Exit statuses:
    1  verification failed (the emitted code is wrong, or not what was emitted)
    2  bad input: data, model/plan/manifest file, option value
    3  the accuracy budget cannot be met by any configuration
    4  an external tool the command needs is missing or failed
    5  the pinned firmware interface would change

Library code names the *parameter* at fault, never a command-line option:
``UsageError(..., parameter="input_ranges")``, and inside any message
``parameter("ridge")``.  A Python caller reads the parameter's name; the CLI
renders the same error with its option spelling (``--range``, ``--ridge``).
"""
from __future__ import annotations

import re
from collections.abc import Callable

# Brackets a parameter's name inside a message; private-use code points, so
# no data a message quotes is taken for one.
_OPEN, _CLOSE = "\ue000", "\ue001"
_MARKED = re.compile(f"{_OPEN}([^{_CLOSE}]*){_CLOSE}")


def parameter(name: str) -> str:
    """``name`` marked as a parameter in a message: shown as is to Python callers, as its option by the CLI."""
    return f"{_OPEN}{name}{_CLOSE}"


_mark = parameter  # UsageError's keyword argument of the same name hides the function there


class AffixError(Exception):
    """Base of every error the user can cause and fix."""

    exit_code = 2

    def __init__(self, message: str):
        self.marked = " ".join(str(message).split())  # always one line; parameters still marked
        super().__init__(self.message)

    @property
    def message(self) -> str:
        """The message as a Python caller reads it: parameters by their names."""
        return self.render(lambda name: name)

    def render(self, spell: Callable[[str], str]) -> str:
        """The message with each marked parameter written as ``spell(name)``."""
        return _MARKED.sub(lambda match: spell(match.group(1)), self.marked)

    def format_message(self, spell: Callable[[str], str] = lambda name: name) -> str:
        return f"affix: error: {self.render(spell)}"

    def __reduce__(self):
        # Errors travel between processes (worker processes, a Dask cluster) as
        # values: rebuild them whole, parameters still marked, not from args.
        return _rebuilt, (type(self), self.__dict__)


def _rebuilt(cls, state):
    error = cls.__new__(cls)
    error.__dict__.update(state)
    Exception.__init__(error, error.message)
    return error


class UsageError(AffixError):
    """An argument value is wrong; ``parameter`` names the argument (the CLI shows its option)."""

    def __init__(self, message: str, parameter: str | None = None):
        super().__init__(f"{_mark(parameter)}: {message}" if parameter else message)
        self.parameter = parameter
        self.reason = message  # without the parameter, for a caller that locates the fault otherwise


class DataError(AffixError):
    """Calibration data cannot be used; names file, place and column when known.

    The place is a ``line`` of a text file as an editor numbers it (a CSV's
    header is line 1), or a ``row`` of an array file (.npy, .npz, data in
    memory), counted from 1, as such files have no lines.
    """

    def __init__(self, message: str, path=None, row: int | None = None, column: str | None = None, line: int | None = None):
        where = []
        if path is not None:
            where.append(str(path))
        if line is not None:
            where.append(f"line {line}")
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        super().__init__(": ".join([", ".join(where), message]) if where else message)
        self.path, self.row, self.column, self.line = path, row, column, line
        self.reason = message

    def at(self, path) -> "DataError":
        """The same error about the file named ``path`` (a worker opened it by another name)."""
        return type(self)(self.reason, path, row=self.row, column=self.column, line=self.line)


class WriteError(AffixError):
    """An output file or folder cannot be written (full disk, size limit, permissions); names the path."""

    def __init__(self, message: str, path=None):
        super().__init__(f"{path}: {message}" if path is not None else message)
        self.path = path


class FitError(AffixError):
    """The data are readable but do not determine the estimator (e.g. singular)."""


class FileFormatError(AffixError):
    """A model, plan, manifest or project file is not what it claims to be.

    With ``line`` the message opens ``path:line:``, the form editors jump to.
    """

    def __init__(self, message: str, path=None, line: int | None = None):
        where = None if path is None else (str(path) if line is None else f"{path}:{line}")
        super().__init__(f"{where}: {message}" if where is not None else message)
        self.path, self.line = path, line
        self.reason = message  # without the place, for a caller that locates the fault otherwise


class NoConfigurationError(UsageError):
    """No configuration of the allowed widths can hold the estimator.

    ``per_output`` maps each output that fits none to the reason, in the most
    capable configuration tried.
    """

    def __init__(self, message: str, per_output=None):
        super().__init__(message)
        self.per_output = dict(per_output or {})


class BudgetError(AffixError):
    """No configuration meets the accuracy budget; the message gives the best figures.

    ``per_output`` maps each output whose best figure misses its limit to a
    short account of it.
    """

    exit_code = 3

    def __init__(self, message: str, per_output=None):
        super().__init__(message)
        self.per_output = dict(per_output or {})


class VerificationError(AffixError):
    """Emitted code is wrong: it disagrees with the reference, an entry point
    fails, or its files are not the ones the manifest hashed.  ``report`` is
    the verification report where one was made."""

    exit_code = 1

    def __init__(self, message: str, report=None):
        super().__init__(message)
        self.report = report


class ToolError(AffixError):
    """A compiler or runtime that the command needs is missing or failed."""

    exit_code = 4


class InterfaceError(AffixError):
    """The build would change the pinned firmware interface (names, order,
    types, box or output scales) that code calling the estimator relies on."""

    exit_code = 5
