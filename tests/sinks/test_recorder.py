"""The recorder: nothing written can be read back as data or metadata, and a file that
cannot be written stops the recording cleanly with every row on disk whole (issue 15)."""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np

from livestep.decode.counters import LinkCounters
from livestep.sinks.recorder import Recorder
from livestep.sources.recording import read_all
from livestep.steps.samples import SampleChunk
from livestep.steps.tags import Note

FORGED = "soft\n999999,7,7\n# segment: 5\n# source: forged"


def chunk(t0: float, n: int = 50, segment: int = 0) -> SampleChunk:
    t = t0 + np.arange(n) * 1e-3
    return SampleChunk(t=t, feedback=np.sin(t), setpoint=np.zeros(n), segment=segment)


def test_names_notes_and_metadata_cannot_forge_rows_or_metadata(tmp_path):
    rec = Recorder(tmp_path / "f.csv", metadata={"source": "port\n1,2,3", "key\nx": "v"})
    rec.on_note(Note(0.0, "gains", FORGED))  # before the header
    rec.write(chunk(0.0))
    rec.on_note(Note(0.049, "gains", FORGED))
    rec.note(f"state: {FORGED}")
    rec.write(chunk(0.05))
    rec.close(LinkCounters())
    reader, chunks = read_all(tmp_path / "f.csv")
    t = np.concatenate([c.t for c in chunks])
    assert t.size == 100 and np.all(np.diff(t) > 0)  # no forged row, time never goes back
    assert reader.stats.bad == 0 and [c.segment for c in chunks] == [0]
    assert reader.metadata["source"] == "port\\x0a1,2,3" and "forged" not in str(
        reader.metadata)
    assert [n.value for n in reader.notes] == [FORGED.replace("\n", "\\x0a")] * 2
    lines = (tmp_path / "f.csv").read_text().splitlines()
    assert sum(ln[:1].isdigit() for ln in lines) == 100  # rows are the samples, only


WRITER = textwrap.dedent("""
    import json, resource, sys
    import numpy as np
    from pathlib import Path
    from livestep.sinks.recorder import Recorder
    from livestep.steps.samples import SampleChunk

    resource.setrlimit(resource.RLIMIT_FSIZE, (int(sys.argv[2]), int(sys.argv[2])))
    rec = Recorder(Path(sys.argv[1]), metadata={}, flush_interval=0.0)
    n = 0
    while rec.failed is None and n < 10**6:
        t = n * 1e-3 + np.arange(100) * 1e-5
        rec.write(SampleChunk(t=t, feedback=t * 3.3, setpoint=np.zeros(100)))
        n += 1
    rec.close()
    print(json.dumps({"failed": rec.failed, "rows": rec.rows, "chunks": n}))
""")


def test_a_file_size_limit_stops_the_recording_with_whole_rows(tmp_path):
    path = tmp_path / "big.csv"
    done = subprocess.run([sys.executable, "-c", WRITER, str(path), "200000"],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0 and "Traceback" not in done.stderr, done.stderr
    out = json.loads(done.stdout)
    assert "File too large" in out["failed"] and f"{out['rows']} samples kept" in out["failed"]
    data = path.read_bytes()
    assert len(data) <= 200_000 and data.endswith(b"\n# recording stopped: File too large\n")
    reader, chunks = read_all(path)
    t = np.concatenate([c.t for c in chunks])
    assert t.size == out["rows"] > 1000 and reader.stats.bad == 0
    assert np.allclose(np.concatenate([c.feedback for c in chunks]), t * 3.3)


def test_a_raw_capture_that_cannot_be_written_stops_both(tmp_path):
    script = WRITER.replace("metadata={}, flush_interval=0.0",
                            "metadata={}, flush_interval=0.0, raw_path=Path(sys.argv[1] + '.raw')"
                            ).replace("rec.write(SampleChunk", "rec.write_raw(b'x' * 5000)\n"
                                      "    rec.write(SampleChunk")
    done = subprocess.run([sys.executable, "-c", script, str(tmp_path / "r.csv"), "100000"],
                          capture_output=True, text=True, timeout=120)
    out = json.loads(done.stdout)
    assert out["failed"] and "r.csv.raw: cannot write (File too large)" in out["failed"]
    _, chunks = read_all(tmp_path / "r.csv")
    assert sum(len(c) for c in chunks) == out["rows"]


def test_recording_nowhere_is_one_line_before_anything(tmp_path):
    import pytest

    from livestep.errors import EXIT_WRITE_FAILED, WriteError

    with pytest.raises(WriteError, match="no folder") as info:
        Recorder(tmp_path / "missing" / "x.csv", metadata={})
    assert info.value.exit_status == EXIT_WRITE_FAILED == 3
    assert not Path(tmp_path / "missing").exists()
