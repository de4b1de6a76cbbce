"""The virtual bench's command syntax: one ASCII line per command. Pure parsing, no I/O.

::

    sp VALUE                    hold a new setpoint (feedback units)
    gains kp=X [ki=Y] [kd=Z]    new PID gains, any subset (the realistic axis only)
    stream on | stream off      start or stop sending samples (the loop keeps running)
    status                      answer with one note: setpoint, gains, streaming

Keywords are case-insensitive, fields are separated by spaces or tabs, a line ends in
``\\n`` (a ``\\r`` before it is ignored) and holds at most :data:`MAX_LINE` characters.
The bench answers every line with one note in its stream (a ``# `` text line, or a log
frame): ``sp=VALUE``, ``stream on``/``stream off``, the status, or ``error: ...`` for a
line it refused (and then changes nothing). A gain change is answered, in text mode, by
the bare note line ``kp=.. ki=.. kd=..`` (a log frame ``gains kp=.. ki=.. kd=..`` in binary
mode), so the steps that follow carry the gains as tags.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Command", "CommandError", "MAX_LINE", "parse_command"]

MAX_LINE = 200


class CommandError(ValueError):
    """A command line the bench refuses; ``str()`` is the reason."""


@dataclass(frozen=True)
class Command:
    """``kind``: ``sp``, ``gains``, ``stream`` or ``status``; ``value``: the setpoint;
    ``gains``: the (name, value) pairs given; ``on``: streaming on or off."""

    kind: str
    value: float | None = None
    gains: tuple[tuple[str, float], ...] = ()
    on: bool | None = None


def _number(text: str, what: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise CommandError(f"{what} must be a number, not {text!r}") from None
    if not math.isfinite(x):
        raise CommandError(f"{what} must be finite")
    return x


def parse_command(line: str) -> Command | None:
    """The command on one line (without its newline); ``None`` for a blank line."""
    if len(line) > MAX_LINE:
        raise CommandError(f"line longer than {MAX_LINE} characters")
    words = line.strip().split()
    if not words:
        return None
    head, args = words[0].lower(), words[1:]
    if head == "sp":
        if len(args) != 1:
            raise CommandError("usage: sp VALUE")
        return Command("sp", value=_number(args[0], "the setpoint"))
    if head == "gains":
        if not args:
            raise CommandError("usage: gains kp=X [ki=Y] [kd=Z]")
        pairs: dict[str, float] = {}
        for arg in args:
            name, eq, value = arg.partition("=")
            name = name.lower()
            if not eq or name not in ("kp", "ki", "kd"):
                raise CommandError(f"expected kp=, ki= or kd=, not {arg!r}")
            if name in pairs:
                raise CommandError(f"{name} given twice")
            pairs[name] = _number(value, name)
        return Command("gains", gains=tuple(pairs.items()))
    if head == "stream":
        if len(args) != 1 or args[0].lower() not in ("on", "off"):
            raise CommandError("usage: stream on|off")
        return Command("stream", on=args[0].lower() == "on")
    if head == "status":
        if args:
            raise CommandError("usage: status")
        return Command("status")
    raise CommandError(f"unknown command {words[0]!r} (sp, gains, stream, status)")
