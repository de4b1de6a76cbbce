"""livestep.reports.session_info: a recording's comment lines and the session facts."""

from __future__ import annotations

import gzip
import json
import os
from pathlib import Path

import pytest

import livestep.reports.session_info as si
from livestep.sources.recording import RecordingReader

LIVE = (
    "# start: 2026-11-30T09:15:02+00:00\n# livestep: 0.1.0\n# source: /dev/ttyACM0\n"
    "# decoder: text, comma\nt,setpoint,feedback\n0.0,0,0\n0.5,0,0\n# state: disconnected\n"
    "# state: connected\n1.0,1,0.5\n# segment: 1\n1.5,1,1\n2.0,1,1\n"
    '# counters: {"bytes": 120, "samples": 5, "bad": {"nan": 2}, "bad_total": 2,'
    ' "gaps": 1, "lost": 0, "resyncs": 0, "reconnects": 1, "log_lines": 3, "restarts": 1}\n'
)


def _info(path: Path) -> si.SessionInfo:
    reader = RecordingReader(path)
    chunks = list(reader)
    return si.read_session_info(path, metadata=reader.metadata, samples=reader.stats.good,
                           first_t=float(chunks[0].t[0]), last_t=float(chunks[-1].t[-1]))


@pytest.mark.parametrize("gz", [False, True])
def test_live_recording_facts(tmp_path: Path, gz: bool) -> None:
    path = tmp_path / ("live.csv.gz" if gz else "live.csv")
    path.write_bytes(gzip.compress(LIVE.encode()) if gz else LIVE.encode())
    info = _info(path)
    assert info.start == "2026-11-30T09:15:02+00:00"
    assert dict(info.metadata)["source"] == "/dev/ttyACM0"
    assert [k for k, _ in info.metadata] == ["start", "livestep", "source", "decoder"]
    assert info.samples == 5 and info.duration == 2.0
    assert info.sample_rate == pytest.approx(2.0)  # 4 intervals in 2 s
    assert info.segments == 1 and info.states == ("disconnected", "connected")
    assert info.counters is not None and info.counters["bad"] == {"nan": 2}
    assert info.counters["reconnects"] == 1


def test_comment_lines_across_block_boundaries(tmp_path: Path,
                                               monkeypatch: pytest.MonkeyPatch) -> None:
    # Blocks of 7 bytes cut every line somewhere; CRLF endings are trimmed.
    path = tmp_path / "r.csv"
    path.write_bytes(LIVE.replace("\n", "\r\n").encode())
    monkeypatch.setattr(si, "_BLOCK", 7)
    lines = list(si.comment_lines(path))
    expected = [ln[2:] for ln in LIVE.splitlines() if ln.startswith("#")]
    assert lines == expected
    assert json.loads(lines[-1].partition(":")[2])["bytes"] == 120


def test_a_recording_without_live_lines(tmp_path: Path) -> None:
    path = tmp_path / "plain.csv"
    path.write_text("t,feedback\n0,1\n1,1\n")
    info = _info(path)
    assert info.counters is None and info.segments == 0 and info.metadata == ()
    assert info.start is None and info.duration == 1.0
    os.utime(path, (1_700_000_000, 1_700_000_000))
    assert _info(path).modified == "2023-11-14T22:13:20+00:00"  # date -u -d @1700000000
    # a broken counters line is ignored, not an error
    for junk in ("{not json", "[1, 2]"):
        path.write_text(f"t,feedback\n0,1\n1,1\n# counters: {junk}\n")
        assert _info(path).counters is None
