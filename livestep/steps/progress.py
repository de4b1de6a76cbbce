"""What is known of a step while it is under way, before its window closes.

Pure functions: the open window's samples in, a frozen :class:`StepProgress` out. The
figures are provisional: they are read against the level the setpoint asks for (the
initial level plus the setpoint change), because the final level is not known yet; the
step's result, when its window closes, gives the measured ones.

Phases, in order, each known as soon as the samples show it:

- ``stepped``: the step instant and size are known (the setpoint changed);
- ``rising``: the response has passed the low rise level (10 %);
- ``risen``: it has passed the high rise level (90 %): ``rise_time`` is known;
- ``settling``: the peak has passed (the response has come back from its largest
  excursion by more than the noise), ``peak_time`` and ``overshoot_pct`` are known, or the
  response has stayed inside the settling band for a rise time without overshooting it.

In feedback mode (no setpoint) the target is unknown and only the instant is given.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from livestep.steps.detect import StepWindow
from livestep.steps.measure import MeasureSettings, noise_sigma, robust_level
from livestep.steps.smoothing import first_crossing

__all__ = ["StepProgress", "step_progress"]

STEPPED, RISING, RISEN, SETTLING = "stepped", "rising", "risen", "settling"


@dataclass(frozen=True, kw_only=True)
class StepProgress:
    """A step under way. ``t_step`` in the recording's time base (seconds); ``elapsed``:
    seconds from the step instant to the latest sample; ``size``: the setpoint change
    (``None`` in feedback mode); ``rise_time``, ``peak_time`` seconds and
    ``overshoot_pct`` percent of the setpoint change, each ``None`` until known."""

    t_step: float
    direction: str
    size: float | None
    elapsed: float
    phase: str
    rise_time: float | None = None
    peak_time: float | None = None
    overshoot_pct: float | None = None

    def known(self) -> tuple[float, str, float | None, float | None]:
        """What is known of the step, apart from the time elapsed: it changes only when
        there is news (a new step, a new phase, the rise or the peak)."""
        return self.t_step, self.phase, self.rise_time, self.peak_time


def step_progress(w: StepWindow, settings: MeasureSettings | None = None) -> StepProgress:
    """What the samples of the open window ``w`` tell so far (see the module docstring)."""
    settings = settings if settings is not None else MeasureSettings()
    t, y, i = w.t, w.feedback, w.i_step
    t_step = float(t[i])
    elapsed = float(t[-1]) - t_step
    size = None
    if w.setpoint_before is not None and w.setpoint_after is not None:
        size = w.setpoint_after - w.setpoint_before
    direction = "up" if (size or 0.0) >= 0 else "down"
    base = StepProgress(t_step=t_step, direction=direction, size=size, elapsed=elapsed,
                        phase=STEPPED)
    if not size or i < 3 or y.size - i < 3:
        return base
    initial, sigma = robust_level(y[:i]), noise_sigma(y[:i])
    r = (y - initial) / size  # fraction of the setpoint change, rising towards 1
    lo, hi = (x / 100.0 for x in settings.rise_levels)
    t_lo = first_crossing(t, r, lo, i)
    if t_lo is None:
        return base
    t_hi = first_crossing(t, r, hi, i)
    if t_hi is None:
        return StepProgress(**{**base.__dict__, "phase": RISING})
    rise = t_hi - t_lo
    after = r[i:]
    k = int(np.argmax(after))
    noise = 5.0 * sigma / abs(size)
    band = settings.settling_band / 100.0
    came_back = after[k] - after[-1] > max(noise, 0.2 * band) and k < after.size - 1
    if came_back and after[k] > 1.0 + max(noise, 1e-3):
        return StepProgress(**{**base.__dict__, "phase": SETTLING, "rise_time": rise,
                               "peak_time": float(t[i + k]) - t_step,
                               "overshoot_pct": 100.0 * (float(after[k]) - 1.0)})
    inside = np.abs(after - 1.0) <= band + noise
    entered = int(np.argmax(inside)) if inside.any() else after.size
    steady = entered < after.size and bool(inside[entered:].all())
    if steady and float(t[-1] - t[i + entered]) >= rise and after[k] <= 1.0 + band + noise:
        return StepProgress(**{**base.__dict__, "phase": SETTLING, "rise_time": rise,
                               "overshoot_pct": 0.0})
    return StepProgress(**{**base.__dict__, "phase": RISEN, "rise_time": rise})
