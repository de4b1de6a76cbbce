"""The serial reader on real pseudo-terminals: data, unplug and replug, busy, flood, silence."""

from __future__ import annotations

import queue
import threading
import time
from pathlib import Path

import pytest
from _pty import Pty

from livestep.errors import InputError
from livestep.sources.ports import list_serial_ports
from livestep.sources.serial_port import PortSettings, SerialReader, open_port, stable_path


@pytest.fixture
def pty_pair():
    p = Pty()
    yield p
    p.close()


def next_event(reader: SerialReader, kind: str, timeout: float = 3.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        try:
            k, payload = reader.events.get(timeout=0.05)
        except queue.Empty:
            continue
        if k == kind:
            return payload
    raise AssertionError(f"no {kind} event within {timeout} s")


def collect(reader: SerialReader, n_bytes: int, timeout: float = 10.0) -> bytes:
    got = bytearray()
    end = time.monotonic() + timeout
    while len(got) < n_bytes and time.monotonic() < end:
        try:
            k, payload = reader.events.get(timeout=0.05)
        except queue.Empty:
            continue
        if k == "data":
            got += payload
    return bytes(got)


def test_reads_what_the_device_writes(pty_pair):
    reader = SerialReader(PortSettings(url=pty_pair.path))
    reader.start()
    try:
        assert next_event(reader, "state") == "connected"
        pty_pair.write(b"t,setpoint,feedback\n0.001,1,0.5\n")
        assert collect(reader, 32) == b"t,setpoint,feedback\n0.001,1,0.5\n"
    finally:
        reader.stop()


def test_busy_port_is_a_clear_error(pty_pair):
    first = open_port(PortSettings(url=pty_pair.path))
    try:
        with pytest.raises(InputError, match="port busy"):
            open_port(PortSettings(url=pty_pair.path))
    finally:
        first.close()


def test_missing_port_is_a_clear_error(tmp_path):
    with pytest.raises(InputError, match="no such port"):
        open_port(PortSettings(url=str(tmp_path / "ttyNOPE")))


def test_bad_url_is_a_clear_error():
    with pytest.raises(InputError):
        open_port(PortSettings(url="nosuchscheme://x"))


def test_unplug_and_replug_under_the_same_path(tmp_path):
    """The device node is reached through a symlink, as /dev/serial/by-id paths are;
    unplugging closes the pty, replugging makes a new one behind the same link."""
    link = tmp_path / "ttyBENCH"
    dev = Pty()
    link.symlink_to(dev.path)
    reader = SerialReader(PortSettings(url=str(link)))
    reader.start()
    try:
        assert next_event(reader, "state") == "connected"
        dev.write(b"hello\n")
        assert collect(reader, 6) == b"hello\n"
        dev.close()  # unplug
        assert next_event(reader, "state") == "disconnected"
        time.sleep(0.3)
        dev = Pty()  # replug: a new node behind the same stable path
        link.unlink()
        link.symlink_to(dev.path)
        t0 = time.monotonic()
        assert next_event(reader, "state", timeout=3.0) == "connected"
        assert time.monotonic() - t0 < 2.0
        assert reader.reconnects == 1
        dev.write(b"again\n")
        assert collect(reader, 6) == b"again\n"
    finally:
        reader.stop()
        dev.close()


def test_stop_on_a_silent_port_is_quick(pty_pair):
    reader = SerialReader(PortSettings(url=pty_pair.path))
    reader.start()
    time.sleep(0.3)  # the thread is blocked in read() on a port that sends nothing
    t0 = time.monotonic()
    reader.stop(timeout=1.0)
    assert not reader.alive
    assert time.monotonic() - t0 < 1.0


def test_stop_while_disconnected_is_quick(tmp_path):
    link = tmp_path / "ttyGONE"
    dev = Pty()
    link.symlink_to(dev.path)
    reader = SerialReader(PortSettings(url=str(link)))
    reader.start()
    dev.close()
    assert next_event(reader, "state") == "connected"
    assert next_event(reader, "state") == "disconnected"
    t0 = time.monotonic()
    reader.stop(timeout=1.0)
    assert not reader.alive and time.monotonic() - t0 < 1.0


def test_flood_loses_nothing(pty_pair):
    """4 MB written as fast as the pty takes them all arrive, in order."""
    lines = b"".join(b"%d,%d,%d\n" % (k, k % 7, k * 3) for k in range(300_000))
    reader = SerialReader(PortSettings(url=pty_pair.path))
    reader.start()
    try:
        writer = threading.Thread(target=pty_pair.write, args=(lines,))
        writer.start()
        got = collect(reader, len(lines), timeout=60.0)
        writer.join()
        assert got == lines
        assert reader.dropped_bytes == 0
    finally:
        reader.stop()


def test_loop_url_round_trip():
    """pyserial's loop:// handler echoes writes: a protocol-level check without a device."""
    reader = SerialReader(PortSettings(url="loop://"))
    reader.start()
    try:
        reader.write(b"0.5,1,0.25\n")
        assert collect(reader, 11) == b"0.5,1,0.25\n"
    finally:
        reader.stop()


def test_stable_path_prefers_by_id_links(tmp_path, pty_pair):
    by_id = tmp_path / "by-id"
    by_id.mkdir()
    (by_id / "usb-Bench_Axis_Controller-if00").symlink_to(pty_pair.path)
    assert stable_path(pty_pair.path, by_id) == str(by_id / "usb-Bench_Axis_Controller-if00")
    assert stable_path("/dev/ttyNOPE", by_id) == "/dev/ttyNOPE"


def test_port_listing_runs():
    ports = list_serial_ports(Path("/nonexistent"))
    assert all(p.device and p.stable == p.device for p in ports)


def test_a_write_to_a_device_that_never_reads_fails_instead_of_hanging(pty_pair):
    # A pty holds a few KB and then blocks its writer: a board that stopped reading. The
    # write must give up (pyserial's SerialTimeoutException, a SerialException the plan
    # runner takes for a lost link) so the session can end and say so.
    import serial

    reader = SerialReader(PortSettings(url=pty_pair.path, write_timeout=0.2))
    reader.start()
    try:
        with pytest.raises(serial.SerialTimeoutException):
            for _ in range(1000):
                reader.write(b"x" * 4096)
    finally:
        reader.stop()
