"""The threaded watch pipeline: replay and pty sources, verdicts, results log, bounded
memory, and ``watch --headless`` through a real pseudo-terminal."""

from __future__ import annotations

import contextlib
import json
import math
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from _device import FIXTURE, PROFILE, ROOT, close_enough, device_lines, steps_of, write_paced
from _pty import Pty

from livestep.cli import main
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError
from livestep.judge.profile import parse_profile
from livestep.live.run import run_live
from livestep.live.session import make_decoder
from livestep.live.watch import Watch, results_log_path, step_line_record
from livestep.sources.replay import ReplaySource
from livestep.sources.serial_port import PortSettings, SerialReader
from livestep.steps.analysis import AnalysisSettings
from livestep.steps.tags import parse_recorded_note


def os_pct(zeta: float) -> float:
    return 100 * math.exp(-zeta * math.pi / math.sqrt(1 - zeta * zeta))


def wait_for(cond, timeout: float = 20.0) -> None:
    end = time.monotonic() + timeout
    while not cond():
        assert time.monotonic() < end, "condition not met in time"
        time.sleep(0.01)


def replay_watch(tmp_path: Path | None = None, **kwargs) -> Watch:
    return Watch(ReplaySource(FIXTURE, speed=kwargs.pop("speed", None),
                              paused=kwargs.pop("paused", False)),
                 make_decoder("auto"), AnalysisSettings(), source_name=str(FIXTURE), **kwargs)


def test_replay_gives_the_offline_steps_and_verdicts(tmp_path, capsys):
    profile = parse_profile(PROFILE)
    watch = replay_watch(profile=profile, record=tmp_path / "r.csv")
    watch.start()
    assert watch.wait(60)
    snap = watch.snapshot()
    assert snap.error is None and snap.state == "replay finished"
    assert os_pct(0.35) > 20 > os_pct(0.5)  # the reference values behind the verdicts
    assert [e.verdict.verdict for e in snap.steps] == ["fail"] * 2 + ["pass"] * 6

    (tmp_path / "p.toml").write_text(PROFILE)
    assert main(["analyze", str(FIXTURE), "--json", "--profile", str(tmp_path / "p.toml"),
                 "--jobs", "1"]) == 1
    offline = json.loads(capsys.readouterr().out)["steps"]
    lines = [step_line_record(e) for e in snap.steps]
    assert close_enough(steps_of(lines), steps_of(offline))
    assert [s["verdict"] for s in lines] == [s["verdict"] for s in offline]

    log = results_log_path(watch.recorder.path)
    assert log.name == "r.steps.jsonl"
    logged = [json.loads(x) for x in log.read_text().splitlines()]
    assert logged == json.loads(json.dumps(lines))


def test_memory_stays_bounded():
    watch = replay_watch(keep_windows=3, ring_samples=1000)
    watch.start()
    assert watch.wait(60)
    steps = watch.snapshot().steps
    assert len(steps) == 8
    assert [e.result.window is not None for e in steps] == [False] * 5 + [True] * 3
    # the session itself keeps only the recent steps, numbered on across the dropped ones
    assert [r.window is not None for r in watch.session.results] == [True] * 3
    assert watch.session.published == 8
    assert [e.result.index for e in steps] == list(range(8))
    recent = watch.samples(count=10**6)
    assert recent.t.size == 1000 and recent.t[-1] == pytest.approx(17.9995, abs=1e-3)


def test_replay_pauses_resumes_and_stops_after_n_steps():
    watch = replay_watch(paused=True, max_steps=3)
    watch.start()
    wait_for(lambda: watch.snapshot().state in ("replay paused", "waiting for data"))
    assert watch.snapshot().counters["samples"] == 0  # nothing is read while paused
    watch.source.resume()
    assert watch.wait(60)
    snap = watch.snapshot()
    assert len(snap.steps) == 3 and snap.state == "stopped"


