"""Counting the work a function does, deterministically, without timing it.

Work is counted in two parts while the function runs:

- Python bytecode instructions executed (``sys.settrace`` with ``f_trace_opcodes``: one
  event per instruction, in every Python frame);
- for every call of a C method of a ``str``, ``bytes`` or ``bytearray`` object (``split``,
  ``partition``, ``translate``, ``find``...), the length of that object: the characters
  such a method can pass over (``sys.setprofile`` reports the bound method, whose
  ``__self__`` is the object). Built-in functions and numpy calls are counted as one.

A regular expression does its work inside one C call that this cannot see into, so calls
of ``re.Pattern`` methods are collected (``patterns``) for the test to judge: the
parsers of untrusted lines must not use any, and the few block-level patterns the text
decoder uses are a single character class repeated (linear by construction).
"""

from __future__ import annotations

import re
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any


@dataclass
class Work:
    opcodes: int = 0
    chars: int = 0
    calls: int = 0
    patterns: list[str] = field(default_factory=list)

    @property
    def total(self) -> int:
        return self.opcodes + self.chars + self.calls


def count_work(fn: Callable[..., Any], *args: Any, **kwargs: Any) -> tuple[Any, Work]:
    """``fn(*args, **kwargs)`` and the work it took (see the module docstring)."""
    work = Work()

    def tracer(frame, event, arg):  # noqa: ANN001, ANN202
        frame.f_trace_opcodes = True
        if event == "opcode":
            work.opcodes += 1
        return tracer

    def profiler(frame, event, arg):  # noqa: ANN001, ANN202
        if event != "c_call":
            return
        work.calls += 1
        owner = getattr(arg, "__self__", None)
        if isinstance(owner, str | bytes | bytearray):
            work.chars += len(owner)
        elif isinstance(owner, re.Pattern):
            work.patterns.append(owner.pattern if isinstance(owner.pattern, str)
                                 else owner.pattern.decode("latin-1"))

    old_trace, old_profile = sys.gettrace(), sys.getprofile()
    sys.settrace(tracer)
    sys.setprofile(profiler)
    try:
        result = fn(*args, **kwargs)
    finally:
        sys.settrace(old_trace)
        sys.setprofile(old_profile)
    return result, work
