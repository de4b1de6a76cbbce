"""Notes and the tags they give steps: "which gain set was in use for this step?".

A note is a ``name=value`` pair stamped with a time (seconds, the stream's time
base): it comes from the stream (a line ``kp=2.5`` or ``gains=B`` among the data,
a ``note`` column of a recording) or from the user. A note stays active until the
next note of the same name; an empty value ends it. A step carries as tags the
notes active at its step instant. Pure: no I/O.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # the decoders use this module; keep it light to import
    from livestep.steps.analysis import StepResult

__all__ = ["MAX_NOTE_NAMES", "NOTE_PREFIX", "Note", "NoteTimeline", "clean_text", "format_note",
           "has_control", "is_note_name", "parse_note", "parse_notes", "parse_recorded_note",
           "tag_results"]

#: How a recording carries a note: ``# note: <t> name=value``.
NOTE_PREFIX = "# note:"
#: At most this many distinct note names are kept (a flood of new names is not a tag set).
MAX_NOTE_NAMES = 256

# Characters that end or split a line somewhere (C0 and C1 controls, DEL, the Unicode line
# and paragraph separators): shown as escapes, never written or displayed raw.
_CONTROLS = {c: f"\\x{c:02x}" for c in (*range(0x20), 0x7F, *range(0x80, 0xA0))}
_CONTROLS |= {0x2028: "\\u2028", 0x2029: "\\u2029"}


@dataclass(frozen=True, order=True, slots=True)
class Note:
    """``name`` set to ``value`` at time ``t`` (seconds); ``value == ""`` ends the note."""

    t: float
    name: str
    value: str


def clean_text(text: str) -> str:
    """``text`` with every control character (newline, carriage return, NUL, escape, DEL,
    C1 controls, U+2028/2029) replaced by a visible escape such as ``\\x0a``: one line,
    shown and written literally."""
    return text.translate(_CONTROLS)


def has_control(text: str) -> bool:
    """Whether ``text`` holds a character :func:`clean_text` would escape."""
    return clean_text(text) != text


def is_note_name(name: str) -> bool:
    """Whether ``name`` is a note name: a letter or ``_``, then letters, digits, ``_``,
    ``.`` or ``-`` (no spaces, no ``=``, no controls)."""
    return (name[:1].isascii() and (name[:1].isalpha() or name[:1] == "_")
            and name.replace(".", "_").replace("-", "_").isidentifier())


# Parsing works with str methods that each pass over the text once (partition, split,
# strip, isidentifier): time linear in the length of a line, however hostile (no regular
# expression that could backtrack).

def parse_note(text: str) -> tuple[str, str] | None:
    """``(name, value)`` of a note text ``name=value`` (one pair: a name, ``=``, a value
    holding no further ``=``; spaces around them ignored), else ``None``."""
    name, eq, value = text.partition("=")
    if not eq or "=" in value:
        return None
    name = name.strip()
    return (name, value.strip()) if is_note_name(name) else None


def parse_notes(text: str) -> list[tuple[str, str]] | None:
    """The notes of a line: one pair (:func:`parse_note`), or several ``name=value``
    tokens without spaces, separated by spaces, commas or semicolons (``kp=1.2 ki=30``);
    ``None`` when the line is anything else."""
    one = parse_note(text)
    if one is not None:
        return [one]
    tokens = text.replace(",", " ").replace(";", " ").split()
    pairs = []
    for token in tokens:
        name, eq, value = token.partition("=")
        if not eq or "=" in value or not is_note_name(name):
            return None
        pairs.append((name, value))
    return pairs or None


def format_note(note: Note) -> str:
    """The recording's comment line for a note, without the newline (controls escaped)."""
    return f"{NOTE_PREFIX} {note.t:.12g} {clean_text(note.name)}={clean_text(note.value)}"


def parse_recorded_note(line: str) -> Note | None:
    """The note of a recording line ``# note: <t> name=value`` (the value is the rest of
    the line: it may hold ``=``; control characters escaped), else ``None``."""
    if not line.startswith(NOTE_PREFIX):
        return None
    t_text, _, pair = line[len(NOTE_PREFIX):].strip().partition(" ")
    name, eq, value = pair.partition("=")
    name = name.strip()
    if not eq or not is_note_name(name) or len(t_text) > 40:
        return None
    try:
        t = float(t_text)
    except ValueError:
        return None
    return Note(t, name, clean_text(value.strip())) if math.isfinite(t) else None


class NoteTimeline:
    """Notes in time order; :meth:`active_at` answers which were in force at an instant.

    Memory stays bounded by what can matter: a note of a name already set at the same
    instant replaces it (a flood of notes before the first sample, all stamped with its
    time, keeps one per name), and names beyond the first :data:`MAX_NOTE_NAMES` are
    refused (:meth:`add` returns ``False``; ``dropped`` counts them)."""

    def __init__(self, notes: Iterable[Note] = ()) -> None:
        self._by_name: dict[str, tuple[list[float], list[str]]] = {}
        self.notes: list[Note] = []
        self.dropped = 0
        for n in notes:
            self.add(n)

    def add(self, note: Note) -> bool:
        """Add a note (in any order; two notes of one name at one time: the later added
        wins); ``False`` when refused (one name too many)."""
        entry = self._by_name.get(note.name)
        if entry is None:
            if len(self._by_name) >= MAX_NOTE_NAMES:
                self.dropped += 1
                return False
            entry = self._by_name[note.name] = ([], [])
        times, values = entry
        k = bisect.bisect_right(times, note.t)
        if k and times[k - 1] == note.t:  # the same name at the same instant: replaced
            values[k - 1] = note.value
            j = bisect.bisect_right(self.notes, note.t, key=lambda n: n.t)
            while j and self.notes[j - 1].t == note.t:
                j -= 1
                if self.notes[j].name == note.name:
                    self.notes[j] = note
                    break
            return True
        times.insert(k, note.t)
        values.insert(k, note.value)
        bisect.insort(self.notes, note, key=lambda n: n.t)
        return True

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
