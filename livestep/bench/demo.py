"""``livestep demo``: the whole tool on a virtual bench, no hardware, one command.

:func:`run_demo` starts a :class:`~livestep.bench.device.VirtualBench` (the invented carton
transfer axis, :class:`~livestep.bench.plants.AxisPlant`) on a pseudo-terminal, connects to
it through pyserial exactly as to a real port (:func:`livestep.live.run.run_live`), and sends the
built-in step plan (:func:`demo_plan`: two steps up and down under each of three gain sets,
the derivative gain raised each time, and under the last set one long move that drives the
axis into its force limit) with a :class:`~livestep.live.plan_run.PlanRunner`. Each
step's result is printed as it is measured (by default), and the session is recorded as any
live session is. It ends by itself when the plan is done.

The pieces are reusable: a terminal UI takes over by building ``demo_bench()``,
``demo_plan()`` and ``demo_decoder()`` itself, or by passing its own sink to
``run_demo(sinks=[...], print_steps=False, stop=event)`` in a worker thread (setting ``event``
ends the session: the safe command goes to the bench and the recording is closed).
"""

from __future__ import annotations

import sys
import threading
import tomllib
from collections.abc import Callable, Sequence
from dataclasses import replace
from pathlib import Path
from typing import Any

from livestep.bench.device import BenchSettings, VirtualBench, clock_start_for
from livestep.bench.plants import AxisParams, AxisPlant, Gains
from livestep.bench.suggested_pass import SuggestedPass
from livestep.decode.timebase import ClockSettings
from livestep.judge.profile import Profile, parse_profile
from livestep.live.plan import Plan, parse_plan
from livestep.live.plan_run import PlanRunner
from livestep.live.run import run_live
from livestep.live.session import Decoder, make_decoder
from livestep.sinks.base import Sink
from livestep.sources.serial_port import PortSettings
from livestep.steps.analysis import AnalysisSettings
from livestep.tuning.controller import ControllerSpec, parse_controller

__all__ = ["DEMO_PLAN", "DEMO_PROFILE_TOML", "demo_bench", "demo_controller", "demo_decoder",
           "demo_driver", "demo_plan", "demo_profile", "run_demo"]

#: The built-in plan: 5 mm moves of the transfer axis, retuned twice (positions in mm; kp
#: N/mm, ki N/(mm s), kd N s/mm). Invented.
DEMO_PLAN: dict[str, Any] = {
    "levels": [5.0, 0.0],
    "dwell": 1.0,
    "repeats": 2,
    "rest": 0.0,
    "lead_in": 0.5,
    "limits": {"min": -1.0, "max": 41.0, "max_step": 40.0},
    "commands": {"setpoint": "sp {value:g}", "gains": "gains kp={kp:g} ki={ki:g} kd={kd:g}",
                 "safe": "sp 0"},
    "gains": [{"name": "soft", "kp": 20.0, "ki": 60.0, "kd": 0.1},
              {"name": "medium", "kp": 20.0, "ki": 60.0, "kd": 0.2},
              {"name": "firm", "kp": 20.0, "ki": 60.0, "kd": 0.3}],
}
#: The long move sent at the end of the last gain set's pass (mm, from the rest level 0 and
#: back): the position error asks for more force than the drive's 250 N, so the force
#: channel sits at its limit during the rise and the step gets the saturation warning.
DEMO_LONG_MOVE = [40.0, 0.0]
#: The spec the demo judges its steps against (invented, like the axis): the soft and
#: medium gain sets overshoot too much, the firm one meets it.
DEMO_PROFILE_TOML = """\
name = "carton transfer axis: demo spec"
[limits]
rise_time = { max = 0.040 }                 # seconds
overshoot_pct = { max = 20, warn = 5 }      # % of the step
settling_time = { max = 0.600 }             # seconds, +-2 % band
steady_state_error_pct = { max = 5, warn = 2 }   # % of the setpoint change
zeta = { min = 0.45 }                       # fitted damping ratio

[controller]                                # the bench firmware's loop, as declared
rate = 5000                                 # Hz
derivative = "measurement"
derivative_filter = 400                     # Hz
output_limit = 250                          # N
delay = 1                                   # loop periods
plant = "position"
output_unit = "N"
[controller.limits]
kp = { min = 5, max = 40 }
ki = { min = 0, max = 200 }
kd = { min = 0.05, max = 0.6 }
"""

#: The gains the axis powers up with (the first set of the plan).
DEMO_START_GAINS = Gains(**{k: v for k, v in DEMO_PLAN["gains"][0].items() if k != "name"})
DEMO_RATE = 2000.0  # samples/s
DEMO_WRAP_AFTER = 3.0  # s: the device clock wraps early in the session