def test_replay_is_paced_by_the_sample_times():
    # 18 s of samples at 40 x real time: not faster than 0.45 s (a lower bound only).
    watch = replay_watch(speed=40.0)
    start = time.monotonic()
    watch.start()
    assert watch.wait(60)
    assert time.monotonic() - start >= 0.9 * 18 / 40
    assert len(watch.snapshot().steps) == 8


def test_notes_tag_the_following_steps(tmp_path):
    dev = Pty()
    watch = Watch(SerialReader(PortSettings(url=dev.path)),
                  make_decoder("text", clock=ClockSettings(unit="us")), AnalysisSettings(),
                  source_name=dev.path, record=tmp_path / "n.csv")
    try:
        watch.start()
        data = device_lines([0.0, 1.0, -1.0, 0.5, 2.0])
        half = data.index(b"\n", len(data) // 2) + 1
        dev.write(data[:half])
        lines_first = data[:half].count(b"\n") - 2
        wait_for(lambda: watch.snapshot().counters["samples"] == lines_first)
        note = watch.add_note("gains", "B")
        write_paced(dev, data[half:], 400_000)
        # three close at the next change; the fourth at the stop, or before once settled
        wait_for(lambda: len(watch.snapshot().steps) >= 3)
    finally:
        watch.stop()  # whatever happened: the port is not left open for the next test
        assert watch.wait(20)
        dev.close()
    steps = watch.snapshot().steps
    assert len(steps) == 4
    for e in steps:
        expected = (("gains", "B"),) if e.result.metrics.t_step >= note.t else ()
        assert e.result.tags == expected
    assert {e.result.tags for e in steps} == {(), (("gains", "B"),)}
    recorded = [parse_recorded_note(x) for x in (tmp_path / "n.csv").read_text().splitlines()
                if x.startswith("# note:")]
    assert recorded == [note]


def test_headless_through_a_pty_matches_analyze_on_its_recording(tmp_path):
    dev = Pty()
    rec = tmp_path / "h.csv"
    try:
        proc = subprocess.Popen(
            [sys.executable, "-m", "livestep", "watch", dev.path, "--headless",
             "--time-unit", "us", "--record", str(rec)],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
        line = proc.stderr.readline()
        assert "recording to" in line, line + proc.stderr.read()
        write_paced(dev, device_lines([0.0, 1.0, -1.0, 0.5, 2.0]), 400_000)
        first = proc.stdout.readline()  # steps are printed as soon as they are measured
        assert json.loads(first)["index"] == 0
        time.sleep(0.5)
        proc.send_signal(signal.SIGTERM)
        out, err = proc.stdout.read(), proc.stderr.read()  # the buffered rest too
        proc.wait(timeout=30)
    finally:
        dev.close()
    assert proc.returncode == 0, err
    lines = [json.loads(first)] + [json.loads(x) for x in out.splitlines()]
    steps, summary = lines[:-1], lines[-1]["summary"]
    assert len(steps) == 4 and summary["steps"] == 4 and summary["samples"] == 5 * 1600
    offline = subprocess.run([sys.executable, "-m", "livestep", "analyze", str(rec), "--json"],
                             capture_output=True, text=True, cwd=ROOT, timeout=120)
    assert offline.returncode == 0, offline.stderr
    assert close_enough(steps_of(steps), steps_of(json.loads(offline.stdout)["steps"]))
    logged = [json.loads(x) for x in (tmp_path / "h.steps.jsonl").read_text().splitlines()]
    assert logged == steps


def run_cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "livestep", *args], capture_output=True,
                          text=True, cwd=ROOT, timeout=120)


