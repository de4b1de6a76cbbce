"""Sending step plans to the virtual bench through a real pty: order, tags, refusals before
anything is sent, and the safe command on Ctrl-C and on link loss."""

from __future__ import annotations

import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest

from livestep.bench.device import BenchSettings, VirtualBench
from livestep.bench.plants import SecondOrderPlant
from livestep.cli import main
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError
from livestep.live.plan import parse_plan
from livestep.live.plan_run import PlanRunner, confirm_plan
from livestep.live.run import run_live
from livestep.live.session import make_decoder
from livestep.sinks.base import Sink
from livestep.sources.serial_port import PortSettings
from livestep.steps.analysis import AnalysisSettings

ROOT = Path(__file__).resolve().parents[2]
US32 = ClockSettings(unit="us", wrap_bits=32)
SAFE = "sp 0"


class Steps(Sink):
    def __init__(self) -> None:
        self.steps = []

    def on_step(self, result, verdict=None) -> None:
        self.steps.append(result)


def a_plan(levels=(1.0, 0.0, 1.0), dwell=0.4):
    return parse_plan({
        "levels": list(levels), "dwell": dwell, "rest": 0.0, "lead_in": 0.3,
        "limits": {"min": -1.0, "max": 1.0, "max_step": 1.0},
        "commands": {"setpoint": "sp {value:.3f}", "safe": SAFE}})


def bench(**settings) -> VirtualBench:
    return VirtualBench(SecondOrderPlant(0.5, 60.0), BenchSettings(rate=2000.0, **settings))


def run(b: VirtualBench, runner: PlanRunner, *timed: tuple[float, object]) -> tuple[int, list]:
    timers = [threading.Timer(t, f) for t, f in timed]
    for t in timers:
        t.start()
    sink = Steps()
    try:
        status = run_live(PortSettings(url=b.path), make_decoder("auto", clock=US32),
                          AnalysisSettings(), record=None, driver=runner, sinks=[sink],
                          print_steps=False)
    finally:
        for t in timers:
            t.cancel()
    time.sleep(0.1)  # the bench reads the last command
    return status, sink.steps


def test_commands_arrive_in_order_and_tag_their_steps():
    lines: list[str] = []
    with bench() as b:
        runner = PlanRunner(a_plan(), out=lines.append)
        status, steps = run(b, runner)
    assert status == 0 and runner.outcome == "done"
    assert b.received == ["sp 1.000", "sp 0.000", "sp 1.000", SAFE]
    assert runner.sent == b.received
    assert [s.metrics.direction for s in steps] == ["up", "down", "up"]
    assert [dict(s.tags)["plan_entry"] for s in steps] == ["1", "2", "3"]
    assert [dict(s.tags)["setpoint"] for s in steps] == ["1", "0", "1"]
    assert lines[0] == "plan: 1/3 sent 'sp 1.000'" and lines[-1] == f"plan: sent the safe" \
        f" command {SAFE!r}"


def test_out_of_range_plan_is_refused_before_anything_is_sent(capsys):
    with bench() as b:
        status = main(["live", b.path, "--levels", "0.5,2", "--dwell", "0.5", "--rest", "0",
                       "--min", "-1", "--max", "1", "--max-step", "2", "--setpoint-command",
                       "sp {value}", "--send", "--no-confirm", "--no-record"])
        err = capsys.readouterr().err
        # without confirmation (no terminal to ask at) a good plan is refused as well
        unconfirmed = main(["live", b.path, "--levels", "0.5", "--dwell", "0.5", "--rest",
                            "0", "--min", "-1", "--max", "1", "--max-step", "2",
                            "--setpoint-command", "sp {value}", "--send", "--no-record"])
        err2 = capsys.readouterr().err
        time.sleep(0.3)
        assert b.received == []
    assert status == 2 and "entry 2: setpoint 2 is outside the limits [-1, 1]" in err
    assert unconfirmed == 2 and "must be confirmed at a terminal" in err2


def test_confirmation_needs_yes():
    plan = a_plan()
    shown: list[str] = []
    confirm_plan(plan, "/dev/ttyX", ask=lambda _: " YES ", out=shown.append, interactive=True)
    assert any("sp 1.000" in line for line in shown)
    for answer in ("y", "", "no"):
        with pytest.raises(InputError, match="not confirmed: nothing was sent"):
            confirm_plan(plan, "/dev/ttyX", ask=lambda _, a=answer: a, out=shown.append,
                         interactive=True)


