"""Serial source: a reader thread that drains a port into a bounded queue.

Opens anything pyserial's ``serial_for_url`` accepts (``/dev/ttyUSB0``,
``/dev/serial/by-id/...``, ``loop://``, ``socket://host:port``,
``rfc2217://host:port``). The thread reads ``read(in_waiting or 1)`` with a
short timeout, never ``readline()``, and never waits on its consumer: a full
queue drops the read and counts it. When the port goes away (SerialException,
OSError, termios.error) it reports ``disconnected`` and reopens the same path
with backoff (at most 0.5 s between tries), preferring the stable
``/dev/serial/by-id`` name of the device it first opened.
"""

from __future__ import annotations

import errno
import os
import queue
import threading
import time
from dataclasses import dataclass
from pathlib import Path

import serial

from livestep.errors import InputError

try:  # POSIX only
    import termios

    _PORT_ERRORS: tuple[type[BaseException], ...] = (serial.SerialException, OSError,
                                                     termios.error)
except ImportError:  # pragma: no cover - Windows
    _PORT_ERRORS = (serial.SerialException, OSError)

__all__ = ["PortSettings", "SerialReader", "open_port", "stable_path"]

BY_ID = Path("/dev/serial/by-id")
PARITIES = {"N": serial.PARITY_NONE, "E": serial.PARITY_EVEN, "O": serial.PARITY_ODD}


@dataclass(frozen=True, kw_only=True)
class PortSettings:
    """``url``: device path or pyserial URL; ``baudrate`` in bit/s (ignored by USB CDC
    devices); ``parity`` N, E or O; ``exclusive``: lock the port against other programs;
    ``dtr``/``rts``: drive those lines on open (``None`` leaves pyserial's default; some
    boards reset when DTR changes); ``read_timeout`` in seconds; ``write_timeout``: seconds a
    write may wait for a device that does not read (flow control, a hung board) before it
    fails, so a session can always end."""

    url: str
    baudrate: int = 115200
    parity: str = "N"
    exclusive: bool = True
    dtr: bool | None = None
    rts: bool | None = None
    read_timeout: float = 0.1
    write_timeout: float = 2.0


def stable_path(device: str, by_id: Path = BY_ID) -> str:
    """The ``/dev/serial/by-id`` link that points at ``device``, or ``device`` itself."""
    try:
        target = os.path.realpath(device)
        for link in sorted(by_id.iterdir()):
            if os.path.realpath(link) == target:
                return str(link)
    except OSError:
        pass
    return device


def open_port(s: PortSettings) -> serial.SerialBase:
    """Open the port; raise :class:`InputError` with one clear line when it cannot be."""
    if s.parity not in PARITIES:
        raise InputError(f"unknown parity {s.parity!r}; use N, E or O")
    try:
        port = serial.serial_for_url(s.url, do_not_open=True, baudrate=s.baudrate,
                                     parity=PARITIES[s.parity], timeout=s.read_timeout,
                                     write_timeout=s.write_timeout)
        if "://" not in s.url:
            port.exclusive = s.exclusive
        if s.dtr is not None:
            port.dtr = s.dtr
        if s.rts is not None:
            port.rts = s.rts
        port.open()
    except ValueError as exc:
        raise InputError(f"{s.url}: {exc}") from None
    except serial.SerialException as exc:
        raise InputError(_explain(s.url, exc)) from None
    return port


def _explain(url: str, exc: serial.SerialException) -> str:
    code = exc.errno if isinstance(exc.errno, int) else None
    if code in (errno.EAGAIN, errno.EWOULDBLOCK) or "exclusively lock" in str(exc):
        return f"{url}: port busy (another program has it open)"
    if code == errno.ENOENT:
        return f"{url}: no such port (see 'livestep ports')"
    if code in (errno.EACCES, errno.EPERM):
        return f"{url}: permission denied (are you in the dialout group?)"
    return f"{url}: cannot open: {exc}"


class SerialReader:
    """Reader thread for one port. Events arrive on :attr:`events` as ``(kind, payload)``:
    ``("data", bytes)``, ``("state", "connected" | "disconnected")``."""

    def __init__(self, settings: PortSettings, *, max_queue: int = 16384,
                 max_backoff: float = 0.5) -> None:
        self.settings = settings
        self.events: queue.Queue[tuple[str, object]] = queue.Queue(maxsize=max_queue)
        self.max_backoff = max_backoff
        self.dropped_bytes = 0
        self.reconnects = 0
        self.cpu_time = 0.0  # CPU seconds the reader thread has used
        self.state = "closed"
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._port: serial.SerialBase | None = None
        self._path = settings.url

    def start(self) -> None:
        """Open the port (errors raise :class:`InputError`) and start reading."""
        self._port = open_port(self.settings)
        if "://" not in self.settings.url:
            self._path = stable_path(self.settings.url)
        self._set_state("connected")
        self._thread = threading.Thread(target=self._run, name="livestep-serial", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 1.0) -> None:
        """Stop reading and close the port; returns within about ``timeout`` seconds."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout)

    @property
    def alive(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def write(self, data: bytes) -> None:
        """Send bytes to the device (only ever on the user's explicit request)."""
        if self._port is None or self.state != "connected":
            raise InputError("not connected: nothing was sent")
        self._port.write(data)

    # -- thread -------------------------------------------------------------------
    def _put(self, kind: str, payload: object) -> None:
        try:
            self.events.put_nowait((kind, payload))
        except queue.Full:
            if kind == "data":
                self.dropped_bytes += len(payload)  # type: ignore[arg-type]

    def _set_state(self, state: str) -> None:
        self.state = state
        while True:  # state changes must get through: make room by dropping nothing else
            try:
                self.events.put((("state", state)), timeout=0.05)
                return
            except queue.Full:
                if self._stop.is_set():
                    return

    def _run(self) -> None:
        while not self._stop.is_set():
            port = self._port
            if port is None:
                self._reopen()
                continue
            try:
                data = port.read(port.in_waiting or 1)
            except _PORT_ERRORS:
                self._close_port()
                self._set_state("disconnected")
                continue
            if data:
                self._put("data", data)
            self.cpu_time = time.thread_time()
        self._close_port()

    def _close_port(self) -> None:
        port, self._port = self._port, None
        if port is not None:
            try:
                port.close()
            except _PORT_ERRORS:
                pass

    def _reopen(self) -> None:
        delay = 0.05
        while not self._stop.is_set():
            for path in dict.fromkeys((self._path, self.settings.url)):
                try:
                    self._port = open_port(PortSettings(
                        url=path, baudrate=self.settings.baudrate, parity=self.settings.parity,
                        exclusive=self.settings.exclusive, dtr=self.settings.dtr,
                        rts=self.settings.rts, read_timeout=self.settings.read_timeout,
                        write_timeout=self.settings.write_timeout))
                except InputError:
                    continue
                self.reconnects += 1
                self._set_state("connected")
                return
            self._stop.wait(delay)
            delay = min(2 * delay, self.max_backoff)