def demo_plan(quick: bool = False) -> Plan:
    """The built-in plan (``quick``: one pass at half the dwell, for tests and CI)."""
    doc = dict(DEMO_PLAN)
    if quick:
        doc.update(dwell=0.5, repeats=1, lead_in=0.3)
    plan = parse_plan(doc, source="built-in demo plan")
    return _with_long_move(plan, doc)


def _with_long_move(plan: Plan, doc: dict[str, Any]) -> Plan:
    """``plan`` with :data:`DEMO_LONG_MOVE` at the end of its last gain set's pass, tagged as
    that pass's steps are (and ``move=long``). The move is a plan of its own, from the rest
    level the pass ends at, so the plan checks (limits, largest change, the safe command's
    return) hold for it as for every other entry."""
    last = plan.setpoints()[-1]
    move = parse_plan({**doc, "levels": DEMO_LONG_MOVE, "gains": [], "repeats": 1,
                       "rest": last}, source="built-in demo plan, long move")
    gains = dict(plan.commands[-1].tags).get("gains")
    extra = []
    for k, c in enumerate(move.commands, start=len(plan.commands) + 1):
        tags = (("plan_entry", str(k)), ("setpoint", f"{c.value:g}"), ("move", "long"),
                *((("gains", gains),) if gains else ()))
        extra.append(replace(c, entry=k, tags=tags))
    return replace(plan, commands=plan.commands + tuple(extra))


def demo_profile() -> Profile:
    """The built-in demo spec (:data:`DEMO_PROFILE_TOML`)."""
    return parse_profile(DEMO_PROFILE_TOML, source="built-in demo spec")


def demo_controller() -> ControllerSpec:
    """The bench's control law, from the ``[controller]`` section of the demo spec."""
    spec = parse_controller(tomllib.loads(DEMO_PROFILE_TOML), "built-in demo spec")
    assert spec is not None
    return spec


def demo_driver(quick: bool = False, profile: Profile | None = None, *,
                out: Callable[[str], None] | None = None) -> PlanRunner | SuggestedPass:
    """What sends the demo's commands: the built-in plan, then (not ``quick``: the
    suggestion takes some seconds) a fourth pass with the gains suggested from the first
    three (:class:`~livestep.bench.suggested_pass.SuggestedPass`)."""
    say = out if out is not None else _stderr
    if quick:
        return PlanRunner(demo_plan(True), out=say)
    return SuggestedPass(DEMO_PLAN, profile if profile is not None else demo_profile(),
                         demo_controller(), out=say, plan=demo_plan())


def _stderr(line: str) -> None:
    print(line, file=sys.stderr, flush=True)


def demo_bench(*, fmt: str = "text", rate: float = DEMO_RATE, seed: int = 1) -> VirtualBench:
    """The virtual carton transfer axis (not started), its clock wrapping after 3 s."""
    plant = AxisPlant(AxisParams(gains=DEMO_START_GAINS), seed=seed)
    return VirtualBench(plant, BenchSettings(
        rate=rate, fmt=fmt, clock_start=clock_start_for(DEMO_WRAP_AFTER),
        banner="virtual bench: carton transfer axis, position loop (simulated)"))


def demo_decoder() -> Decoder:
    """How the demo reads the bench: detected format, 32-bit microsecond device time."""
    clock = ClockSettings(unit="us", wrap_bits=32)
    return make_decoder("auto", clock=clock, binary_clock=clock,
                        channels=("setpoint", "feedback", "force"))


def run_demo(*, quick: bool = False, record: Path | None = None, fmt: str = "text",
             seed: int = 1, json_lines: bool = False, sinks: Sequence[Sink] = (),
             print_steps: bool = True, settings: AnalysisSettings | None = None,
             stop: threading.Event | None = None, profile: Profile | None = None) -> int:
    """Run the demo to the end of its plan (or until ``stop`` is set, from another thread),
    judging each step against ``profile`` (default: :func:`demo_profile`); returns the exit
    status (0 when the plan ran to its end)."""
    bench = demo_bench(fmt=fmt, seed=seed)
    path = bench.start()
    plan = demo_plan(quick)
    print(f"livestep demo: virtual bench on {path} (simulated, no hardware); sending the"
          f" built-in plan, {len(plan.commands)} commands over {plan.duration:.0f} s"
          + (" (--quick: no fourth pass with suggested gains)" if quick
             else ", then a fourth pass with the gains livestep suggests"),
          file=sys.stderr, flush=True)
    profile = profile if profile is not None else demo_profile()
    try:
        return run_live(PortSettings(url=path), demo_decoder(),
                        replace(settings if settings is not None else AnalysisSettings(),
                                keep_windows=True),  # the suggestion fits the samples
                        record=record, json_lines=json_lines, sinks=sinks,
                        print_steps=print_steps, driver=demo_driver(quick, profile),
                        source=f"livestep demo (virtual bench on {path})", stop=stop,
                        profile=profile)
    finally:
        bench.stop()
