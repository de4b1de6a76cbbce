"""From sample chunks to measured, modelled steps: the numerical pipeline's core.

No I/O here: feed it chunks from any source (a recording, a serial link, a
simulation) and it yields one :class:`StepResult` per step as soon as the
step's window closes.
"""

from __future__ import annotations

import multiprocessing as mp
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field, replace

import numpy as np

from livestep.steps.channels import ChannelBuffer
from livestep.steps.detect import DetectorSettings, StepDetector, StepWindow
from livestep.steps.limits import LimitHold, LimitSettings, limit_hold, limit_warning
from livestep.steps.measure import MeasureSettings, StepMetrics, measure_step, without_figures
from livestep.steps.model_fit import (
    ClosedFormEstimate,
    ModelFit,
    closed_form_estimate,
    fit_second_order,
    load_solver,
)
from livestep.steps.progress import SETTLING, StepProgress, step_progress
from livestep.steps.samples import SampleChunk

__all__ = ["AnalysisSettings", "StepAnalyzer", "StepResult", "analyze_chunks", "analyze_window"]


@dataclass(frozen=True, kw_only=True)
class AnalysisSettings:
    """Detection and measurement options together; ``fit_model`` turns the fit off."""

    detect: DetectorSettings = field(default_factory=DetectorSettings)
    measure: MeasureSettings = field(default_factory=MeasureSettings)
    fit_model: bool = True
    keep_windows: bool = False  # attach each step's samples to its result (plots)
    limits: LimitSettings = field(default_factory=LimitSettings)  # output-at-limit check


@dataclass(frozen=True, kw_only=True)
class StepResult:
    """Everything known about one step."""

    index: int
    metrics: StepMetrics
    estimate: ClosedFormEstimate
    model: ModelFit | None
    end_reason: str
    warnings: tuple[str, ...]
    #: Notes active at the step instant, as (name, value) pairs (e.g. the gain set in use).
    tags: tuple[tuple[str, str], ...] = ()
    #: The step's samples when ``AnalysisSettings.keep_windows`` is set (for plots).
    window: StepWindow | None = field(default=None, compare=False, repr=False)
    #: An extra channel (a drive's output) held at its extreme during the rise, if any.
    limit: LimitHold | None = None


def analyze_window(w: StepWindow, settings: AnalysisSettings = AnalysisSettings()) -> StepResult:
    """Measure and model one detected step. Never raises on the step's data: a step that
    cannot be measured, or whose model cannot be fitted, says so in its warnings (and an
    error there is a bug, reported with the step rather than ending the stream)."""
    try:
        if w.measured is not None and w.measured[0] == settings.measure:
            m = w.measured[1]  # the detector measured these very samples to close it
        else:
            m = measure_step(w.t, w.feedback, w.i_step, setpoint=w.setpoint,
                             setpoint_before=w.setpoint_before,
                             setpoint_after=w.setpoint_after, settings=settings.measure)
    except Exception as exc:  # noqa: BLE001 - one step must not end the stream
        m = unmeasured(w, f"not measured: internal error {type(exc).__name__}: {exc}")
    warnings = list(m.warnings)
    model = None
    if settings.fit_model and m.rise_time is not None:
        try:
            model = fit_second_order(w.t, w.feedback, m)
        except Exception as exc:  # noqa: BLE001 - a failed fit loses the model only
            warnings.append(f"no second-order model: the fit failed ({type(exc).__name__})")
    if settings.fit_model and model is None and not any(
            x.startswith("no second-order model") for x in warnings):
        warnings.append("no second-order model: the response has no measurable rise")
    elif model is not None and model.fit_r2 < 0.9:
        warnings.append(f"the second-order model fits poorly (R^2 = {model.fit_r2:.3f})")
    if w.end_reason == "longest window":
        warnings.append("the window was cut at the longest window setting")
    limit = _held_output(w, m, settings.limits) if w.extras else None
    if limit is not None:
        warnings.insert(0, limit_warning(limit))
    return StepResult(index=w.index, metrics=m, estimate=closed_form_estimate(
        m, settings.measure.settling_band), model=model, end_reason=w.end_reason,
        warnings=tuple(warnings), window=w if settings.keep_windows else None, limit=limit)


def _held_output(w: StepWindow, m: StepMetrics, settings: LimitSettings) -> LimitHold | None:
    """The longest hold at an extreme of any extra channel during the rise (to the upper
    rise level's crossing, else the peak, else the window's end)."""
    if m.rise_time is not None:
        rise_end: float | None = m.t_step + (m.rise_start or 0.0) + m.rise_time
    elif m.peak_time is not None:
        rise_end = m.t_step + m.peak_time
    else:
        rise_end = None
    holds = [limit_hold(w.t, x, w.i_step, rise_end, channel=name, settings=settings)
             for name, x in w.extras.items()]
    found = [h for h in holds if h is not None]
    return max(found, key=lambda h: h.duration) if found else None


