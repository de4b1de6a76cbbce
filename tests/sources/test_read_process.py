"""Reading in a forked child gives what reading in place gives: the same samples (whatever
the slot size cuts them into), the same reader state afterwards, the same error in its
place."""

from __future__ import annotations

import multiprocessing as mp

import numpy as np
import pytest

import livestep.sources.read_process as rp
from livestep.errors import InputError
from livestep.sources.recording import ColumnMap, RecordingReader


def _recording(path, rows: int = 5000) -> None:
    t = np.arange(rows) * 1e-3
    lines = ["# source: invented test rig", "t,setpoint,feedback,current"]
    for k in range(rows):
        lines.append(f"{t[k]:.3f},{k // 700},{0.5 * (k // 700) + 1e-4 * k:.4f},{k % 7}")
        if k % 900 == 899:
            lines.append(f"# note: {t[k]:.3f} gains=set{k // 900}")
        if k == 1234:
            lines.append("1.2345,oops,1,2")  # a bad row, skipped and counted
        if k == 2000:
            lines.append("")  # a blank line
    path.write_text("\n".join(lines) + "\n")


def _samples(chunks) -> dict[str, np.ndarray]:
    chunks = list(chunks)
    out = {k: np.concatenate([getattr(c, k) for c in chunks])
           for k in ("t", "feedback", "setpoint")}
    out["current"] = np.concatenate([c.extras["current"] for c in chunks])
    return out


@pytest.mark.parametrize("slot_rows", [64, 1 << 16])
def test_same_samples_and_reader_state_as_reading_in_place(tmp_path, monkeypatch,
                                                           slot_rows: int) -> None:
    path = tmp_path / "rec.csv"
    _recording(path)
    monkeypatch.setattr(rp, "_SLOT_ROWS", slot_rows)  # 64: every block in many pieces
    here, there = RecordingReader(path, ColumnMap()), RecordingReader(path, ColumnMap())
    a, b = _samples(iter(here)), _samples(rp.read_in_process(there))
    for k in a:
        np.testing.assert_array_equal(a[k], b[k])
    assert there.stats == here.stats
    assert there.notes == here.notes and len(there.notes) == 5
    assert there.stats.bad == 1 and there.damage is None


def test_an_error_is_raised_in_its_place(tmp_path) -> None:
    path = tmp_path / "rec.csv"
    path.write_text("t,setpoint,feedback\n" + "".join(f"{k},0,1\n" for k in range(10))
                    + "3,0,1\n")
    chunks = rp.read_in_process(RecordingReader(path, ColumnMap()))
    with pytest.raises(InputError, match="time goes backwards"):
        list(chunks)


def test_stopping_early_ends_the_child(tmp_path) -> None:
    path = tmp_path / "rec.csv"
    _recording(path, rows=20000)
    chunks = rp.read_in_process(RecordingReader(path, ColumnMap()), depth=1)
    first = next(chunks)
    assert first.t.size > 0
    chunks.close()  # the consumer stops: the child is ended, nothing is left running
    assert not [p for p in mp.active_children() if p.name == "livestep-reader"]