def test_headless_exit_status_follows_the_profile(tmp_path):
    gate = tmp_path / "gate.toml"
    gate.write_text(PROFILE)
    failed = run_cli("watch", str(FIXTURE), "--headless", "--fast", "--steps", "2",
                     "--profile", str(gate))
    lines = [json.loads(x) for x in failed.stdout.splitlines()]
    assert failed.returncode == 1 and len(lines) == 3
    assert [x["verdict"] for x in lines[:2]] == ["fail", "fail"]
    assert lines[2]["summary"]["verdicts"] == {"fail": 2}
    loose = tmp_path / "loose.toml"
    loose.write_text('[limits]\novershoot_pct = { max = 40 }\n')
    passed = run_cli("watch", str(FIXTURE), "--headless", "--fast", "--steps", "2",
                     "--profile", str(loose))
    assert passed.returncode == 0, passed.stderr
    bad = run_cli("watch", str(FIXTURE), "--headless", "--profile", str(tmp_path / "no.toml"))
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1
    missing = run_cli("watch", "/dev/ttyLIVESTEP_NONE", "--headless")
    assert missing.returncode == 2 and "no such port" in missing.stderr


def test_headless_duration_stops_by_itself():
    run = run_cli("watch", str(FIXTURE), "--headless", "--speed", "8", "--duration", "1")
    assert run.returncode == 0, run.stderr
    lines = [json.loads(x) for x in run.stdout.splitlines()]
    summary = lines[-1]["summary"]
    # 1 s at 8 x real time is about 8 s of the 18 s recording: it stopped before the end.
    assert summary["steps"] == len(lines) - 1 and 0 < summary["samples"] < 36000
    assert summary["verdicts"] == {} and summary["profile"] is None


class PlanDouble:
    """A driver of our own Driver protocol: sends one line when the link opens, ends the
    session once the device has streamed two steps, and notes what it was told."""

    exit_status = 0

    def __init__(self) -> None:
        self.calls: list[str] = []
        self.session = None

    def begin(self, link, session) -> None:
        self.calls.append("begin")
        self.session = session
        link.write(b"sp 1\n")

    def poll(self) -> bool:
        return self.session.published >= 2

    def on_state(self, state: str) -> None:
        self.calls.append(state)

    def end(self, reason: str) -> None:
        self.calls.append(f"end {reason}")


def test_a_driver_acts_on_the_link_and_ends_the_session(tmp_path):
    dev = Pty()
    driver = PlanDouble()
    try:
        result: list[int] = []
        runner = threading.Thread(target=lambda: result.append(run_live(
            PortSettings(url=dev.path), make_decoder("text", clock=ClockSettings(unit="us")),
            AnalysisSettings(), record=tmp_path / "d.csv", driver=driver,
            print_steps=False, source="bench double")))
        runner.start()
        got = b""
        end = time.monotonic() + 20
        while b"\n" not in got and time.monotonic() < end:  # what the driver sent
            got += os.read(dev.master, 100)
        data = device_lines([0.0, 1.0, -1.0, 0.5])

        def write() -> None:  # the session ends mid-stream: the rest blocks, then fails
            with contextlib.suppress(OSError):
                write_paced(dev, data, 400_000)

        threading.Thread(target=write, daemon=True).start()
        runner.join(30)
    finally:
        dev.close()
    assert got == b"sp 1\n" and result == [0]
    assert driver.calls[:2] == ["begin", "connected"] and driver.calls[-1] == "end done"
    assert "# source: bench double" in (tmp_path / "d.csv").read_text()


def test_ring_buffer_keeps_the_last_samples_in_order():
    from livestep.live.watch import _Ring

    ring = _Ring(10)
    t = np.arange(23.0)
    for a, b in ((0, 4), (4, 15), (15, 16), (16, 23)):  # wraps twice, one chunk > capacity
        ring.append(t[a:b], None, 2 * t[a:b])
    assert ring.last(100)[0].tolist() == list(range(13, 23))
    assert ring.since(17.5)[0].tolist() == [18, 19, 20, 21, 22]
    assert ring.since(17.5)[2].tolist() == [36, 38, 40, 42, 44]
    assert ring.since(0.0)[0].tolist() == list(range(13, 23))
    assert ring.since(99.0).shape == (3, 0)


