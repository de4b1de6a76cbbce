"""Consoles for everything the command line prints: colour and line wrapping decided once.

Colour follows ``--color``: ``always``, ``never``, or ``auto`` (the default): colour
only on a terminal, and not when the ``NO_COLOR`` environment variable is set to a
non-empty value (the convention of no-color.org; a command-line option overrides it,
so ``--color always`` colours even then). Without colour nothing is styled at all: no
escape codes, bold included.

Output that is not a terminal (a pipe, a file) is never wrapped: tables take their
natural width and every line is printed whole, however long. On a terminal, rich
wraps to the terminal's width as usual.

The command line sets the mode once (:func:`set_color_mode`); every console made by
:func:`make_console` afterwards follows it.
"""

from __future__ import annotations

import contextlib
import os
import sys
from collections.abc import Iterator
from typing import Any, TextIO

from rich.console import Console

__all__ = ["COLOR_MODES", "UNWRAPPED_WIDTH", "color_mode", "make_console", "no_color_env",
           "set_color_mode", "textual_color", "wants_color"]

#: The values of ``--color``.
COLOR_MODES = ("auto", "always", "never")
#: The width a console gets when it does not write to a terminal: wide enough that no
#: table or line of livestep's is ever cut or wrapped (characters).
UNWRAPPED_WIDTH = 10_000

_mode = "auto"


def set_color_mode(mode: str) -> None:
    """Set the colour mode of consoles made from now on (``auto``, ``always``, ``never``)."""
    global _mode
    if mode not in COLOR_MODES:
        raise ValueError(f"colour mode must be one of {', '.join(COLOR_MODES)}, got {mode!r}")
    _mode = mode


def color_mode() -> str:
    """The current colour mode."""
    return _mode


def no_color_env() -> bool:
    """``NO_COLOR`` is set to a non-empty value (no-color.org: an empty value does not
    count)."""
    return os.environ.get("NO_COLOR", "") != ""


def _isatty(stream: TextIO) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # no isatty, or a closed file
        return False


def wants_color(stream: TextIO, mode: str | None = None) -> bool:
    """Whether output to ``stream`` is coloured under ``mode`` (default: the current one)."""
    mode = mode or _mode
    if mode == "always":
        return True
    if mode == "never":
        return False
    return _isatty(stream) and not no_color_env()


def make_console(*, stderr: bool = False, mode: str | None = None, **kwargs: Any) -> Console:
    """A rich console writing to stdout (or stderr) that follows the colour mode and, off
    a terminal, never wraps. ``kwargs`` go to :class:`rich.console.Console` (``highlight``
    ...)."""
    stream = sys.stderr if stderr else sys.stdout
    tty = _isatty(stream)
    color = wants_color(stream, mode)
    kwargs.setdefault("no_color", not color)
    if tty:
        # The terminal's own width; rich finds the colour system (none on a dumb terminal,
        # where "always" still gets the 16 standard colours).
        system = "auto" if color else None
        console = Console(stderr=stderr, color_system=system, **kwargs)
        if color and console.color_system is None:
            console = Console(stderr=stderr, color_system="standard", force_terminal=True,
                              **kwargs)
        return console
    # Not a terminal: a fixed, very wide width (not COLUMNS, not 80) and soft wrapping, so
    # nothing is wrapped or cut; force_terminal=False so FORCE_COLOR or TTY_COMPATIBLE
    # cannot turn a pipe into a terminal behind the option's back.
    return Console(stderr=stderr, color_system="standard" if color else None,
                   force_terminal=False, force_interactive=False, width=UNWRAPPED_WIDTH,
                   soft_wrap=True, **kwargs)


@contextlib.contextmanager
def textual_color(mode: str | None = None) -> Iterator[None]:
    """While inside, the environment tells a textual app the colour mode: textual turns
    monochrome when ``NO_COLOR`` is present at all, so ``never`` sets it, ``always``
    removes it, and ``auto`` removes an empty one (no-color.org: empty means unset).
    The environment is restored on the way out."""
    mode = mode or _mode
    before = os.environ.get("NO_COLOR")
    if mode == "never":
        os.environ["NO_COLOR"] = "1"
    elif mode == "always" or before == "":
        os.environ.pop("NO_COLOR", None)
    try:
        yield
    finally:
        if before is None:
            os.environ.pop("NO_COLOR", None)
        else:
            os.environ["NO_COLOR"] = before
