"""The virtual bench on a pseudo-terminal: a simulated controller at the far end of a serial link.

:class:`VirtualBench` opens a pty pair, and a thread plays the controller firmware on its
master side: it streams samples (``t,setpoint,feedback`` text lines with the time in
microseconds, or the binary sample frames of :mod:`livestep.decode.frames`) at the sample
rate, in blocks of simulated time paced against the wall clock, and reads command lines
(:mod:`livestep.bench.commands`) from the same link, applying each from the next block on.
Any serial program opens :attr:`VirtualBench.path` as it would a real port.

The device clock is a 32-bit microsecond counter that wraps; ``clock_start`` (or
``wrap_after``) sets where it starts, so a wrap can come soon. A pty blocks its writer when
nobody reads: the bench then waits, and catches up in large blocks when reading resumes.
"""

from __future__ import annotations

import contextlib
import os
import queue
import select
import threading
import time
import tty
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from livestep.bench.commands import CommandError, parse_command
from livestep.bench.plants import Plant
from livestep.decode.frames import encode_log_frame, encode_sample_frames

__all__ = ["BenchSettings", "VirtualBench", "clock_start_for"]

WRAP = 1 << 32


def clock_start_for(wrap_after: float) -> int:
    """The counter start (us) that makes a 32-bit microsecond clock wrap after ``wrap_after``
    seconds."""
    return (WRAP - int(round(wrap_after * 1e6))) % WRAP


@dataclass(frozen=True, kw_only=True)
class BenchSettings:
    """``rate``: samples per second; ``fmt``: ``text`` or ``binary``; ``clock_start``: the
    device's microsecond counter at the first sample; ``setpoint``: where the plant rests at
    power-up; ``block``: seconds of samples per write; ``speed``: simulated seconds per wall
    second; ``link``: a symlink made to the device path (a stable name, as
    ``/dev/serial/by-id`` gives); ``banner``: the first line, as firmware prints at boot."""

    rate: float = 2000.0
    fmt: str = "text"
    clock_start: int = 0
    setpoint: float = 0.0
    block: float = 0.01
    speed: float = 1.0
    link: Path | None = None
    banner: str = "livestep virtual bench (simulated controller)"

    def __post_init__(self) -> None:
        if self.fmt not in ("text", "binary"):
            raise ValueError("bench format must be text or binary")
        if not (0 < self.rate <= 1e6 and self.block > 0 and self.speed > 0):
            raise ValueError("need 0 < rate <= 1 MHz, a positive block and speed")


