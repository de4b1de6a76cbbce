"""Measuring and fitting steps in forked worker processes while this one detects them.

Each detected window is written into a slot of a ring in memory shared with the workers
(an anonymous shared mapping made before the fork: no copy through a pipe), and a job
naming the slot goes to the workers through a queue; a window too long for a slot goes
whole, pickled. Results come back through another queue and are handed out in the order
the windows were submitted, so the results are those of :func:`analyze_window` in this
process, in the same order. A slot is written again only once the result of the job
that used it has come back.
"""

from __future__ import annotations

import mmap
import multiprocessing as mp
import signal
from collections.abc import Iterator
from dataclasses import replace
from typing import Any

import numpy as np

from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_window
from livestep.steps.detect import StepWindow

__all__ = ["WindowPool"]

_SLOT_FLOATS = 1 << 19  # 4 MiB a slot: three columns of 170 000 samples
_EMPTY = np.empty(0)


class WindowPool:
    """``workers`` forked processes running :func:`analyze_window` on submitted windows.
    Create it before any other thread of the process starts (fork copies only the calling
    thread); use it as a context manager, so the workers always end."""

    def __init__(self, workers: int, settings: AnalysisSettings, ring: int = 16) -> None:
        ctx = mp.get_context("fork")
        self._shared = mmap.mmap(-1, ring * _SLOT_FLOATS * 8)
        self._slots = np.frombuffer(self._shared, dtype=np.float64).reshape(
            ring, _SLOT_FLOATS)
        self._jobs: Any = ctx.Queue()
        self._results: Any = ctx.Queue()
        self._procs = [ctx.Process(target=_work, name="livestep-measure", daemon=True,
                                   args=(self._jobs, self._results, self._slots, settings))
                       for _ in range(workers)]
        for p in self._procs:
            p.start()
        self._submitted = 0  # jobs sent
        self._handed = 0  # results handed out, in order
        self._ready: dict[int, StepResult] = {}

    def __enter__(self) -> WindowPool:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close(clean=exc[0] is None)

    def submit(self, w: StepWindow) -> Iterator[StepResult]:
        """Send ``w`` to the workers; hand out the results that are ready by then."""
        ring = self._slots.shape[0]
        j = self._submitted
        while j - ring >= self._handed and j - ring not in self._ready:
            self._receive()  # the slot's previous job has not come back yet
        self._jobs.put((j, *self._pack(w, j % ring)))
        self._submitted += 1
        yield from self._hand_out()

    def drain(self) -> Iterator[StepResult]:
        """Every result still due, in order."""
        while self._handed < self._submitted:
            if self._handed not in self._ready:
                self._receive()
            yield from self._hand_out()

    def close(self, clean: bool = True) -> None:
        """End the workers (at once unless ``clean``) and release the shared memory."""
        if clean:
            for _ in self._procs:
                self._jobs.put(None)
        for p in self._procs:
            if not clean:
                p.terminate()
            p.join()
        for q in (self._jobs, self._results):
            q.close()
            q.join_thread()
        del self._slots
        self._shared.close()

    def _pack(self, w: StepWindow, k: int) -> tuple[int, StepWindow, int]:
        """(slot, the window without its samples, samples) with the samples written into
        slot ``k``; (-1, the whole window, 0) when they do not fit."""
        cols = [w.t, w.feedback, *([] if w.setpoint is None else [w.setpoint]),
                *w.extras.values()]
        n = w.t.size
        if n * len(cols) > _SLOT_FLOATS:
            return -1, w, 0
        slot = self._slots[k]
        for c, x in enumerate(cols):
            slot[c * n:(c + 1) * n] = x
        bare = replace(w, t=_EMPTY, feedback=_EMPTY,
                       setpoint=None if w.setpoint is None else _EMPTY,
                       extras=dict.fromkeys(w.extras, _EMPTY))
        return k, bare, n

    def _receive(self) -> None:
        j, result = self._results.get()
        if isinstance(result, BaseException):
            raise result
        self._ready[j] = result

    def _hand_out(self) -> Iterator[StepResult]:
        while self._handed in self._ready:
            yield self._ready.pop(self._handed)
            self._handed += 1


def _work(jobs: Any, results: Any, slots: np.ndarray, settings: AnalysisSettings) -> None:
    """A worker: each job's window rebuilt on its slot, analysed, the result sent back."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # ctrl-c is the parent's to handle
    while (job := jobs.get()) is not None:
        j, k, w, n = job
        try:
            if k >= 0:
                w = _unpack(slots[k], w, n)
            results.put((j, analyze_window(w, settings)))
        except BaseException as exc:  # noqa: BLE001 - a bug: raised in the parent
            results.put((j, RuntimeError(f"{type(exc).__name__}: {exc}")))
    results.close()
    results.join_thread()


def _unpack(slot: np.ndarray, w: StepWindow, n: int) -> StepWindow:
    """The window ``w`` with its ``n`` samples of each column read from ``slot`` (views)."""
    count = 2 + (w.setpoint is not None) + len(w.extras)
    cols = iter([slot[c * n:(c + 1) * n] for c in range(count)])
    t, feedback = next(cols), next(cols)
    setpoint = None if w.setpoint is None else next(cols)
    return replace(w, t=t, feedback=feedback, setpoint=setpoint,
                   extras={name: next(cols) for name in w.extras})
