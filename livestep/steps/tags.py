"""Notes and the tags they give steps: "which gain set was in use for this step?".

A note is a ``name=value`` pair stamped with a time (seconds, the stream's time
base): it comes from the stream (a line ``kp=2.5`` or ``gains=B`` among the data,
a ``note`` column of a recording) or from the user. A note stays active until the
next note of the same name; an empty value ends it. A step carries as tags the
notes active at its step instant. Pure: no I/O.
"""

from __future__ import annotations

import bisect
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the decoders use this module; keep it light to import
    from livestep.steps.analysis import StepResult

__all__ = ["NOTE_PREFIX", "Note", "NoteTimeline", "format_note", "parse_note", "parse_notes",
           "parse_recorded_note", "tag_results"]

#: How a recording carries a note: ``# note: <t> name=value``.
NOTE_PREFIX = "# note:"
_NOTE = re.compile(r"\s*([A-Za-z_][\w.\-]*)\s*=\s*([^=]*?)\s*")
_TOKEN = re.compile(r"([A-Za-z_][\w.\-]*)=([^\s=,;]*)")


@dataclass(frozen=True, order=True)
class Note:
    """``name`` set to ``value`` at time ``t`` (seconds); ``value == ""`` ends the note."""

    t: float
    name: str
    value: str


def parse_note(text: str) -> tuple[str, str] | None:
    """``(name, value)`` of a note text ``name=value`` (one pair: an identifier, ``=``, a
    value holding no further ``=``; spaces around them ignored), else ``None``."""
    m = _NOTE.fullmatch(text)
    return (m[1], m[2]) if m else None


def parse_notes(text: str) -> list[tuple[str, str]] | None:
    """The notes of a line: one pair (:func:`parse_note`), or several ``name=value``
    tokens without spaces, separated by spaces, commas or semicolons (``kp=1.2 ki=30``);
    ``None`` when the line is anything else."""
    one = parse_note(text)
    if one is not None:
        return [one]
    tokens = [t for t in re.split(r"[\s,;]+", text.strip()) if t]
    pairs = [m.groups() for t in tokens if (m := _TOKEN.fullmatch(t))]
    return pairs if tokens and len(pairs) == len(tokens) else None


def format_note(note: Note) -> str:
    """The recording's comment line for a note, without the newline."""
    return f"{NOTE_PREFIX} {note.t:.12g} {note.name}={note.value}"


def parse_recorded_note(line: str) -> Note | None:
    """The note of a recording line ``# note: <t> name=value``, else ``None``."""
    if not line.startswith(NOTE_PREFIX):
        return None
    t_text, _, pair = line[len(NOTE_PREFIX):].strip().partition(" ")
    parsed = parse_note(pair)
    try:
        t = float(t_text)
    except ValueError:
        return None
    return Note(t, *parsed) if parsed is not None else None


class NoteTimeline:
    """Notes in time order; :meth:`active_at` answers which were in force at an instant."""

    def __init__(self, notes: Iterable[Note] = ()) -> None:
        self._by_name: dict[str, tuple[list[float], list[str]]] = {}
        self.notes: list[Note] = []
        for n in notes:
            self.add(n)

    def add(self, note: Note) -> None:
        """Add a note (in any order; two notes of one name at one time: the later added wins)."""
        times, values = self._by_name.setdefault(note.name, ([], []))
        k = bisect.bisect_right(times, note.t)
        times.insert(k, note.t)
        values.insert(k, note.value)
        bisect.insort(self.notes, note, key=lambda n: n.t)

    def active_at(self, t: float) -> tuple[tuple[str, str], ...]:
        """``(name, value)`` of every note in force at ``t`` (set at or before ``t`` and not
        ended), sorted by name."""
        out = []
        for name in sorted(self._by_name):
            times, values = self._by_name[name]
            k = bisect.bisect_right(times, t)
            if k and values[k - 1] != "":
                out.append((name, values[k - 1]))
        return tuple(out)

    def __len__(self) -> int:
        return len(self.notes)


def tag_results(results: Sequence[StepResult], notes: NoteTimeline) -> list[StepResult]:
    """The results with ``tags`` set to the notes active at each step instant."""
    return [replace(r, tags=notes.active_at(r.metrics.t_step)) for r in results]
