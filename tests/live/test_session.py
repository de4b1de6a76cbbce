"""Sessions: the same path for live bytes, raw captures and recordings; pacing; sinks."""

from __future__ import annotations

import io

import pytest
from _device import device_lines
from rich.console import Console

from livestep.cli import main
from livestep.decode.counters import LinkCounters
from livestep.decode.text import TextDecoder, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.live.session import AutoDecoder, Session, make_decoder, replay_file
from livestep.sinks.base import Sink
from livestep.sinks.console import ConsoleSink
from livestep.sinks.recorder import Recorder

US = ClockSettings(unit="us")


class Spy(Sink):
    def __init__(self) -> None:
        self.steps, self.ticks, self.closed = [], [], None

    def on_step(self, result, verdict=None) -> None:
        self.steps.append(result)

    def on_tick(self, counters: LinkCounters) -> None:
        self.ticks.append(counters.samples)

    def close(self, counters: LinkCounters) -> None:
        self.closed = counters.snapshot()


def feed_all(session: Session, data: bytes, piece: int = 1000) -> None:
    for i in range(0, len(data), piece):
        session.feed(data[i:i + piece])
        session.tick()
    session.close()


def test_raw_capture_and_recording_replay_like_the_live_session(tmp_path):
    data = device_lines([0.0, 1.0, 3.0, 2.0])
    spy = Spy()
    rec = Recorder(tmp_path / "s.csv", metadata={"source": "test"}, raw_path=tmp_path / "s.raw")
    live = Session(TextDecoder(clock=US), sinks=[spy, rec])
    feed_all(live, data, piece=777)
    assert len(live.results) == 3 and spy.steps == live.results
    assert spy.closed["samples"] == 4 * 1600 and spy.ticks[-1] == 4 * 1600
    assert (tmp_path / "s.raw").read_bytes() == data

    raw = Session(TextDecoder(clock=US))
    replay_file(tmp_path / "s.raw", raw, speed=None)
    raw.close()
    assert raw.results == live.results  # same bytes, same decoder: identical results

    again = Session(make_decoder("auto"))
    replay_file(rec.path, again, speed=None)
    again.close()
    assert [r.metrics.t_step for r in again.results] == pytest.approx(
        [r.metrics.t_step for r in live.results], abs=1e-9)
    for a, b in zip(again.results, live.results, strict=True):
        assert a.metrics.rise_time == pytest.approx(b.metrics.rise_time, rel=1e-6)
        assert a.metrics.overshoot_pct == pytest.approx(b.metrics.overshoot_pct, abs=1e-6)


def test_replay_paces_by_the_sample_times(tmp_path):
    path = tmp_path / "r.csv"
    path.write_text("t,setpoint,feedback\n" + "".join(f"{k * 0.01:.2f},0,0\n"
                                                      for k in range(2000)))
    slept: list[float] = []
    clock = [0.0]

    def fake_sleep(dt: float) -> None:
        slept.append(dt)
        clock[0] += dt

    import livestep.live.session as session_module

    real = session_module.time.monotonic
    session_module.time.monotonic = lambda: clock[0]
    try:
        session = Session(make_decoder("text"))
        replay_file(path, session, speed=4.0, sleep=fake_sleep)
    finally:
        session_module.time.monotonic = real
    # 19.99 s of samples at 4x real time: about 5 s of sleeping in all.
    assert sum(slept) == pytest.approx(19.99 / 4.0, abs=0.05)


def test_auto_decoder_picks_text_for_lines():
    dec = AutoDecoder(lambda c: TextDecoder(TextFormat(), US, c), lambda c: None)
    session = Session(dec)
    feed_all(session, device_lines([0.0, 1.0]))
    assert isinstance(dec.inner, TextDecoder) and session.counters.samples == 3200


def test_ports_command_runs(capsys):
    assert main(["ports"]) == 0
    assert capsys.readouterr().out.strip()


def with_notes(data: bytes, notes: dict[int, str]) -> bytes:
    """``data`` with note lines inserted before the given (0-based) sample lines."""
    lines = data.splitlines(keepends=True)
    out, k = [], -1
    for line in lines:
        if line[:1].isdigit():
            k += 1
            if k in notes:
                out.append(notes[k].encode() + b"\n")
        out.append(line)
    return b"".join(out)


def test_notes_tag_steps_live_in_the_recording_and_on_replay(tmp_path, capsys):
    # Steps at samples 1600, 3200, 4800 (0.8 s holds at 2 kHz); gains change between them.
    data = with_notes(device_lines([0.0, 1.0, 3.0, 2.0]),
                      {0: "gains=A", 2000: "gains=B", 4000: "load=full"})
    rec = Recorder(tmp_path / "n.csv", metadata={"source": "test"})
    shown = io.StringIO()
    live = Session(TextDecoder(clock=US), sinks=[rec, ConsoleSink(Console(file=shown))])
    feed_all(live, data, piece=555)
    assert [r.tags for r in live.results] == [
        (("gains", "A"),), (("gains", "B"),), (("gains", "B"), ("load", "full"))]
    assert "note at 0.999 s: gains=B" in shown.getvalue()
    assert "[gains=B, load=full]" in shown.getvalue()
    text = rec.path.read_text()
    assert "# note: 0 gains=A\n" in text and "# note: 0.9995 gains=B\n" in text

    again = Session(make_decoder("auto"))
    replay_file(rec.path, again, speed=None)
    again.close()
    assert [r.tags for r in again.results] == [r.tags for r in live.results]

    assert main(["analyze", str(rec.path), "--json", "--jobs", "1"]) == 0
    import json
    doc = json.loads(capsys.readouterr().out)
    assert [s["tags"] for s in doc["steps"]] == [
        {"gains": "A"}, {"gains": "B"}, {"gains": "B", "load": "full"}]


def test_add_note_from_outside_the_stream(tmp_path):
    rec = Recorder(tmp_path / "u.csv", metadata={})
    session = Session(TextDecoder(clock=US), sinks=[rec])
    data = device_lines([0.0, 1.0, 2.0])
    session.feed(data[:len(data) // 2])  # into the second hold (step at 0.8 s)
    note = session.add_note("gains", "C")
    assert note.t == session.last_t
    session.feed(data[len(data) // 2:])
    session.close()
    assert [r.tags for r in session.results] == [(), (("gains", "C"),)]
    assert f"# note: {note.t:.12g} gains=C\n" in rec.path.read_text()
