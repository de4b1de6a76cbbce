"""Live sessions end to end through a real pseudo-terminal: record, replay, kill, busy port."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import pytest
from _device import RATE, ROOT, close_enough, device_lines, steps_of, write_paced
from _pty import Pty

from livestep.sources.recording import RecordingReader


def start_live(port: str, *args: str) -> subprocess.Popen:
    proc = subprocess.Popen(
        [sys.executable, "-m", "livestep", "live", port, "--time-unit", "us", *args],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    deadline = time.monotonic() + 20
    line = ""
    while time.monotonic() < deadline:  # wait until the port is open and recording
        line = proc.stderr.readline()
        if "recording to" in line or not line:
            break
    assert "recording to" in line, line + proc.stderr.read()
    return proc


def stop(proc: subprocess.Popen) -> tuple[str, str]:
    proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=30)
    assert proc.returncode == 0, err
    return out, err


def live_steps(data: bytes, rate_bytes: float, *args: str) -> tuple[list[dict], str, str]:
    """Run ``livestep live --json-lines`` on a fresh pty, write ``data`` into it, stop it:
    the steps it printed, its stderr and the port path."""
    dev = Pty()
    try:
        proc = start_live(dev.path, "--json-lines", *args)
        write_paced(dev, data, rate_bytes=rate_bytes)
        time.sleep(1.0)
        out, err = stop(proc)
    finally:
        dev.close()
    return [json.loads(line) for line in out.splitlines() if line.startswith("{")], err, dev.path


def run_cli(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "livestep", *args], capture_output=True,
                          text=True, cwd=ROOT, timeout=120)


@pytest.mark.parametrize("restart", [False, True])
def test_live_record_then_replay_gives_the_same_steps(tmp_path, restart):
    levels = [0.0, 1.0, -1.0, 0.5, 2.0]
    data = device_lines(levels, restart_at=int(2.2 * 0.8 * RATE) if restart else None)
    rec = tmp_path / "session.csv"
    live, err, port = live_steps(data, 400_000, "--record", str(rec))
    assert len(live) == len(levels) - 1, err
    # The restart (inside the third hold) cuts the second step's window short.
    assert [s["window_end"] for s in live].count("device restart") == (1 if restart else 0)
    replay = run_cli("replay", str(rec), "--fast", "--json")
    assert replay.returncode == 0, replay.stderr
    assert close_enough(steps_of(json.loads(replay.stdout)["steps"]), steps_of(live))
    if not restart:  # offline analysis reads the recording the same way
        offline = run_cli("analyze", str(rec), "--json")
        assert offline.returncode == 0, offline.stderr
        assert close_enough(steps_of(json.loads(offline.stdout)["steps"]), steps_of(live))
    text = rec.read_text()
    assert "# source: " + port in text and "# livestep: " in text and "# start: " in text
    assert ("# segment: 1" in text) == restart


def test_sigkill_loses_at_most_the_last_second(tmp_path):
    data = device_lines([0.0, 1.0, 0.0, 1.0, 0.0, 1.0], hold=1.0)
    dev = Pty()
    rec = tmp_path / "killed.csv"
    try:
        proc = start_live(dev.path, "--record", str(rec))
        log = write_paced(dev, data[: len(data) * 3 // 4], rate_bytes=100_000)
        time.sleep(0.3)
        killed_at = time.monotonic()
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)
    finally:
        dev.close()
    sent_before = max(n for t, n in log if t <= killed_at - 1.0)
    lines_before = data[:sent_before].count(b"\n") - 2  # banner and header are not samples
    reader = RecordingReader(rec)
    rows = sum(len(c) for c in reader)
    assert rows >= lines_before - 1  # a line still in the pty when the 1 s window began
    result = run_cli("analyze", str(rec), "--json")
    assert result.returncode == 0, result.stderr


def test_second_session_on_a_busy_port_fails_cleanly(tmp_path):
    dev = Pty()
    try:
        first = start_live(dev.path, "--record", str(tmp_path / "a.csv"))
        second = run_cli("live", dev.path, "--record", str(tmp_path / "b.csv"))
        stop(first)
    finally:
        dev.close()
    assert second.returncode == 2
    assert "port busy" in second.stderr and second.stderr.count("\n") == 1
    assert not (tmp_path / "b.csv").exists()


def test_missing_port_exit_status():
    result = run_cli("live", "/dev/ttyLIVESTEP_NONE")
    assert result.returncode == 2 and "no such port" in result.stderr


def test_binary_frames_from_the_c_emitter_live(tmp_path):
    """The firmware example (C, compiled here) streams frames through a pty; the live
    path detects the binary format and measures its one step. Reference: the closed-form
    overshoot of its plant, zeta 0.6 and wn 50 rad/s, %OS = 100 exp(-zeta pi /
    sqrt(1 - zeta^2)) (Ogata)."""
    import math
    import shutil

    cc = shutil.which("cc") or shutil.which("gcc")
    if cc is None:
        pytest.skip("no C compiler")
    exe = tmp_path / "example"
    subprocess.run([cc, "-std=c99", "-O2", "-o", str(exe), str(ROOT / "tools/firmware/example.c"),
                    f"-I{ROOT / 'tools/firmware'}"], check=True)
    frames = subprocess.run([str(exe), "1500"], check=True, capture_output=True).stdout
    steps, err, _ = live_steps(frames, 20_000, "--record", str(tmp_path / "b.csv"),
                               "--channels", "setpoint,feedback,current")
    assert len(steps) == 1, err
    os_pct = 100 * math.exp(-0.6 * math.pi / math.sqrt(1 - 0.36))
    assert steps[0]["overshoot_pct"] == pytest.approx(os_pct, abs=0.3)
    assert steps[0]["model"]["zeta"] == pytest.approx(0.6, rel=0.03)
    assert steps[0]["model"]["wn"] == pytest.approx(50.0, rel=0.03)
    assert "current" in (tmp_path / "b.csv").read_text().splitlines()[4]


def test_stream_without_the_time_column_is_a_clear_error(tmp_path):
    dev = Pty()
    try:
        proc = start_live(dev.path, "--record", str(tmp_path / "c.csv"))
        dev.write(b"time,cmd,pos\n" + b"".join(b"%d,0,0\n" % k for k in range(40)))
        _, err = proc.communicate(timeout=30)
    finally:
        dev.close()
    assert proc.returncode == 2
    assert "no time column 't'" in err and "Traceback" not in err
