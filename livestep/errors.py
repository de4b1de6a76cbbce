"""Errors that end a command with a one-line message and a documented exit status.

Exit statuses: 0 success, 1 a step failed its tolerance profile (commands that
judge steps) or an internal error (a bug: please report; one line on stderr),
2 bad input or bad options, 3 a file livestep writes could not be written (disk full,
file-size limit, permission: a recording stops there, what was written is kept),
130 interrupted.
"""

from __future__ import annotations

__all__ = ["EXIT_BAD_INPUT", "EXIT_FAIL", "EXIT_INTERRUPTED", "EXIT_OK", "EXIT_WRITE_FAILED",
           "InputError", "WriteError", "one_line"]

EXIT_OK = 0
EXIT_FAIL = 1
EXIT_BAD_INPUT = 2
EXIT_WRITE_FAILED = 3
EXIT_INTERRUPTED = 130

# Control characters (a newline in a file name, an escape sequence) shown as escapes.
_CONTROLS = {c: f"\\x{c:02x}" for c in (*range(0x20), 0x7F, *range(0x80, 0xA0))}


def one_line(text: str) -> str:
    """``text`` safe to print as one line: control characters escaped, and the undecodable
    bytes of a non-UTF-8 file name (surrogate escapes) shown as U+FFFD."""
    text = text.translate(_CONTROLS)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        text = text.encode("utf-8", "surrogateescape").decode("utf-8", "replace")
        text = text.encode("utf-8", "replace").decode("utf-8")
    return text


class InputError(Exception):
    """Bad input file or option; ``str(err)`` is the one line shown to the user."""

    exit_status = EXIT_BAD_INPUT

    def __init__(self, message: str, *, source: str | None = None,
                 line: int | None = None) -> None:
        self.line = line
        where = ", ".join(x for x in (source, None if line is None else f"line {line}") if x)
        super().__init__(one_line(f"{where}: {message}" if where else message))


class WriteError(InputError):
    """A file livestep writes (a recording, a raw capture, a results log) could not be
    written; exit status 3."""

    exit_status = EXIT_WRITE_FAILED
