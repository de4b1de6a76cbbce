"""Reading a recording in a child process, so that parsing runs on a second core.

The analysis (Python and small numpy calls) holds the interpreter lock nearly all the
time, so a reading thread barely overlaps it; a forked child does. The child iterates the
:class:`~livestep.sources.recording.RecordingReader` and writes the samples into a ring of
slots in memory shared with the parent (an anonymous shared mapping made before the fork:
no copy through a pipe, nothing to clean up after a crash), and says which slot through a
bounded queue (at most ``depth`` chunks ahead, so memory stays flat). A chunk longer than a
slot goes in several pieces: the analysis gives the same results whatever the chunk sizes.
At the end the child sends what the reader learnt (statistics, notes, damage), which is
copied into the parent's reader, so the caller sees the same reader state as after
reading in place.
"""

from __future__ import annotations

import mmap
import multiprocessing as mp
import pickle
import queue
import signal
from collections.abc import Iterator
from typing import Any

import numpy as np

from livestep.sources.recording import RecordingReader, read_ahead
from livestep.steps.samples import SampleChunk

__all__ = ["read_in_process"]

#: What the child copies back into the parent's reader at the end.
_STATE = ("stats", "notes", "damage", "_line", "_last_t")
_SLOT_ROWS = 1 << 16  # samples a slot holds


def read_in_process(reader: RecordingReader, depth: int = 8) -> Iterator[SampleChunk]:
    """Iterate ``reader``'s chunks, read in a forked child (a reading thread where fork is
    not available). The child starts now, so it reads while the caller prepares. Errors
    from the reader are raised in the iteration, in their place in the sequence. Call it
    before any other thread of the process starts (fork copies only the calling thread)."""
    if "fork" not in mp.get_all_start_methods():
        return read_ahead(reader, depth)
    ctx = mp.get_context("fork")
    ncol = 2 + reader.has_setpoint + len(reader.extra_names)
    ring = depth + 2  # the child reuses a slot only after the parent took the next one
    shared = mmap.mmap(-1, ring * _SLOT_ROWS * ncol * 8)
    slots = np.frombuffer(shared, dtype=np.float64).reshape(ring, ncol, _SLOT_ROWS)
    q: Any = ctx.Queue(maxsize=depth)
    child = ctx.Process(target=_produce, args=(reader, q, slots), daemon=True,
                        name="livestep-reader")
    child.start()
    return _receive(reader, child, q, shared, slots)


def _receive(reader: RecordingReader, child: Any, q: Any, shared: mmap.mmap,
             slots: np.ndarray) -> Iterator[SampleChunk]:
    """The parent's side: each chunk as the child announces it, copied out of its slot;
    at the end the reader's state; the child ended and the memory released when done."""
    names, first_extra = reader.extra_names, slots.shape[1] - len(reader.extra_names)
    try:
        while True:
            try:
                kind, item = q.get(timeout=1.0)
            except queue.Empty:
                if child.is_alive():
                    continue
                raise RuntimeError(f"the reading process ended unexpectedly (exit status"
                                   f" {child.exitcode})") from None
            if kind == "slot":
                k, n, segment = item
                cols = slots[k, :, :n].copy()
                yield SampleChunk(t=cols[0], feedback=cols[1],
                                  setpoint=cols[2] if reader.has_setpoint else None,
                                  extras={x: cols[first_extra + j]
                                          for j, x in enumerate(names)}, segment=segment)
            elif kind == "error":
                raise item
            else:
                for name, value in item.items():
                    setattr(reader, name, value)
                return
    finally:
        if child.is_alive():
            child.terminate()
        child.join()
        q.close()
        q.join_thread()
        del slots
        shared.close()


def _produce(reader: RecordingReader, q: Any, slots: np.ndarray) -> None:
    """The child: every chunk (in the shared slots, in turn), then the reader's state, or
    the error that stopped it."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # ctrl-c is the parent's to handle
    ring, _, rows = slots.shape
    k = 0
    try:
        for chunk in reader:  # its extras are the header's extra columns, in order
            cols = [chunk.t, chunk.feedback, *([] if chunk.setpoint is None
                                               else [chunk.setpoint]), *chunk.extras.values()]
            for a in range(0, chunk.t.size, rows):
                n = min(rows, chunk.t.size - a)
                for j, c in enumerate(cols):
                    slots[k, j, :n] = c[a:a + n]
                q.put(("slot", (k, n, chunk.segment)))
                k = (k + 1) % ring
        q.put(("end", {name: getattr(reader, name) for name in _STATE}))
    except BaseException as exc:  # noqa: BLE001 - handed to the parent, in its place
        try:
            pickle.dumps(exc)
        except Exception:  # noqa: BLE001 - an error that cannot be sent: its text can
            exc = RuntimeError(f"{type(exc).__name__}: {exc}")
        q.put(("error", exc))
    q.close()
    q.join_thread()
