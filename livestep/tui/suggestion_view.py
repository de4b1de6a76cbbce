"""The live view's gain suggestion: when to compute it, where, and the screen that shows it.

:class:`SuggestionTracker` watches the finished steps the app already pulls each frame and,
once steps of two gain sets or more have been measured, computes
:func:`livestep.tuning.suggest.suggest` again when a gain set appears or gets new steps, at
most every :attr:`SuggestionTracker.MIN_INTERVAL` seconds, one computation at a time, in a
worker process (a fit and a search take seconds of CPU; in a thread they would hold the
interpreter against the analysis thread). :class:`SuggestionScreen` (key ``t``) shows the
latest suggestion as :func:`livestep.reports.suggestion.suggestion_renderable` draws it.
Nothing is ever sent: the screen says so with the cautions.
"""

from __future__ import annotations

import contextlib
import multiprocessing as mp
import sys
import time
import tomllib
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from pathlib import Path

from rich.console import Group, RenderableType
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import Screen
from textual.widgets import Footer, Static

from livestep.errors import InputError
from livestep.judge.profile import Profile
from livestep.live.watch import StepEntry
from livestep.reports.suggestion import suggestion_renderable
from livestep.steps.analysis import StepResult
from livestep.tuning.controller import ControllerSpec, parse_controller
from livestep.tuning.records import gain_sets
from livestep.tuning.suggest import CAUTIONS, Suggestion, suggest

__all__ = ["SuggestionScreen", "SuggestionTracker", "controller_of"]


def controller_of(profile: Profile | None) -> tuple[ControllerSpec | None, str]:
    """The ``[controller]`` section of the profile's file, if it has one, and a line saying
    why there is none (or what is wrong with it)."""
    if profile is None:
        return None, "no profile: give --profile to have limits to meet"
    path = Path(profile.source)
    if not path.is_file():
        return None, "the profile has no [controller] section: trends only"
    try:
        spec = parse_controller(tomllib.loads(path.read_text(encoding="utf-8")), str(path))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        return None, f"cannot read the profile's [controller] section: {exc}"
    except InputError as exc:
        return None, str(exc)
    if spec is None:
        return None, "the profile has no [controller] section: trends only"
    return spec, ""


def _compute(results: list[StepResult], profile: Profile, controller: ControllerSpec | None,
             names: tuple[str, ...]) -> Suggestion:
    """In the worker process."""
    return suggest(results, profile, controller, names)


class SuggestionTracker:
    """When and where the live view's suggestion is computed (see the module docstring)."""

    MIN_INTERVAL = 5.0  # s between two computations

    def __init__(self, profile: Profile | None, controller: ControllerSpec | None,
                 why: str = "", names: tuple[str, ...] = ("kp", "ki", "kd"), *,
                 extra: Callable[[], list[str]] | None = None) -> None:
        self.profile, self.controller, self.why, self.names = profile, controller, why, names
        self.extra = extra  # lines shown first, e.g. how the demo's suggested pass went
        self.suggestion: Suggestion | None = None
        self.computed_at: float | None = None  # wall time (time.time()) of the suggestion
        self.steps_used = 0
        self.error = ""
        self.status = "waiting for steps of two gain sets"
        self._future: Future[Suggestion] | None = None
        self._pool: ProcessPoolExecutor | None = None
        self._key: tuple | None = None
        self._started = 0.0
        self._pending_steps = 0
        self._seen = -1  # steps looked at last time

    @property
    def busy(self) -> bool:
        return self._future is not None

    def poll(self, steps: Sequence[StepEntry], now: float | None = None) -> bool:
        """Called each frame: collect a finished computation, start one when due. Returns
        ``True`` when a new suggestion has just arrived. Cheap when nothing is due."""
        now = time.monotonic() if now is None else now
        arrived = False
        if self._future is not None and self._future.done():
            try:
                self.suggestion = self._future.result()
                self.computed_at = time.time()
                self.steps_used = self._pending_steps
                self.error = ""
                arrived = True
            except Exception as exc:  # noqa: BLE001 - shown on the screen, the view goes on
                self.error = f"the suggestion failed: {type(exc).__name__}: {exc}"
            self._future = None
        if self.profile is None or self._future is not None or len(steps) == self._seen:
            return arrived  # nothing new since the last look: no work on this frame
        self._seen = len(steps)
        results = [e.result for e in steps]
        sets = gain_sets(results, self.names)
        if len(sets) < 2:
            self.status = (f"waiting for steps of two gain sets ({len(sets)} so far; gains"
                           f" are read from the notes {', '.join(self.names)})")
            return arrived
        key = tuple((g, len(s)) for g, s in sets.items())
        if key == self._key:
            return arrived
        if now - self._started < self.MIN_INTERVAL:
            self._seen = -1  # look again on a later frame
            return arrived
        self._key, self._started, self._pending_steps = key, now, len(results)
        # the pool's first queue starts multiprocessing's resource tracker, which hands it
        # the stderr file descriptor: the real one, not the UI's stand-in (which has none)
        with contextlib.redirect_stderr(sys.__stderr__ or sys.stderr):
            if self._pool is None:  # spawned: the app's threads are already running
                self._pool = ProcessPoolExecutor(max_workers=1,
                                                 mp_context=mp.get_context("spawn"))
            self._future = self._pool.submit(_compute, results, self.profile,
                                             self.controller, self.names)
        self.status = f"computing from {len(results)} steps of {len(sets)} gain sets ..."
        return arrived

    def close(self) -> None:
        """Stop the worker at once: a computation under way is not waited for."""
        if self._pool is not None:
            # the executor has no public way to end a running task before Python 3.14
            for proc in list(getattr(self._pool, "_processes", {}).values()):
                proc.terminate()
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = None

    def renderable(self) -> RenderableType:
        """What the screen shows now."""
        head = Text("Gain suggestion", style="bold")
        parts: list[RenderableType] = [head]
        if self.suggestion is not None and self.computed_at is not None:
            stamp = time.strftime("%H:%M:%S", time.localtime(self.computed_at))
            parts.append(Text(f"from {self.steps_used} steps, computed at {stamp}"
                              + (" (recomputing)" if self.busy else ""), style="dim"))
        else:
            parts.append(Text(self.status, style="dim"))
        if self.why:
            parts.append(Text(self.why, style="yellow"))
        for line in self.extra() if self.extra is not None else []:
            parts.append(Text(line, style="bold green" if "meets the spec" in line else ""))
        if self.error:
            parts.append(Text(self.error, style="red"))
        if self.suggestion is not None:
            parts.append(suggestion_renderable(self.suggestion))
        else:
            parts += [Text(f"⚠ {c}", style="bold") for c in CAUTIONS]
        return Group(*parts)


class SuggestionScreen(Screen[None]):
    """The suggestion on its own screen; ``t`` or Escape goes back to the live view."""

    BINDINGS = [Binding("t,escape", "close", "back"),
                Binding("q", "app.quit", "quit")]

    def __init__(self, tracker: SuggestionTracker) -> None:
        super().__init__()
        self.tracker = tracker

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="suggestion-box"):
            yield Static(self.tracker.renderable(), id="suggestion")
        yield Footer()

    def on_mount(self) -> None:
        self.set_interval(0.5, self.redraw)
        self.query_one("#suggestion-box").focus()

    def redraw(self) -> None:
        self.query_one("#suggestion", Static).update(self.tracker.renderable())

    def action_close(self) -> None:
        self.dismiss(None)
