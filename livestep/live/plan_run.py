"""Sending a step plan to a controller during a live session (the I/O edge of
:mod:`livestep.live.plan`).

:class:`PlanRunner` is a driver of :func:`livestep.live.run.run_live`: the live loop calls
:meth:`PlanRunner.poll` between reads. After ``lead_in`` seconds of data it sends each
command through the link at its time, adds the command's tags as notes to the session
(stamped with the latest sample, so the steps the command causes carry them, and the
recording keeps them), and when the plan is done, or on Ctrl-C, SIGTERM, an error or a lost
link, sends the safe command once if the link is up.

Only the lines of the checked plan (:attr:`~livestep.live.plan.Plan.lines`) are ever written
to the port: that is checked again just before each write.

One command is sent at a time, and each gets its whole dwell from the moment it was sent
(a command delayed by a busy moment never shortens the next level or bunches commands up).

A lost link is a ``disconnected`` port, a write that fails, or no samples for
``silence`` seconds. The plan then stops for good; the safe command goes out as soon as the
link is up again (the port reopens by itself), or is reported as not sent after
``reconnect_wait`` seconds.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from typing import Protocol

import serial

from livestep.errors import EXIT_INTERRUPTED, EXIT_OK, InputError
from livestep.live.plan import Plan, describe_plan
from livestep.live.session import Session

__all__ = ["EXIT_PLAN_ABORTED", "Link", "PlanRunner", "confirm_plan"]

EXIT_PLAN_ABORTED = 1  # the link was lost before the plan was done


class Link(Protocol):
    """What the runner needs of the port: :class:`~livestep.sources.serial_port.SerialReader`."""

    state: str

    def write(self, data: bytes) -> None: ...


def _stderr(line: str) -> None:
    print(line, file=sys.stderr, flush=True)


class PlanRunner:
    """Sends ``plan`` during a live session; see the module docstring. ``out`` gets one line
    per command sent and per event; ``clock`` is the wall clock (s)."""

    def __init__(self, plan: Plan, *, out: Callable[[str], None] = _stderr,
                 silence: float = 2.0, reconnect_wait: float = 3.0,
                 clock: Callable[[], float] = time.monotonic) -> None:
        self.plan = plan
        self.out = out
        self.silence = silence
        self.reconnect_wait = reconnect_wait
        self.clock = clock
        self.sent: list[str] = []  # every line sent, safe command included
        self.outcome = "not started"  # done, interrupted, stopped, error, link lost
        self.safe_sent = False
        self._link: Link | None = None
        self._session: Session | None = None
        self._next = 0  # index of the next command
        self._due: float | None = None  # wall time the next command is due
        self._lost_at: float | None = None
        self._samples = 0
        self._last_data = 0.0
        self._finished = False
        self._noted: dict[str, str] = {}  # the plan notes in force, by name

    # -- driver interface (run_live) ------------------------------------------------------
    def begin(self, link: Link, session: Session) -> None:
        self._link, self._session = link, session
        self._last_data = self.clock()
        self.outcome = "running"

    def on_state(self, state: str) -> None:
        if state == "disconnected" and not self._finished and self._lost_at is None:
            self._lose("the link is down")

    def poll(self) -> bool:
        """Send what is due; ``True`` once the plan is over (done or stopped for good)."""
        if self._finished:
            return True
        now = self.clock()
        if self._lost_at is not None:
            return self._after_loss(now)
        session = self._session
        assert session is not None
        samples = session.counters.samples
        if samples != self._samples:
            self._samples, self._last_data = samples, now
            if self._due is None:
                self._due = now + self.plan.lead_in
        elif now - self._last_data > self.silence:
            self._lose(f"no samples for {self.silence:g} s")
            return self._after_loss(now)
        if self._due is None or now < self._due:
            return False
        if self._next >= len(self.plan.commands):
            self.outcome = "done"
            self._finished = True
            return True
        cmd = self.plan.commands[self._next]
        if cmd.kind == "setpoint":  # the steps it causes carry the entry as tags
            for name, value in cmd.tags:
                if self._noted.get(name) != value:
                    session.add_note(name, value)
                    self._noted[name] = value
        if not self._send(cmd.text):
            return self._after_loss(now)
        self.out(f"plan: {cmd.entry}/{len(self.plan.commands)} sent {cmd.text!r}")
        self._next += 1
        self._due = now + cmd.dwell  # a late command still gets its whole dwell
        return False

    def end(self, reason: str) -> None:
        """The session is ending (``reason``: done, interrupted, stopped, error): send the safe
        command once if the link is up."""
        if self.outcome not in ("done", "link lost"):
            self.outcome = reason
        self._finished = True
        self._send_safe()

    @property
    def exit_status(self) -> int:
        """0 for a plan done; 130 interrupted or stopped before its end; 1 link lost."""
        if self.outcome == "done":
            return EXIT_OK
        if self.outcome == "link lost":
            return EXIT_PLAN_ABORTED
        return EXIT_INTERRUPTED

    # -- internals --------------------------------------------------------------------------
    def _checked(self, text: str) -> None:
        """The last gate before the port: only a line of the checked plan goes out."""
        if text not in self.plan.lines:
            raise InputError(f"refused to send {text!r}: not a command of the checked plan")

    def _send(self, text: str) -> bool:
        self._checked(text)
        link = self._link
        if link is None or link.state != "connected":
            self._lose("the link is down")
            return False
        try:
            link.write((text + self.plan.eol).encode())
        except (InputError, OSError, serial.SerialException):
            self._lose("a write failed")
            return False
        self.sent.append(text)
        return True

    def _lose(self, why: str) -> None:
        if self._lost_at is None:
            self._lost_at = self.clock()
            self.outcome = "link lost"
            self.out(f"plan: stopped, {why}")

    def _after_loss(self, now: float) -> bool:
        link = self._link
        if link is not None and link.state == "connected":
            self._send_safe()
            self._finished = True
            return True
        if now - (self._lost_at or now) > self.reconnect_wait:
            self._finished = True
            return True
        return False

    def _send_safe(self) -> None:
        if self.safe_sent or self.plan.safe is None:
            return
        link = self._link
        if link is None or link.state != "connected":
            self.out(f"plan: the link is down: the safe command {self.plan.safe!r} was NOT sent")
            self.safe_sent = True  # once: it is not retried later
            return
        self._checked(self.plan.safe)
        try:
            link.write((self.plan.safe + self.plan.eol).encode())
        except (InputError, OSError, serial.SerialException):
            self.out(f"plan: sending the safe command {self.plan.safe!r} failed")
        else:
            self.sent.append(self.plan.safe)
            self.out(f"plan: sent the safe command {self.plan.safe!r}")
            if self._session is not None:  # steps after this one are not the plan's
                for name in ("plan_entry", "setpoint", "repeat"):
                    self._session.add_note(name, "")
        self.safe_sent = True


def confirm_plan(plan: Plan, port: str, *, ask: Callable[[str], str] = input,
                 out: Callable[[str], None] = _stderr, interactive: bool | None = None) -> None:
    """Show the plan and ask the operator to type ``yes``; raise :class:`InputError` when the
    answer is anything else, or when there is no terminal to ask at."""
    for line in describe_plan(plan):
        out(line)
    if interactive is None:
        interactive = sys.stdin.isatty()
    if not interactive:
        raise InputError("the plan must be confirmed at a terminal: nothing was sent (pass"
                         " --no-confirm for an unattended rig)")
    try:
        answer = ask(f"Send these commands to {port}? The machine will move. Type yes: ")
    except EOFError:
        answer = ""
    if answer.strip().lower() != "yes":
        raise InputError("not confirmed: nothing was sent")