def _interruptible() -> None:
    """In the child: SIGINT as a terminal gives it (default, unblocked), whatever the test
    process inherited: a suite started in the background by a non-interactive shell has
    SIGINT ignored, which passes through exec, so the command never saw the interrupt."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)
    signal.pthread_sigmask(signal.SIG_UNBLOCK, [signal.SIGINT])


def test_safe_command_on_ctrl_c(tmp_path):
    plan = tmp_path / "plan.toml"
    plan.write_text('levels = [1.0, 0.0, 1.0, 0.0, 1.0]\ndwell = 0.5\nrest = 0.0\n'
                    'lead_in = 0.3\n[limits]\nmin = -1.0\nmax = 1.0\nmax_step = 1.0\n'
                    f'[commands]\nsetpoint = "sp {{value:.3f}}"\nsafe = "{SAFE}"\n')
    with bench() as b:
        proc = subprocess.Popen(
            [sys.executable, "-m", "livestep", "live", b.path, "--plan", str(plan), "--send",
             "--no-confirm", "--no-record", "--time-unit", "us", "--wrap", "32"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT,
            preexec_fn=_interruptible)
        seen = []
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline:
            line = proc.stderr.readline()
            seen.append(line)
            if line.startswith("plan: 2/5") or not line:
                break
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=30)
        time.sleep(0.2)
    assert proc.returncode == 130, "".join(seen) + err
    assert b.received == ["sp 1.000", "sp 0.000", SAFE]
    assert "Traceback" not in err and f"plan: sent the safe command {SAFE!r}" in err


def test_safe_command_when_the_samples_stop():
    with bench() as b:
        runner = PlanRunner(a_plan(levels=(1.0, 0.0, 1.0, 0.0, 1.0)), silence=0.4,
                            out=lambda _: None)

        def stall() -> None:
            b.streaming = False

        status, _ = run(b, runner, (1.0, stall))
    assert status == 1 and runner.outcome == "link lost"
    assert b.received[-1] == SAFE and b.received.count(SAFE) == 1
    assert 1 <= len(b.received) - 1 < 5  # the plan stopped early


def test_safe_command_after_the_link_comes_back(tmp_path):
    lines: list[str] = []
    with bench(link=tmp_path / "ttyAXIS") as b:
        runner = PlanRunner(a_plan(levels=(1.0, 0.0, 1.0, 0.0, 1.0)), out=lines.append)
        status, _ = run(b, runner, (1.0, b.unplug), (1.5, b.replug))
    assert status == 1 and runner.outcome == "link lost"
    # the reader reports the disconnection, or a command written at that moment fails
    assert any(line in ("plan: stopped, the link is down", "plan: stopped, a write failed")
               for line in lines), lines
    assert b.received[-1] == SAFE and b.received.count(SAFE) == 1
    assert b.received[:-1] == ["sp 1.000", "sp 0.000", "sp 1.000", "sp 0.000",
                               "sp 1.000"][:len(b.received) - 1]
    assert len(b.received) - 1 < 5


def test_a_lost_link_that_stays_lost_is_reported(tmp_path):
    lines: list[str] = []
    with bench(link=tmp_path / "ttyAXIS") as b:
        runner = PlanRunner(a_plan(levels=(1.0, 0.0, 1.0, 0.0, 1.0)), out=lines.append,
                            reconnect_wait=0.5)
        status, _ = run(b, runner, (0.9, b.unplug))
    assert status == 1
    assert lines[-1] == f"plan: the link is down: the safe command {SAFE!r} was NOT sent"
    assert SAFE not in b.received


class FakeLink:
    """The runner's view of a port (state and write), to drive it on a hand-set clock."""

    def __init__(self) -> None:
        self.state, self.written = "connected", []

    def write(self, data: bytes) -> None:
        self.written.append(data.decode())


def test_each_level_gets_its_whole_dwell_even_after_a_late_command():
    from livestep.live.session import Session

    now = [0.0]
    link, session = FakeLink(), Session(make_decoder("text", clock=US32))
    runner = PlanRunner(a_plan(levels=(1.0, 0.0, 1.0), dwell=0.4), clock=lambda: now[0],
                        out=lambda _: None, silence=100.0)
    runner.begin(link, session)

    def at(t: float) -> bool:
        now[0] = t
        session.feed(b"%d,0,0\n" % int(100 + t * 1e6))  # a sample keeps the link alive
        return runner.poll()

    # the text decoder settles the format after eight data lines
    session.feed(b"t,setpoint,feedback\n" + b"".join(b"%d,0,0\n" % k for k in range(10)))
    assert not at(0.0) and link.written == []  # lead-in 0.3 s from the first sample
    assert not at(0.31) and link.written == ["sp 1.000\n"]
    assert not at(2.0) and len(link.written) == 2  # late (busy): one command, not a burst
    assert not at(2.39) and len(link.written) == 2  # the level still gets its 0.4 s
    assert not at(2.41) and len(link.written) == 3
    assert at(2.82) and runner.outcome == "done"
    runner.end("done")
    assert link.written[-1] == SAFE + "\n" and runner.exit_status == 0


def test_safe_command_on_an_error():
    # the stream cannot be read as configured (no column 'zz' among the given names, so
    # whether or not the header was caught): the session ends with
    # status 2 and the safe command still goes out, once
    from livestep.decode.text import TextFormat

    with bench() as b:
        runner = PlanRunner(a_plan(), out=lambda _: None)
        status = run_live(PortSettings(url=b.path),
                          make_decoder("text", text=TextFormat(names=("t", "setpoint", "feedback"),
                                                      time="zz"), clock=US32),
                          AnalysisSettings(), record=None, driver=runner, print_steps=False)
        time.sleep(0.1)
    assert status == 2 and runner.outcome == "error"
    assert b.received == [SAFE]
