"""When an open step may close as settled: the rule the detector applies at its checkpoints.

Pure function: the open window's samples in, a decision out. See
:mod:`livestep.steps.detect` for where the checkpoints are.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from livestep.steps.measure import MeasureSettings, StepMetrics, line_slope, measure_step

__all__ = ["confirmed_settled"]

FloatArray = NDArray[np.float64]


def confirmed_settled(t: FloatArray, feedback: FloatArray, setpoint: FloatArray | None,
                      i_step: int, setpoint_before: float | None,
                      setpoint_after: float | None, *, level: tuple[float, float],
                      tail_min: int,
                      settings: MeasureSettings) -> tuple[StepMetrics | None, float]:
    """(the window's measurement when it may close, else ``None``; no close before this
    time in seconds) for the window ``t`` (seconds),
    ``feedback``, ``setpoint`` with the step instant at ``i_step``; ``level``: the initial
    level and noise sigma (feedback units).

    It may close when the response has moved (5 sigma) and the last two thirds of the
    window (at least ``tail_min`` samples) are flat within the band and drift by at most a
    quarter of it, it has answered at least half of the setpoint change, the measurement
    calls it settled, it has stayed in the band for twice its settling time since, and a
    line fitted to that confirmation stretch moves by at most a quarter of the band (not
    creeping). While only the confirmation is missing, the second value says when it can
    end, so nothing needs measuring before.
    """
    wait = -np.inf
    initial, sigma = level
    # the last two thirds: once confirmed (in the band for twice the settling time), that
    # much of the window is in the band, so the measurement below mostly confirms at once
    tail = feedback[-max(tail_min, 2 * (feedback.size - i_step) // 3):]
    amp = float(np.mean(tail)) - initial
    band = settings.settling_band / 100.0
    if abs(amp) < 5.0 * sigma or float(np.ptp(tail)) > 2.0 * band * abs(amp) + 8.0 * sigma:
        return None, wait
    if _drift(t[-tail.size:], tail) > 0.25 * band * abs(amp):  # still creeping: not yet
        return None, wait
    if setpoint_before is not None and setpoint_after is not None \
            and setpoint_after != setpoint_before:
        # Not before the loop has clearly answered the setpoint change (inside a dead
        # time a slow drift can look settled); a loop that ends far from its setpoint
        # keeps its window to the next step.
        if amp / (setpoint_after - setpoint_before) < 0.5:
            return None, wait
    try:
        m = measure_step(t, feedback, i_step, setpoint=setpoint,
                         setpoint_before=setpoint_before, setpoint_after=setpoint_after,
                         settings=settings, level=level)
    except Exception:  # noqa: BLE001 - a bug there must not end the stream: not settled
        return None, wait
    if not m.settled or m.settling_time is None or m.rise_time is None:
        return None, wait
    since = m.t_step + m.settling_time
    if float(t[-1]) - since < 2.0 * m.settling_time:
        return None, since + 2.0 * m.settling_time
    # Not creeping either (an integrator still pulling the error out inside the band).
    sel = t >= since
    return (m if _drift(t[sel], feedback[sel]) <= 0.25 * band * abs(m.amplitude) else None), wait


def _drift(t: FloatArray, y: FloatArray) -> float:
    """How far a straight line fitted to ``y`` over ``t`` moves across it (y's units)."""
    if t.size < 3:
        return 0.0
    return abs(line_slope(t, y)) * float(t[-1] - t[0])
