"""User errors: one hierarchy, each with its exit status and a one-line message.

The CLI prints ``affix: error: <message>`` on stderr and exits with
``exit_code``; it never shows a traceback for these.  Anything else that
escapes is a bug in affix, not a user error.

Exit statuses:
    1  verification found mismatches (the emitted code is wrong)
    2  bad input: data, model/plan/manifest file, option value
    3  the accuracy budget cannot be met by any configuration
    4  an external tool the command needs is missing or failed
"""
from __future__ import annotations


class AffixError(Exception):
    """Base of every error the user can cause and fix."""

    exit_code = 2

    def __init__(self, message: str):
        super().__init__(message)
        self.message = " ".join(str(message).split())  # always one line

    def format_message(self) -> str:
        return f"affix: error: {self.message}"


class UsageError(AffixError):
    """An option or argument value is wrong; the message names the option."""

    def __init__(self, message: str, option: str | None = None):
        super().__init__(f"{option}: {message}" if option else message)
        self.option = option


class DataError(AffixError):
    """Calibration data cannot be used; names file, row and column when known."""

    def __init__(self, message: str, path=None, row: int | None = None, column: str | None = None):
        where = []
        if path is not None:
            where.append(str(path))
        if row is not None:
            where.append(f"row {row}")
        if column is not None:
            where.append(f"column '{column}'")
        super().__init__(": ".join([", ".join(where), message]) if where else message)
        self.path, self.row, self.column = path, row, column


class FitError(AffixError):
    """The data are readable but do not determine the estimator (e.g. singular)."""


class FileFormatError(AffixError):
    """A model, plan or manifest file is not what it claims to be."""

    def __init__(self, message: str, path=None):
        super().__init__(f"{path}: {message}" if path is not None else message)
        self.path = path


class BudgetError(AffixError):
    """No configuration meets the accuracy budget; the message gives the best figures."""

    exit_code = 3


class VerificationError(AffixError):
    """Emitted code and integer reference disagree on at least one vector."""

    exit_code = 1


class ToolError(AffixError):
    """A compiler or runtime that the command needs is missing or failed."""

    exit_code = 4
