"""The virtual bench through a real pseudo-terminal, read with pyserial like any port:
streamed, decoded, detected and measured against the closed-form second-order figures."""

from __future__ import annotations

import queue
import time

import pytest
from _signals import reference

from livestep.bench.device import BenchSettings, VirtualBench, clock_start_for
from livestep.bench.plants import AxisPlant, SecondOrderPlant
from livestep.decode.timebase import ClockSettings
from livestep.live.session import Session, make_decoder
from livestep.sources.serial_port import PortSettings, SerialReader

US32 = ClockSettings(unit="us", wrap_bits=32)


def run_link(bench: VirtualBench, schedule: list[tuple[float, bytes]], duration: float,
             actions: list[tuple[float, object]] = ()) -> tuple[Session, SerialReader, list]:
    """Open the bench's port with pyserial, write each ``(t, bytes)`` of ``schedule`` at t
    seconds, call each ``(t, fn)`` of ``actions``, decode and analyse for ``duration``
    seconds; returns the closed session, the reader and its state events."""
    session = Session(make_decoder("auto", clock=US32, binary_clock=US32))
    reader = SerialReader(PortSettings(url=bench.path))
    reader.start()
    states = []
    todo = sorted([(t, "write", b) for t, b in schedule] + [(t, "call", f) for t, f in actions],
                  key=lambda x: x[0])
    start = time.monotonic()
    try:
        while (now := time.monotonic() - start) < duration:
            while todo and now >= todo[0][0]:
                _, kind, what = todo.pop(0)
                reader.write(what) if kind == "write" else what()
            try:
                kind, payload = reader.events.get(timeout=0.02)
            except queue.Empty:
                continue
            if kind == "data":
                session.feed(payload)
            else:
                states.append(payload)
    finally:
        reader.stop()
        session.close()
    return session, reader, states


@pytest.mark.parametrize("fmt,rate,wrap_after", [("text", 5000.0, None),
                                                   ("binary", 20000.0, 0.6)])
def test_exact_second_order_through_a_pty_gives_the_closed_form_figures(fmt, rate, wrap_after):
    # Reference figures of wn^2 / (s^2 + 2 zeta wn s + wn^2) (Ogata, Modern Control
    # Engineering, ch. 5): peak time Tp = pi / (wn sqrt(1 - zeta^2)), overshoot
    # 100 exp(-zeta pi / sqrt(1 - zeta^2)); 10-90 % rise time and the last exit from the 2 %
    # band are the closed-form response's crossings, found by root finding
    # (tests/_signals.reference). Times from the step instant include the dead time.
    # Accuracy targets of the measurement tests: rise within 1 %, settling within 2 % or two
    # samples, overshoot within 0.3 points, peak time within one sample.
    zeta, wn, gain, theta = 0.45, 60.0, 1.0, 2.3e-3  # dead time: not a whole sample count
    clock = clock_start_for(wrap_after) if wrap_after else 0
    bench = VirtualBench(SecondOrderPlant(zeta, wn, gain=gain, dead_time=theta),
                         BenchSettings(rate=rate, fmt=fmt, clock_start=clock))
    with bench:
        session, _, _ = run_link(bench, [(0.3, b"sp 2\n"), (1.0, b"sp -1\r\n")], 1.7)
    assert bench.received == ["sp 2", "sp -1"]
    c = session.counters
    assert c.restarts == 0 and c.gaps == 0 and c.lost == 0, c.snapshot()
    steps = session.results
    assert [s.metrics.direction for s in steps] == ["up", "down"]
    # the wrap of the device's 32-bit microsecond counter does not break the time line
    assert 0.6 < steps[1].metrics.t_step - steps[0].metrics.t_step < 0.8
    ref = reference(zeta, wn)
    dt = 1.0 / rate
    for s, amp in zip(steps, (2.0, -3.0), strict=True):
        m = s.metrics
        assert m.amplitude == pytest.approx(gain * amp, rel=2e-3)
        assert m.rise_time == pytest.approx(ref.rise, rel=0.01)
        assert m.peak_time is not None and abs(m.peak_time - (ref.peak_time + theta)) <= dt
        assert m.overshoot_pct == pytest.approx(ref.overshoot, abs=0.3)
        assert m.settled and m.settling_time is not None
        assert abs(m.settling_time - (ref.settling + theta)) <= max(0.02 * ref.settling, 2 * dt)
        assert m.sample_period == pytest.approx(dt, rel=1e-6)


def test_commands_answer_with_notes_in_the_stream():
    bench = VirtualBench(AxisPlant(seed=2), BenchSettings(rate=1000.0))
    schedule = [(0.3, b"gains kd=0.2 kp=18\n"), (0.4, b"status\nbogus 1\n"),
                (0.5, b"stream off\n"), (1.0, b"stream on\n")]
    with bench:
        session, _, _ = run_link(bench, schedule, 1.4)
    assert bench.received == ["gains kd=0.2 kp=18", "status", "bogus 1", "stream off",
                              "stream on"]
    logs = list(session.decoder.logs)
    # the gain change comes back as a note line, which the steps after it carry as tags
    notes = {(n.name, n.value) for n in session.notes.notes}
    assert {("kp", "18"), ("ki", "60"), ("kd", "0.2")} <= notes
    assert any(line.startswith("# status sp=0 gains kp=18") for line in logs)
    assert any(line.startswith("# error: unknown command 'bogus'") for line in logs)
    assert "# stream off" in logs and "# stream on" in logs
    # streaming stopped for about half a second while the clock ran on: one gap, and fewer
    # samples than the time covered
    assert session.counters.gaps == 1
    assert session.counters.samples < 0.8 * 1000 * (session.last_t - session.first_t)


def test_unplug_and_replug_behind_a_stable_link(tmp_path):
    link = tmp_path / "ttyBENCH"
    bench = VirtualBench(SecondOrderPlant(0.7, 30.0), BenchSettings(rate=1000.0, link=link))
    with bench:
        assert bench.path == str(link)
        session, reader, states = run_link(bench, [], 1.5, actions=[
            (0.4, bench.unplug), (0.7, bench.replug)])
    assert states[:3] == ["connected", "disconnected", "connected"]
    assert reader.reconnects == 1
    assert session.counters.samples > 800  # data before and after the replug
    assert not link.exists()  # the bench removes its link when it stops


def test_sim_command_prints_the_path_and_answers(tmp_path):
    import subprocess
    import sys
    from pathlib import Path

    import serial

    proc = subprocess.Popen([sys.executable, "-m", "livestep", "sim", "--plant", "second-order",
                             "--rate", "1000", "--duration", "20"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True,
                            cwd=Path(__file__).resolve().parents[2])
    path = proc.stdout.readline().strip()
    with serial.Serial(path, timeout=0.2) as port:
        port.write(b"status\n")
        got = b""
        deadline = time.monotonic() + 5
        while b"# status" not in got and time.monotonic() < deadline:
            got += port.read(4096)
    proc.terminate()  # SIGTERM ends it cleanly
    _, err = proc.communicate(timeout=10)
    assert proc.returncode == 0, err
    assert b"# status sp=0 stream=on rate=1000" in got
    assert "commands: sp VALUE" in err