def _with_channels(buffer: ChannelBuffer, chunk: SampleChunk | None,
                   windows: list[StepWindow], detector: StepDetector) -> list[StepWindow]:
    """The windows with their extra channels (``chunk``: the one just fed, ``None`` at the
    end); nothing to do for a stream without extra channels."""
    if chunk is not None:
        if not chunk.extras and not buffer:
            return windows
        buffer.append(chunk.t, chunk.extras)
    if not buffer:
        return windows
    out = [replace(w, extras=buffer.window(w.t)) for w in windows]
    buffer.keep_last(detector.held)
    return out


def unmeasured(w: StepWindow, reason: str) -> StepMetrics:
    """The metrics of a step that could not be measured: its instant and setpoints, no
    figures, ``reason`` as its warning."""
    t_step = float(w.t[w.i_step])
    level = float(w.feedback[w.i_step])
    change = (None if w.setpoint_before is None or w.setpoint_after is None
              else w.setpoint_after - w.setpoint_before)
    dt = float(np.median(np.diff(w.t))) if w.t.size > 1 else 0.0
    return without_figures(
        t_step=t_step, direction="up" if (change or 0.0) >= 0 else "down",
        setpoint_before=w.setpoint_before, setpoint_after=w.setpoint_after, initial=level,
        final=level, steady_state_error=None, noise_sigma=0.0, sample_period=dt,
        smoothing_samples=1, warnings=(reason,))


class StepAnalyzer:
    """Incremental analysis: :meth:`feed` chunks, :meth:`finish` at the end."""

    def __init__(self, settings: AnalysisSettings = AnalysisSettings(),
                 *, has_setpoint: bool = True) -> None:
        self.settings = settings
        self.detector = StepDetector(settings.detect, has_setpoint=has_setpoint,
                                     measure=settings.measure)
        self._progress: tuple[int, StepProgress] | None = None  # (step instant, progress)
        self._channels = ChannelBuffer()

    def feed(self, chunk: SampleChunk) -> list[StepResult]:
        """Results of the steps whose windows this chunk closed."""
        windows = _with_channels(self._channels, chunk, self.detector.feed(
            chunk.t, chunk.feedback, chunk.setpoint), self.detector)
        return [analyze_window(w, self.settings) for w in windows]

    def progress(self) -> StepProgress | None:
        """What is known of the step under way (``None`` when none is): its instant and
        size, then its rise time, peak and overshoot as the samples show them."""
        now = self.detector.open_instant()
        if now is None:
            return None
        cached = self._progress
        if cached is not None and cached[0] == now[0] and cached[1].phase == SETTLING:
            return replace(cached[1], elapsed=now[1])  # nothing more to learn: no copy
        w = self.detector.open_window(copy=False)  # read here and now: no copy needed
        if w is None:
            return None
        p = step_progress(w, self.settings.measure)
        self._progress = (now[0], p)
        return p

    def finish(self, reason: str = "end of data") -> list[StepResult]:
        """Results of the step still open at the end of the stream (or segment)."""
        return [analyze_window(w, self.settings) for w in _with_channels(
            self._channels, None, self.detector.finish(reason), self.detector)]


def analyze_chunks(chunks: Iterable[SampleChunk], settings: AnalysisSettings = AnalysisSettings(),
                   *, has_setpoint: bool = True, workers: int = 1) -> Iterator[StepResult]:
    """Yield every step of a stream of chunks, in order.

    ``workers`` > 1: this process detects the steps and ``workers`` - 1 forked processes
    measure and fit them (:class:`~livestep.steps.window_pool.WindowPool`); the results
    are the same, in the same order. Start it before any other thread of the process.
    The fit's solver is loaded first, while a reader started before (a process of its
    own) reads, and before the workers are forked.
    """
    if settings.fit_model:
        load_solver()
    if workers <= 1 or "fork" not in mp.get_all_start_methods():
        analyzer = StepAnalyzer(settings, has_setpoint=has_setpoint)
        for chunk in chunks:
            yield from analyzer.feed(chunk)
        yield from analyzer.finish()
        return
    from livestep.steps.window_pool import WindowPool

    detector = StepDetector(settings.detect, has_setpoint=has_setpoint,
                            measure=settings.measure)
    channels = ChannelBuffer()
    with WindowPool(workers - 1, settings) as pool:
        for chunk in chunks:
            for w in _with_channels(channels, chunk, detector.feed(
                    chunk.t, chunk.feedback, chunk.setpoint), detector):
                yield from pool.submit(w)
        for w in _with_channels(channels, None, detector.finish(), detector):
            yield from pool.submit(w)
        yield from pool.drain()
