"""A simulated controller's text stream and helpers to play it through a pty and compare steps."""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from _pty import Pty
from scipy import signal as sps

ROOT = Path(__file__).resolve().parents[1]
RATE, ZETA, WN = 2000.0, 0.4, 40.0
FIXTURE = ROOT / "fixtures" / "belt-axis.csv"
# The demo axis is stepped twice at each damping ratio 0.35, 0.5, 0.7, 0.9, then 1.3
# (tools/make_demo.py). Closed-form overshoot 100 exp(-zeta pi / sqrt(1 - zeta^2))
# (Ogata): 30.9 % at 0.35, 16.3 % at 0.5, 4.6 % at 0.7, so a 20 % maximum fails the
# first two steps only.
PROFILE = 'name = "demo gate"\n[limits]\novershoot_pct = { max = 20 }\n'


def device_lines(levels: list[float], hold: float = 0.8, restart_at: int | None = None) -> bytes:
    """What a controller would print: a boot banner, a header, then 't,setpoint,feedback'
    lines (time in microseconds), the loop simulated by scipy.signal.lsim. With
    ``restart_at``, the device reboots there: banner and header again, time from zero."""
    n = int(hold * RATE)
    t = np.arange(n * len(levels)) / RATE
    sp = np.repeat(levels, n).astype(float)
    sys_ = sps.TransferFunction([WN**2], [1.0, 2 * ZETA * WN, WN**2])
    _, y, _ = sps.lsim(sys_, sp - sp[0], t)
    y = sp[0] + y + np.random.default_rng(5).normal(0, 0.002, t.size)
    us = np.round(t * 1e6).astype(np.int64)
    out = [b"controller fw 1.4 booting\n", b"t,setpoint,feedback\n"]
    for k in range(t.size):
        if k == restart_at:
            out += [b"controller fw 1.4 booting\n", b"t,setpoint,feedback\n"]
            us = us - us[k]
        out.append(b"%d,%.4f,%.5f\n" % (us[k], sp[k], y[k]))
    return b"".join(out)


def write_paced(dev: Pty, data: bytes, rate_bytes: float) -> list[tuple[float, int]]:
    """Write in 2 kB pieces at about ``rate_bytes`` per second; returns (time, bytes so far)."""
    log, start = [], time.monotonic()
    for i in range(0, len(data), 2048):
        dev.write(data[i:i + 2048])
        log.append((time.monotonic(), i + len(data[i:i + 2048])))
        due = start + (i + 2048) / rate_bytes - time.monotonic()
        if due > 0:
            time.sleep(due)
    return log


def steps_of(doc_lines: list[dict]) -> list[tuple]:
    keys = ("t_step", "direction", "rise_time", "overshoot_pct", "settling_time", "settled")
    return [tuple(s[k] for k in keys) for s in doc_lines]


def close_enough(a: list[tuple], b: list[tuple]) -> bool:
    if len(a) != len(b):
        return False
    for x, y in zip(a, b, strict=True):
        for u, v in zip(x, y, strict=True):
            if isinstance(u, float) and isinstance(v, float):
                if abs(u - v) > 1e-6 * max(1.0, abs(u)):
                    return False
            elif u != v:
                return False
    return True
