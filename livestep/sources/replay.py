"""Replay source: a recording (or raw capture) played back by its own thread.

The thread reads the file in blocks into a short, blocking queue (a file loses
nothing by waiting) and paces itself by the sample times the session has decoded, at a
speed factor that can change while it plays; it can pause and resume. Only a regular
file is played (a FIFO or a device is refused when the source is made); a file that
stops being readable (a damaged gzip) ends the replay with an ``error`` event.
"""

from __future__ import annotations

import queue
import threading
import time
from collections.abc import Callable
from pathlib import Path
from typing import IO

from livestep.sources.files import READ_ERRORS, open_file, read_error

__all__ = ["ReplaySource"]


class ReplaySource:
    """Plays a recording (or raw capture, gzip or not) in its own thread, paced by the
    decoded sample times (``progress()``: seconds of data the session has decoded) at
    ``speed`` x real time, or as fast as the consumer takes it (``speed=None``). The
    queue is short and blocking: a file loses nothing by waiting. Events: ``("data",
    bytes)``, ``("state", "paused" | "playing" | "finished")``, ``("error", line)``."""

    def __init__(self, path: Path, *, speed: float | None = 1.0, block: int = 4096,
                 paused: bool = False) -> None:
        self.path = Path(path)
        self._fh: IO[bytes] | None = open_file(self.path)  # a FIFO or device: one line here
        self.events: queue.Queue[tuple[str, object]] = queue.Queue(maxsize=2)
        self.block = block if speed is not None else max(block, 1 << 16)
        self.progress: Callable[[], float | None] = lambda: None
        self._speed = speed
        self._stop = threading.Event()
        self._playing = threading.Event()
        if not paused:
            self._playing.set()
        self._anchor: tuple[float, float] | None = None  # (wall clock, data time)
        self._thread: threading.Thread | None = None

    @property
    def speed(self) -> float | None:
        return self._speed

    @property
    def paused(self) -> bool:
        return not self._playing.is_set()

    def set_speed(self, speed: float | None) -> None:
        """New pace from now on (``None``: as fast as possible)."""
        self._speed = speed
        self._anchor = None

    def pause(self) -> None:
        self._playing.clear()
        self._put(("state", "paused"))

    def resume(self) -> None:
        self._anchor = None
        self._playing.set()
        self._put(("state", "playing"))

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name="livestep-replay", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 1.0) -> None:
        self._stop.set()
        self._playing.set()
        if self._thread is not None:
            self._thread.join(timeout)
        elif self._fh is not None:  # never started: close the file opened for it
            self._fh.close()
            self._fh = None

    def _put(self, event: tuple[str, object]) -> bool:
        while not self._stop.is_set():
            try:
                self.events.put(event, timeout=0.05)
                return True
            except queue.Full:
                continue
        return False

    def _run(self) -> None:
        """Read, hand on, pace; a file that cannot be read on (a damaged gzip, a read error)
        ends the replay with an ``("error", line)`` event after the bytes read before."""
        fh, self._fh = self._fh, None
        assert fh is not None
        done = 0
        try:
            while not self._stop.is_set():
                self._playing.wait()
                try:
                    data = fh.read(self.block)
                except READ_ERRORS as exc:
                    self._put(("error", str(read_error(self.path, exc,
                                                       f"after {done} bytes"))))
                    return
                if not data:
                    self._put(("state", "finished"))
                    return
                done += len(data)
                if not self._put(("data", data)):
                    return
                self._pace()
        finally:
            try:
                fh.close()
            except READ_ERRORS:
                pass

    def _pace(self) -> None:
        while not self._stop.is_set() and self._playing.is_set():
            speed, done = self._speed, self.progress()
            if speed is None or done is None:
                return
            now = time.monotonic()
            if self._anchor is None:
                self._anchor = (now, done)
            due = (done - self._anchor[1]) / speed - (now - self._anchor[0])
            if due <= 0:
                return
            self._stop.wait(min(due, 0.05))
