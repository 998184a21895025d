"""Errors a user can cause, each worded for the user.

Every error here is caught by the command line, printed as one line and
turned into exit code 2 (see ``reportgen.cli``). Anything else escaping is a
bug in reportgen, not in the user's input.
"""

from __future__ import annotations


def one_line(text: str) -> str:
    """``text`` with every line break or control character shown as an escape (``\\n``, ``\\x00``).

    Messages quote the user's own names (keys, columns, sheets, paths), and
    any of those can hold a newline; the message must still be one line.
    """
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


class ReportgenError(Exception):
    """Base class: a problem with the user's input that the user can fix."""

    exit_code = 2

    def __init__(self, *args: object) -> None:
        super().__init__(*(one_line(a) if isinstance(a, str) else a for a in args))


class SpecError(ReportgenError):
    """The spec file is unreadable or breaks a rule; the message names the key path."""


class DataError(ReportgenError):
    """The data table is unreadable or unusable; the message names the file and column."""


class OutputError(ReportgenError):
    """The output folder cannot be written safely."""


class ReportAssetError(ReportgenError):
    """A report asset (logo, template folder) is missing or not acceptable."""


class ExecutorError(ReportgenError):
    """The executor asked for cannot be used (options that do not fit, a cluster that does not answer)."""