def test_a_held_manual_step_gives_its_result_while_it_is_held(tmp_path):
    # The virtual bench (livestep sim, the exact sampled second-order response) with a loop
    # that settles in about 0.2 s: 4 / (zeta wn) = 0.2 s (Ogata's rule of thumb). The
    # setpoint is stepped once by hand, as an engineer would, and held.
    link, rec = tmp_path / "bench", tmp_path / "held.csv"
    sim = subprocess.Popen([sys.executable, "-m", "livestep", "sim", "--plant", "second-order",
                            "--zeta", "0.5", "--wn", "40", "--rate", "2000", "--noise", "0.002",
                            "--link", str(link), "--duration", "60"],
                           stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    try:
        assert sim.stdout.readline().strip() == str(link)
        proc = subprocess.Popen(
            [sys.executable, "-m", "livestep", "watch", str(link), "--headless", "--progress",
             "--time-unit", "us", "--record", str(rec)],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
        line = proc.stderr.readline()
        assert "recording to" in line, line + proc.stderr.read()
        time.sleep(1.0)  # a stretch before the step for its initial level
        fd = os.open(link, os.O_WRONLY | os.O_NOCTTY)
        os.write(fd, b"sp 1\n")
        os.close(fd)
        seen = []
        while True:  # progress lines, then the step: all while the setpoint is held
            rec_line = json.loads(proc.stdout.readline())
            seen.append(rec_line)
            if "index" in rec_line:
                break
        proc.send_signal(signal.SIGTERM)  # only now: the step came while it was held
        out, err = proc.stdout.read(), proc.stderr.read()
        proc.wait(timeout=30)
    finally:
        sim.terminate()
        sim.wait(timeout=30)
    assert proc.returncode == 0, err
    assert json.loads(out.splitlines()[-1])["summary"]["steps"] == 1
    step, progress = seen[-1], [x["progress"] for x in seen[:-1]]
    # closed by the data once settled (3 settling times and a checkpoint: under 1 s of
    # device time after the setpoint change), not by the end of the session
    assert step["window_end"] == "settled" and step["settling_time"] < 0.3
    phases = [p["phase"] for p in progress]
    assert "settling" in phases and phases == sorted(
        phases, key=["stepped", "rising", "risen", "settling"].index)
    # Ogata: overshoot 100 exp(-0.5 pi / sqrt(0.75)) = 16.3 %, read against the setpoint
    last = progress[-1]
    assert last["overshoot_pct"] == pytest.approx(16.3, abs=1.0)
    offline = run_cli("analyze", str(rec), "--json")
    assert offline.returncode == 0, offline.stderr
    steps = json.loads(offline.stdout)["steps"]
    assert close_enough(steps_of([step]), steps_of(steps))


def test_a_note_after_the_session_ended_is_refused():
    watch = replay_watch(speed=None)
    watch.start()
    watch.wait(30)
    assert watch.done
    with pytest.raises(InputError, match="session has ended"):
        watch.add_note("load", "full")


def test_the_ui_exit_status_follows_the_profile_as_headless_does(tmp_path, monkeypatch):
    import livestep.tui.app as tui_app

    def no_screen(watch):  # the UI's run, without a terminal: until the replay ends
        watch.start()
        watch.wait(60)
        return 0

    monkeypatch.setattr(tui_app, "run_app", no_screen)
    profile = tmp_path / "gate.toml"
    profile.write_text(PROFILE)  # fails the first two steps of the fixture (see _device)
    assert main(["watch", str(FIXTURE), "--fast", "--profile", str(profile)]) == 1
    profile.write_text('name = "loose"\n[limits]\novershoot_pct = { max = 60 }\n')
    assert main(["watch", str(FIXTURE), "--fast", "--profile", str(profile)]) == 0
