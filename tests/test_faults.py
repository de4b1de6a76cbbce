"""Faults and hostile input end every command within seconds, with one line, a documented
exit status and the data kept (issue 15). Each case runs the real command line; a hang
would fail it by the subprocess timeout (generous: these end in a few seconds), never by
a timed assertion.

Exit statuses (livestep/errors.py, README "Usage"): 2 bad input (a FIFO, a device, a
damaged file), 3 a recording that cannot be written.
"""

from __future__ import annotations

import gzip
import json
import os
import resource
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from _device import FIXTURE, ROOT

from livestep.bench.device import BenchSettings, VirtualBench
from livestep.bench.plants import SecondOrderPlant
from livestep.sources.recording import RecordingReader, read_all
from livestep.steps.tags import parse_recorded_note

HANG = 90  # seconds: far beyond any of these commands; only a hang reaches it


def livestep(*args: str, cwd: Path | None = None, limit_fsize: int | None = None,
             stdin: int | None = subprocess.DEVNULL) -> subprocess.CompletedProcess:
    def limits() -> None:
        if limit_fsize is not None:
            resource.setrlimit(resource.RLIMIT_FSIZE, (limit_fsize, limit_fsize))

    return subprocess.run([sys.executable, "-m", "livestep", *args], capture_output=True,
                          text=True, timeout=HANG, cwd=cwd or ROOT, preexec_fn=limits,
                          stdin=stdin, errors="replace")


def one_error_line(stderr: str) -> str:
    errors = [ln for ln in stderr.splitlines() if ln.startswith("livestep: error:")]
    assert len(errors) == 1, stderr
    assert "Traceback" not in stderr
    return errors[0]


# -- 1a: a recording that cannot be written ------------------------------------------------
def test_a_file_size_limit_ends_a_live_session_with_the_data_kept(tmp_path):
    plant = SecondOrderPlant(0.5, 60.0)
    with VirtualBench(plant, BenchSettings(rate=20000.0)) as bench:
        done = livestep("live", bench.path, "--time-unit", "us", "--wrap", "32", "--record",
                        str(tmp_path / "r.csv"), "--duration", "60", limit_fsize=100_000)
    assert done.returncode == 3, done.stderr
    line = one_error_line(done.stderr)
    assert "File too large" in line and "samples kept" in line
    kept = int(line.split("stopped, ")[1].split()[0])
    text = (tmp_path / "r.csv").read_text()
    assert len(text.encode()) <= 100_000 and text.endswith("\n")
    assert text.splitlines()[-1] == "# recording stopped: File too large"
    reader, chunks = read_all(tmp_path / "r.csv")
    assert sum(len(c) for c in chunks) == kept > 1000  # every row on disk is whole and read
    assert reader.stats.bad == 0


def test_a_recording_folder_that_does_not_exist_is_one_line(tmp_path):
    plant = SecondOrderPlant(0.5, 60.0)
    with VirtualBench(plant, BenchSettings(rate=2000.0)) as bench:
        done = livestep("live", bench.path, "--record", str(tmp_path / "no" / "r.csv"))
    assert done.returncode == 3
    assert "no folder" in one_error_line(done.stderr)


# -- 1b: a damaged gzip --------------------------------------------------------------------
@pytest.fixture
def damaged_gzip(tmp_path) -> Path:
    path = tmp_path / "t.csv.gz"
    path.write_bytes(gzip.compress(FIXTURE.read_bytes())[:50_000])  # as head -c 50000
    return path


def test_watch_on_a_damaged_gzip_ends_with_the_steps_before(damaged_gzip):
    done = livestep("watch", str(damaged_gzip), "--headless", "--fast")
    assert done.returncode == 2
    assert "damaged gzip data" in one_error_line(done.stderr)
    lines = [json.loads(x) for x in done.stdout.splitlines()]
    summary = lines[-1]["summary"]
    assert summary["steps"] == len(lines) - 1 >= 1 and "damaged gzip" in summary["error"]