class VirtualBench:
    """A simulated controller on a pty. :meth:`start`, then open :attr:`path`; :meth:`stop`.

    :attr:`received` lists every command line received, in order; :attr:`notes` every note
    the bench put into its stream. :meth:`unplug` and :meth:`replug` take the link away and
    bring a new pty back behind ``settings.link``; the simulation runs on meanwhile.
    """

    def __init__(self, plant: Plant, settings: BenchSettings | None = None) -> None:
        self.plant = plant
        self.settings = s = settings if settings is not None else BenchSettings()
        plant.period = 1.0 / s.rate
        plant.reset(s.setpoint)
        self.setpoint = s.setpoint
        self.streaming = True
        self.received: list[str] = []
        self.notes: list[str] = []
        self.samples = 0  # samples simulated
        self.cpu_time = 0.0  # CPU seconds the controller thread has used
        self._seq = 0
        self._inbuf = b""
        self._out: list[bytes] = []  # notes waiting to be sent before the next block
        self._master: int | None = None
        self._slave: int | None = None
        self._requests: queue.Queue[tuple[str, threading.Event]] = queue.Queue()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.path = ""

    # -- control (any thread) ---------------------------------------------------------
    def start(self) -> str:
        """Open the pty and start the controller; returns the path to connect to."""
        self._open()
        self._thread = threading.Thread(target=self._run, name="livestep-bench", daemon=True)
        self._thread.start()
        return self.path

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5.0)
        self._close()
        link = self.settings.link
        if link is not None and link.is_symlink():
            link.unlink()

    def unplug(self) -> None:
        """Close the pty and remove ``settings.link``, as pulling the cable does; the program
        reading it sees an error."""
        self._request("unplug")

    def replug(self) -> None:
        """A new pty behind ``settings.link`` (required), as a device coming back does."""
        if self.settings.link is None:
            raise ValueError("replug needs a link path")
        self._request("replug")

    def __enter__(self) -> VirtualBench:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def _request(self, what: str) -> None:
        done = threading.Event()
        self._requests.put((what, done))
        if not done.wait(5.0):
            raise RuntimeError(f"the bench did not {what}")

    # -- pty ------------------------------------------------------------------------
    def _open(self) -> None:
        master, slave = os.openpty()
        tty.setraw(slave)  # no echo, no line editing, before anyone can write
        os.set_blocking(master, False)
        self._master, self._slave = master, slave
        device = os.ttyname(slave)
        link = self.settings.link
        if link is not None:
            tmp = link.with_name(link.name + ".new")
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
            tmp.symlink_to(device)
            tmp.replace(link)
            self.path = str(link)
        else:
            self.path = device

    def _close(self) -> None:
        for fd in (self._master, self._slave):
            if fd is not None:
                with contextlib.suppress(OSError):
                    os.close(fd)
        self._master = self._slave = None

    # -- the controller thread ----------------------------------------------------------
    def _run(self) -> None:
        s = self.settings
        self._send_text(s.banner, note=False)
        if s.fmt == "text":
            extra = self.plant.output_name
            self._out.append(b"t,setpoint,feedback" + (b"," + extra.encode() if extra else b"")
                             + b"\n")
        if self.plant.gains is not None:
            self.note(self.plant.gains.describe(), tags=True)
        start = time.monotonic()
        per_block = max(1, int(round(s.block * s.rate)))
        while not self._stop.is_set():
            self._serve_requests()
            self._apply_commands()
            due = int((time.monotonic() - start) * s.speed * s.rate) - self.samples
            if due < per_block:  # one write per block of samples, not per sample
                self._wait_input((per_block - due) / (s.speed * s.rate))
                continue
            n = min(due, 10 * per_block)
            data = self._block(n)
            self._write(b"".join(self._out) + data)
            self._out.clear()
            self.cpu_time = time.thread_time()

    def _block(self, n: int) -> bytes:
        """The next ``n`` samples, encoded (nothing while streaming is off)."""
        s = self.settings
        y = self.plant.advance(n, self.setpoint)
        k = self.samples + np.arange(n, dtype=np.int64)
        self.samples += n
        if not self.streaming:
            return b""
        ts = (s.clock_start + np.round(k * (1e6 / s.rate)).astype(np.int64)) % WRAP
        out = self.plant.output if self.plant.output_name else None
        if s.fmt == "binary":
            values = np.column_stack((np.full(n, self.setpoint), y) +
                                     (() if out is None else (out,)))
            data = encode_sample_frames(ts, values, seq0=self._seq)
            self._seq += n
            return data
        sp = b"%.9g" % self.setpoint
        if out is not None:  # the controller output as a fourth column
            return b"".join(b"%d,%s,%.8g,%.6g\n" % (t, sp, v, f) for t, v, f in zip(
                ts.tolist(), y.tolist(), out.tolist(), strict=True))
        return b"".join(b"%d,%s,%.8g\n" % (t, sp, v) for t, v in zip(ts.tolist(), y.tolist(),
                                                                     strict=True))

    def note(self, text: str, *, tags: bool = False) -> None:
        """Put a note into the stream, before the next samples (controller thread): a
        ``# text`` line, or with ``tags`` (text ``word name=value ...``) the bare line
        ``name=value ...`` that livestep takes for notes; a log frame in binary mode."""
        self.notes.append(text)
        if tags and self.settings.fmt == "text":
            self._out.append(text.partition(" ")[2].encode() + b"\n")
        else:
            self._send_text(text, note=True)

    def _send_text(self, text: str, *, note: bool) -> None:
        if self.settings.fmt == "binary":
            self._out.append(encode_log_frame(self._seq, text))
            self._seq += 1
        else:
            self._out.append((("# " if note else "") + text + "\n").encode())

    def _apply_commands(self) -> None:
        *lines, self._inbuf = self._inbuf.split(b"\n")
        for raw in lines:
            line = raw.decode("utf-8", errors="replace").rstrip("\r")
            if not line.strip():
                continue
            self.received.append(line)
            try:
                cmd = parse_command(line)
                if cmd is None:
                    continue
                if cmd.kind == "sp":
                    self.setpoint = float(cmd.value)  # type: ignore[arg-type]
                    self.note(f"sp={self.setpoint:g}")
                elif cmd.kind == "gains":
                    try:
                        gains = self.plant.set_gains(**dict(cmd.gains))
                    except ValueError as exc:
                        raise CommandError(str(exc)) from None
                    self.note(gains.describe(), tags=True)
                elif cmd.kind == "stream":
                    self.streaming = bool(cmd.on)
                    self.note("stream on" if cmd.on else "stream off")
                else:
                    self.note(self._status())
            except CommandError as exc:
                self.note(f"error: {exc}")
        if len(self._inbuf) > 4096:  # a line without end: drop it
            self._inbuf = b""

    def _status(self) -> str:
        gains = f" {self.plant.gains.describe()}" if self.plant.gains is not None else ""
        return (f"status sp={self.setpoint:g}{gains} stream={'on' if self.streaming else 'off'}"
                f" rate={self.settings.rate:g}")

    def _read_input(self) -> None:
        fd = self._master
        if fd is None:
            return
        try:
            while True:
                chunk = os.read(fd, 4096)
                if not chunk:
                    return
                self._inbuf += chunk
        except (BlockingIOError, InterruptedError):
            return
        except OSError:  # nobody has the other end open (pty slave closed): nothing to read
            return

    def _wait_input(self, timeout: float) -> None:
        fd = self._master
        if fd is None:
            self._stop.wait(timeout)
            return
        r, _, _ = select.select([fd], [], [], max(timeout, 0.0))
        if r:
            self._read_input()

    def _write(self, data: bytes) -> None:
        view = memoryview(data)
        while view and not self._stop.is_set():
            fd = self._master
            if fd is None:
                return  # unplugged: the samples go nowhere
            r, w, _ = select.select([fd], [fd], [], 0.05)
            if r:
                self._read_input()
            if w:
                try:
                    view = view[os.write(fd, view):]
                except (BlockingIOError, InterruptedError):
                    continue
                except OSError:
                    return
            self._serve_requests()

    def _serve_requests(self) -> None:
        while True:
            try:
                what, done = self._requests.get_nowait()
            except queue.Empty:
                return
            self._close()
            link = self.settings.link
            if link is not None and link.is_symlink():
                link.unlink()  # as udev removes a /dev/serial/by-id link on unplug
            if what == "replug":
                self._open()
                self._inbuf = b""
            done.set()
