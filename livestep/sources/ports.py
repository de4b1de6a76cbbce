"""Listing the serial ports present (pyserial's port listing)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from serial.tools import list_ports

from livestep.sources.serial_port import BY_ID, stable_path

__all__ = ["PortInfo", "list_serial_ports"]


@dataclass(frozen=True)
class PortInfo:
    """One port: its device path, pyserial's description and hardware id, and the stable
    ``/dev/serial/by-id`` path when the system has one (else the device path)."""

    device: str
    description: str
    hwid: str
    stable: str


def list_serial_ports(by_id: Path = BY_ID) -> list[PortInfo]:
    """Ports pyserial can see, sorted by device. Pseudo-terminals are not listed."""
    return [PortInfo(p.device, p.description or "", p.hwid or "", stable_path(p.device, by_id))
            for p in sorted(list_ports.comports(), key=lambda p: p.device)]