def test_replay_and_analyze_of_a_damaged_gzip_keep_what_was_readable(damaged_gzip):
    replay = livestep("replay", str(damaged_gzip), "--fast", "--json")
    assert replay.returncode == 2 and "damaged gzip data" in one_error_line(replay.stderr)
    assert len(json.loads(replay.stdout)["steps"]) >= 1
    analyze = livestep("analyze", str(damaged_gzip), "--json")
    assert analyze.returncode == 2 and "damaged gzip data" in one_error_line(analyze.stderr)
    doc = json.loads(analyze.stdout)
    assert len(doc["steps"]) >= 1 and doc["samples"] > 5000
    # the samples read are exactly the file's first rows, none cut short at the damage
    reader = RecordingReader(damaged_gzip)
    got = np.concatenate([c.feedback for c in reader])
    assert reader.damage is not None and "after line" in reader.damage
    _, full = read_all(FIXTURE)
    assert np.array_equal(got, np.concatenate([c.feedback for c in full])[:got.size])


# -- 1c: a FIFO or a device where a file is expected ----------------------------------------
@pytest.mark.parametrize("command", [["analyze"], ["report", "-o", "r.html"], ["replay"],
                                     ["watch", "--headless"]])
def test_a_fifo_argument_is_refused_at_once(tmp_path, command):
    fifo = tmp_path / "f.csv"
    os.mkfifo(fifo)
    done = livestep(command[0], str(fifo), *command[1:], cwd=tmp_path)
    assert done.returncode == 2
    assert "is a FIFO" in one_error_line(done.stderr)


def test_compare_with_a_fifo_is_refused_at_once(tmp_path):
    fifo = tmp_path / "f.csv"
    os.mkfifo(fifo)
    done = livestep("compare", str(FIXTURE), str(fifo))
    assert done.returncode == 2 and "is a FIFO" in one_error_line(done.stderr)


@pytest.mark.parametrize("command", ["analyze", "replay"])
def test_dev_zero_is_not_a_recording(command):
    done = livestep(command, "/dev/zero")
    assert done.returncode == 2 and "character device" in one_error_line(done.stderr)


# -- livestep replays its own recordings; a clean session counts no bad line ----------------
class Steps(list):
    """Steps compared by instant, direction, rise, overshoot (to 1e-6 relative) and tags."""

    def __eq__(self, other: object) -> bool:
        return isinstance(other, list) and len(self) == len(other) and all(
            a[1] == b[1] and a[4] == b[4]
            and a[:4:2] == pytest.approx(b[:4:2], rel=1e-6, abs=1e-9)
            and a[3] == pytest.approx(b[3], rel=1e-6, abs=1e-9)
            for a, b in zip(self, other, strict=True))

    __hash__ = None  # type: ignore[assignment]


def steps_key(steps: list[dict]) -> Steps:
    return Steps((s["t_step"], s["direction"], s["rise_time"], s["overshoot_pct"],
                  tuple(sorted(s["tags"].items()))) for s in steps)


@pytest.mark.parametrize("fmt", ["text", "binary"])
def test_the_demo_recording_replays_and_watches_as_it_analyzes(tmp_path, fmt):
    demo = livestep("demo", "--console", "--quick", "--format", fmt, "--record",
                    str(tmp_path / "rt.csv"), cwd=tmp_path)
    assert demo.returncode == 0, demo.stderr
    counters = [ln for ln in (tmp_path / "rt.csv").read_text().splitlines()
                if ln.startswith("# counters: ")]
    snap = json.loads(counters[-1][len("# counters: "):])
    assert snap["bad_total"] == 0 and snap["samples"] > 5000, snap  # joined mid-line: skipped
    analyze = livestep("analyze", str(tmp_path / "rt.csv"), "--json")
    replay = livestep("replay", str(tmp_path / "rt.csv"), "--fast", "--json")
    watch = livestep("watch", str(tmp_path / "rt.csv"), "--headless", "--fast")
    assert analyze.returncode == replay.returncode == watch.returncode == 0, watch.stderr
    expected = steps_key(json.loads(analyze.stdout)["steps"])
    assert len(expected) >= 5
    assert steps_key(json.loads(replay.stdout)["steps"]) == expected
    watched = [json.loads(x) for x in watch.stdout.splitlines()][:-1]
    assert steps_key(watched) == expected
    assert "stream format: text lines, comma-separated with a header" in replay.stderr


def with_note_column(path: Path) -> Path:
    """The shipped example with its notes moved into a ``note`` column."""
    out, pending = [], []
    for line in FIXTURE.read_text().splitlines():
        if line.startswith("# note:"):
            note = parse_recorded_note(line)
            pending.append(f"{note.name}={note.value}")
        elif line.startswith("#") or not line:
            out.append(line)
        elif line.startswith("t,"):
            out.append(line + ",note")
        else:
            out.append(line + "," + (pending.pop(0) if pending else ""))
    path.write_text("\n".join(out) + "\n")
    return path


