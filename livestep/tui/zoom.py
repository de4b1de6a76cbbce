"""Two closer looks at one step: its error zoomed around the settling band, and an extra
channel (a drive's output) plotted under the response.

Pure functions returning :class:`~livestep.tui.plot.Plot` renderables (no textual).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from livestep.live.watch import StepEntry
from livestep.steps.measure import MeasureSettings
from livestep.tui.plot import HLine, Marker, Plot, Trace

__all__ = ["ZOOM_BANDS", "channel_plot", "error_zoom_plot"]

#: The zoom's value axis spans this many band half-widths each side of the final level:
#: the band fills 1 / ZOOM_BANDS of the plot height.
ZOOM_BANDS = 2.5
ERROR, BAND, CHANNEL, HELD = "bright_cyan", "dodger_blue1", "orchid", "bold bright_white"


def error_zoom_plot(e: StepEntry | None, measure: MeasureSettings) -> Plot:
    """The step's distance to its final level, ``(feedback - final) / amplitude`` in percent
    of the step (negative on the way, positive past the final level, whatever the step's
    direction), against time from the step instant, on a value axis of
    +-``ZOOM_BANDS`` settling bands (values beyond are drawn on the edge), with the band,
    the final level and the settling instant ``s``."""
    if e is None:
        return Plot([], empty="error zoom: no step yet")
    w, m = e.result.window, e.result.metrics
    if w is None or not (np.isfinite(m.amplitude) and m.amplitude != 0):
        return Plot([], empty=f"error zoom: step {e.result.index} has no samples in memory")
    band = measure.settling_band
    t = w.t - m.t_step
    err = 100.0 * (w.feedback - m.final) / m.amplitude  # > 0: past the final level
    after = t >= 0
    edge = ZOOM_BANDS * band
    marks = []
    if m.settled and m.settling_time is not None:
        marks.append(Marker(m.settling_time, "s", "bold " + BAND))
    outside = float(np.mean(np.abs(err[after]) > edge)) if after.any() else 0.0
    legend = [("━ feedback − final level, % of step ", ERROR),
              (f"╍ ±{band:g} % band ", BAND), ("s settled ", "bold " + BAND),
              (f"(±{edge:g} % shown; {100 * outside:.0f} % of the step beyond)", "dim")]
    return Plot([Trace(t[after], err[after], ERROR, "error")],
                hlines=[HLine(-band, BAND, "dashed"), HLine(band, BAND, "dashed"),
                        HLine(0.0, "grey50", "dotted")],
                markers=marks, x_range=(0.0, float(t[-1]) if t[-1] > 0 else 1e-3),
                y_range=(-edge, edge), legend=legend, empty="error zoom: nothing to show")


def channel_plot(name: str, t: NDArray[np.float64], x: NDArray[np.float64], *,
                 x_range: tuple[float, float], t_origin: float,
                 e: StepEntry | None = None) -> Plot:
    """An extra channel over the same time span as the response above it; when the step
    ``e`` held this channel at a limit, that value as a line and the hold's start and end
    as markers ``L``."""
    lines, marks = [], []
    legend = [(f"━ {name} ", CHANNEL)]
    hold = e.result.limit if e is not None else None
    if hold is not None and hold.channel == name:
        t0 = e.result.metrics.t_step + hold.start  # type: ignore[union-attr]
        lines.append(HLine(hold.value, HELD, "dotted"))
        marks += [Marker(t0, "L", HELD), Marker(t0 + hold.duration, "L", HELD)]
        legend.append((f"L at its limit {1e3 * hold.duration:.0f} ms ", HELD))
    return Plot([Trace(t, x, CHANNEL, name)], hlines=lines, markers=marks, x_range=x_range,
                t_origin=t_origin, legend=legend, empty=f"{name}: no samples", axis=False)
