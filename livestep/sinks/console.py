"""Plain console output for live sessions and replays: one line per step and state.

Text from the stream (tags, notes) is always printed literally: never as rich markup,
and with its control characters already escaped by the decoder."""

from __future__ import annotations

import json
from typing import IO

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from livestep.decode.counters import LinkCounters
from livestep.judge.verdict import SYMBOLS, StepVerdict, describe_check
from livestep.sinks.base import Sink
from livestep.steps.analysis import StepResult
from livestep.steps.tags import Note

__all__ = ["ConsoleSink", "JsonLinesSink", "counters_table", "step_line"]


def _ms(x: float | None) -> str:
    return "-" if x is None else f"{1e3 * x:.1f} ms"


def step_line(r: StepResult) -> str:
    """One line summing up a step: amplitude, rise, overshoot, settling, model, tags."""
    m, f = r.metrics, r.model
    settle = _ms(m.settling_time) if m.settled else "not settled"
    model = f", zeta {f.zeta:.3f}, wn {f.wn:.4g} rad/s" if f is not None else ""
    tags = f" [{', '.join(f'{k}={v}' for k, v in r.tags)}]" if r.tags else ""
    return (f"step {r.index} at {m.t_step:.3f} s: {m.direction} {m.amplitude:+.4g},"
            f" rise {_ms(m.rise_time)}, overshoot {m.overshoot_pct:.1f} %,"
            f" settling {settle}{model}{tags}")


def counters_table(c: LinkCounters) -> Table:
    """The link counters as a small table."""
    snap = c.snapshot()
    table = Table(title="link", show_header=False)
    table.add_column("counter")
    table.add_column("value", justify="right")
    for key in ("bytes", "samples", "bad_total", "gaps", "lost", "resyncs", "reconnects",
                "log_lines", "notes", "restarts", "skipped"):
        table.add_row(key.replace("_", " "), str(snap[key]))
    for reason, n in sorted(snap["bad"].items()):
        table.add_row(f"  bad: {reason}", str(n))
    return table


class ConsoleSink(Sink):
    """Prints each step (judged: its verdict and the checks that did not pass),
    each state change and the notes (those stamped at one instant on one line)."""

    def __init__(self, console: Console) -> None:
        self.console = console
        self._notes: list[Note] = []

    def on_step(self, result: StepResult, verdict: StepVerdict | None = None) -> None:
        self._print_notes()
        line, v = step_line(result), verdict
        if v is not None:
            line = f"{line}: {SYMBOLS[v.verdict]} {v.verdict}"
        self.console.print(line, highlight=False, markup=False, soft_wrap=True)
        if v is not None:
            for c in v.checks:
                if c.verdict != "pass":
                    self.console.print(f"  {SYMBOLS[c.verdict]} {c.verdict}: "
                                       f"{describe_check(c)}", highlight=False, markup=False)
        for w in result.warnings:
            self.console.print(f"  [yellow]{escape(w)}[/]")

    def on_note(self, note: Note) -> None:
        if self._notes and self._notes[0].t != note.t:
            self._print_notes()
        self._notes.append(note)

    def on_state(self, state: str) -> None:
        self._print_notes()
        self.console.print(f"[bold]link {escape(state)}[/]")

    def on_tick(self, counters: LinkCounters) -> None:
        self._print_notes()

    def close(self, counters: LinkCounters) -> None:
        self._print_notes()

    def _print_notes(self) -> None:
        if self._notes:
            pairs = ", ".join(f"{n.name}={n.value}" for n in self._notes)
            self.console.print(f"note at {self._notes[0].t:.3f} s: {pairs}", markup=False,
                               highlight=False, soft_wrap=True)
            self._notes = []


class JsonLinesSink(Sink):
    """Writes each step as one JSON object per line (the step shape of ``analyze --json``,
    with ``verdict`` and ``checks`` when the step was judged)."""

    def __init__(self, out: IO[str]) -> None:
        self.out = out

    def on_step(self, result: StepResult, verdict: StepVerdict | None = None) -> None:
        from livestep.reports.tables import step_record

        self.out.write(json.dumps(step_record(result, verdict), allow_nan=False) + "\n")
        self.out.flush()