def test_a_note_column_replays_and_watches_as_it_analyzes(tmp_path):
    path = with_note_column(tmp_path / "notes.csv")
    analyze = livestep("analyze", str(path), "--json")
    replay = livestep("replay", str(path), "--fast", "--json")
    watch = livestep("watch", str(path), "--headless", "--fast")
    expected = steps_key(json.loads(analyze.stdout)["steps"])
    assert len(expected) == 8 and all(dict(k[4]).get("gains") for k in expected)
    assert steps_key(json.loads(replay.stdout)["steps"]) == expected
    assert steps_key([json.loads(x) for x in watch.stdout.splitlines()][:-1]) == expected
    assert json.loads(replay.stdout)["samples"] == 36000
    summary = json.loads(watch.stdout.splitlines()[-1])["summary"]
    assert summary["counters"]["bad_total"] == 0 and summary["counters"]["notes"] == 5
    assert "with a header and a note column" in summary["stream_format"]


# -- markup and control characters in tags stay text ----------------------------------------
def test_markup_in_tags_is_shown_literally_and_never_fails_a_step(tmp_path, write_file):
    text = FIXTURE.read_text().replace(
        "t,setpoint,feedback\n",
        "t,setpoint,feedback\n# note: 0 load=[/bold]\n# note: 0 mode=[auto]\n"
        "# note: 0 esc=\x1b[31mred\n", 1)
    path = write_file("markup.csv", text)
    profile = write_file("p.toml", 'name = "[red]x"\n[limits]\novershoot_pct = { max = 40 }\n')
    done = livestep("analyze", str(path), "--profile", str(profile))
    assert done.returncode == 0, done.stderr  # every step passes; markup changes nothing
    assert "load=[/bold]" in done.stdout and "mode=[auto]" in done.stdout
    assert "esc=\\x1b[31mred" in done.stdout and "\x1b[31m" not in done.stdout


# -- the smaller ones ------------------------------------------------------------------------
def test_a_non_utf8_file_name_reports(tmp_path):
    name = os.fsencode(tmp_path) + b"/b\xffd.csv"
    with open(name, "wb") as fh:
        fh.write(FIXTURE.read_bytes())
    done = subprocess.run([sys.executable, "-m", "livestep", "report", name], cwd=tmp_path,
                          capture_output=True, timeout=HANG)
    assert done.returncode == 0, done.stderr
    assert b"wrote b\xef\xbf\xbdd-report.html" in done.stderr  # shown with U+FFFD
    assert os.path.exists(os.fsencode(tmp_path) + b"/b\xffd-report.html")


def test_a_hostile_plan_without_send_shows_what_would_be_refused(write_file):
    plan = write_file("p.toml", 'levels = [2.0]\ndwell = 1.0\nrest = 0.0\n'
                      '[limits]\nmin = -1.0\nmax = 3.0\nmax_step = 2.0\n'
                      '[commands]\nsetpoint = "sp {value}"\nsafe = "sp 1000"\n')
    done = livestep("live", "/dev/null", "--plan", str(plan))
    assert done.returncode == 2
    assert "'sp 1000' sends 1000, outside the limits" in one_error_line(done.stderr)


def test_every_line_the_bench_receives_is_inside_the_plans_limits(tmp_path, write_file):
    plan = write_file("p.toml", 'levels = [0.5, 1.0, 0.0]\ndwell = 0.3\nrest = 0.0\n'
                      'lead_in = 0.2\n[limits]\nmin = -1.0\nmax = 1.0\nmax_step = 1.0\n'
                      '[commands]\nsetpoint = "sp {value:+.3f}"\n')
    with VirtualBench(SecondOrderPlant(0.5, 60.0), BenchSettings(rate=2000.0)) as bench:
        done = livestep("live", bench.path, "--time-unit", "us", "--wrap", "32", "--plan",
                        str(plan), "--send", "--no-confirm", "--no-record")
        received = list(bench.received)
    assert done.returncode == 0, done.stderr
    assert received == ["sp +0.500", "sp +1.000", "sp +0.000", "sp +0.000"]
    values = [float(r.split()[1]) for r in received]  # read as the bench reads them
    assert all(-1.0 <= v <= 1.0 for v in values)
    assert all(abs(b - a) <= 1.0 for a, b in zip([0.0, *values], values, strict=False))
    assert np.isfinite(values).all()
