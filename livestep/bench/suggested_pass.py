"""The demo's last pass: gains suggested from the session's own steps, then tried.

:class:`SuggestedPass` is a driver of :func:`livestep.live.run.run_live` (and of the watch):
it runs the base plan with a :class:`~livestep.live.plan_run.PlanRunner`; when that is
done it computes a suggestion from the steps measured so far (:func:`livestep.tuning.
suggest.suggest`, in a worker thread so the live loop keeps reading), then runs the same
levels once more with the suggested gains as the only gain set, and at the end says how
the measured figures of that pass compare with the predicted ones. Every command it sends
is a line of a checked plan, as for any plan.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from typing import Any

import numpy as np

from livestep.judge.profile import Profile
from livestep.judge.quantities import display_unit, value_of
from livestep.live.plan import Plan, parse_plan
from livestep.live.plan_run import Link, PlanRunner
from livestep.live.session import Session
from livestep.tuning.controller import ControllerSpec
from livestep.tuning.suggest import COMPARED, Suggestion, suggest

__all__ = ["AGREEMENT", "SuggestedPass", "compare_pass"]

AGREEMENT = 0.20  # measured within this share of the predicted figure counts as agreeing
TAG = "suggested"  # the gain set's name: its steps carry gains=suggested
CLOSE_WAIT = 3.0  # s: the longest wait for the pass's last step to close


def compare_pass(suggestion: Suggestion, steps: list[Any], verdicts: list[Any]
                 ) -> tuple[bool, list[str]]:
    """Whether the pass met the spec with figures within :data:`AGREEMENT` of the
    prediction, and the lines that say so. ``steps``: its results, ``verdicts`` theirs."""
    assert suggestion.suggested is not None
    pred = suggestion.suggested.figures
    failed = sum(1 for v in verdicts if v is not None and v.verdict == "fail")
    ok = bool(steps) and failed == 0
    lines = [f"fourth pass: {len(steps)} steps with the suggested gains,"
             f" {len(steps) - failed} meet the spec" + ("" if failed else " (all)")]
    for q in COMPARED:
        vals = [v for r in steps if (v := value_of(r, q)) is not None]
        p = pred.get(q)
        f, unit = display_unit(q)
        if not vals or p is None:
            lines.append(f"  {q}: not measured on every step or not predicted")
            ok = False
            continue
        m = float(np.mean(vals))
        off = (m - p) / p if p else float("inf")
        agree = abs(off) <= AGREEMENT
        ok = ok and agree
        lines.append(f"  {q.replace('_', ' ')}: measured {m * f:.3g} {unit}, predicted"
                     f" {p * f:.3g} {unit} ({100 * off:+.0f} %,"
                     f" {'within' if agree else 'OUTSIDE'} {100 * AGREEMENT:.0f} %)")
    lines.append("fourth pass: " + ("meets the spec, figures as predicted" if ok else
                                    "does NOT meet the spec as predicted"))
    return ok, lines


class SuggestedPass:
    """The base plan, then a pass with suggested gains (see the module docstring).
    ``doc``: the base plan's document (its levels and dwell also make the fourth pass);
    ``plan``: the base plan to send, when it is more than ``doc`` gives (the demo's long
    move); ``out`` gets one line per event."""

    def __init__(self, doc: dict[str, Any], profile: Profile, controller: ControllerSpec, *,
                 out: Callable[[str], None], source: str = "demo plan",
                 plan: Plan | None = None) -> None:
        self.doc, self.profile, self.controller, self.out = doc, profile, controller, out
        self.runner = PlanRunner(plan if plan is not None else parse_plan(doc, source=source),
                                 out=out)
        self.phase = "base"  # base, settling, thinking, fourth, closing, done
        self.suggestion: Suggestion | None = None
        self.agreed: bool | None = None
        self.report_lines: list[str] = []  # what the last pass did against the prediction
        self._link: Link | None = None
        self._session: Session | None = None
        self._thread: threading.Thread | None = None
        self._expected = 0  # setpoint commands of the pass under way
        self._closing_since = 0.0

    # -- driver interface -------------------------------------------------------------------
    def begin(self, link: Link, session: Session) -> None:
        self._link, self._session = link, session
        self.runner.begin(link, session)

    def on_state(self, state: str) -> None:
        self.runner.on_state(state)

    def poll(self) -> bool:
        if self.phase == "base":
            if not self.runner.poll():
                return False
            if self.runner.outcome != "done":
                self.phase = "done"
                return True
            self.phase = "settling"
            self._closing_since = time.monotonic()
            self._expected = sum(1 for c in self.runner.plan.commands if c.kind == "setpoint")
        if self.phase == "settling":  # the base plan's last step closes once settled
            session = self._session
            assert session is not None
            if (session.published < self._expected
                    and time.monotonic() - self._closing_since < CLOSE_WAIT):
                return False
            self._think()
            return False
        if self.phase == "thinking":
            if self._thread is not None and self._thread.is_alive():
                return False
            return self._start_fourth()
        if self.phase == "fourth":
            if not self.runner.poll():
                return False
            self.phase = "closing"
            self._closing_since = time.monotonic()
        if self.phase == "closing":  # the last step closes once it has settled
            if (len(self._pass_steps()) < self._expected
                    and time.monotonic() - self._closing_since < CLOSE_WAIT):
                return False
            self._report()
            self.phase = "done"
        return True

    def end(self, reason: str) -> None:
        self.runner.end(reason)
        if self.report_lines:  # the verdict last, where the message line keeps it
            self.out(self.report_lines[-1])

    @property
    def exit_status(self) -> int:
        return self.runner.exit_status

    # -- internals --------------------------------------------------------------------------
    def _think(self) -> None:
        session = self._session
        assert session is not None
        results = list(session.results)
        self.phase = "thinking"
        self.out(f"demo: suggesting gains from {len(results)} steps (identifying the axis,"
                 " searching gains: some seconds)")

        def work() -> None:
            try:
                self.suggestion = suggest(results, self.profile, self.controller)
            except Exception as exc:  # noqa: BLE001 - the demo goes on without a fourth pass
                self.out(f"demo: no suggestion: {type(exc).__name__}: {exc}")
                return
            for step, why in self.suggestion.excluded:  # the long move, at the drive's limit
                self.out(f"demo: step {step} {why}")

        self._thread = threading.Thread(target=work, name="livestep-suggest", daemon=True)
        self._thread.start()

    def _start_fourth(self) -> bool:
        s = self.suggestion
        if s is None or s.suggested is None:
            why = "; ".join(s.notes) if s is not None else "the computation failed"
            self.out(f"demo: no suggested gains ({why}): no fourth pass")
            self.phase = "done"
            return True
        p = s.suggested
        ident = s.identification
        if ident is not None and ident.model.form == "position":
            m = ident.model
            self.out(f"demo: identified the axis: inertia {m.inertia:.4g} N s²/mm, viscous"
                     f" friction {m.viscous:.3g} N s/mm, Coulomb friction {m.coulomb:.3g} N")
        fig = p.figures
        self.out("demo: suggested " + " ".join(f"{k}={v:g}" for k, v in p.gains.items())
                 + f"; predicted rise {1e3 * (fig['rise_time'] or 0):.3g} ms, overshoot"
                 f" {fig['overshoot_pct'] or 0:.3g} %, settling"
                 f" {1e3 * (fig['settling_time'] or 0):.3g} ms")
        doc = dict(self.doc)
        doc["gains"] = [{"name": TAG, **p.gains}]
        doc["lead_in"] = 0.2
        plan = parse_plan(doc, source="demo: fourth pass")
        self._expected = sum(1 for c in plan.commands if c.kind == "setpoint")
        assert self._link is not None and self._session is not None
        # A tag of the base plan the fourth pass does not set (the long move's) ends here.
        ended = ({n for c in self.runner.plan.commands for n, _ in c.tags}
                 - {n for c in plan.commands for n, _ in c.tags})
        for name in sorted(ended):
            self._session.add_note(name, "")
        self.runner = PlanRunner(plan, out=self.out)
        self.runner.begin(self._link, self._session)
        self.phase = "fourth"
        return False

    def _pass_steps(self) -> list[tuple[Any, Any]]:
        session = self._session
        assert session is not None
        return [(r, v) for r, v in zip(session.results, session.verdicts, strict=False)
                if ("gains", TAG) in r.tags]

    def _report(self) -> None:
        assert self.suggestion is not None
        pairs = self._pass_steps()
        self.agreed, lines = compare_pass(self.suggestion, [r for r, _ in pairs],
                                          [v for _, v in pairs])
        self.report_lines = lines
        for line in lines[:-1]:  # the verdict line follows at the end (see end())
            self.out(line)
