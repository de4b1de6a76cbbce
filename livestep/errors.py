"""Errors that end a command with a one-line message and a documented exit status.

Exit statuses: 0 success, 1 a step failed its tolerance profile (commands that
judge steps) or an internal error (a bug: please report; one line on stderr),
2 bad input or bad options, 130 interrupted.
"""

from __future__ import annotations

__all__ = ["EXIT_BAD_INPUT", "EXIT_FAIL", "EXIT_INTERRUPTED", "EXIT_OK", "InputError"]

EXIT_OK = 0
EXIT_FAIL = 1
EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130


class InputError(Exception):
    """Bad input file or option; ``str(err)`` is the one line shown to the user."""

    exit_status = EXIT_BAD_INPUT

    def __init__(self, message: str, *, source: str | None = None,
                 line: int | None = None) -> None:
        self.line = line
        where = ", ".join(x for x in (source, None if line is None else f"line {line}") if x)
        super().__init__(f"{where}: {message}" if where else message)
