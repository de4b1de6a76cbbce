"""From sample chunks to measured, modelled steps: the numerical pipeline's core.

No I/O here: feed it chunks from any source (a recording, a serial link, a
simulation) and it yields one :class:`StepResult` per step as soon as the
step's window closes.
"""

from __future__ import annotations

import multiprocessing as mp
from collections import deque
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from multiprocessing.pool import AsyncResult

from livestep.steps.detect import DetectorSettings, StepDetector, StepWindow
from livestep.steps.measure import MeasureSettings, StepMetrics, measure_step
from livestep.steps.model_fit import (
    ClosedFormEstimate,
    ModelFit,
    closed_form_estimate,
    fit_second_order,
)
from livestep.steps.samples import SampleChunk

__all__ = ["AnalysisSettings", "StepAnalyzer", "StepResult", "analyze_chunks", "analyze_window"]


@dataclass(frozen=True, kw_only=True)
class AnalysisSettings:
    """Detection and measurement options together; ``fit_model`` turns the fit off."""

    detect: DetectorSettings = field(default_factory=DetectorSettings)
    measure: MeasureSettings = field(default_factory=MeasureSettings)
    fit_model: bool = True
    keep_windows: bool = False  # attach each step's samples to its result (plots)


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


def analyze_window(w: StepWindow, settings: AnalysisSettings = AnalysisSettings()) -> StepResult:
    """Measure and model one detected step."""
    m = measure_step(w.t, w.feedback, w.i_step, setpoint=w.setpoint,
                     setpoint_before=w.setpoint_before, setpoint_after=w.setpoint_after,
                     settings=settings.measure)
    warnings = list(m.warnings)
    model = fit_second_order(w.t, w.feedback, m) if settings.fit_model else None
    if settings.fit_model and model is None:
        warnings.append("no second-order model: the response has no measurable rise")
    elif model is not None and model.fit_r2 < 0.9:
        warnings.append(f"the second-order model fits poorly (R^2 = {model.fit_r2:.3f})")
    if w.end_reason == "longest window":
        warnings.append("the window was cut at the longest window setting")
    return StepResult(index=w.index, metrics=m, estimate=closed_form_estimate(
        m, settings.measure.settling_band), model=model, end_reason=w.end_reason,
        warnings=tuple(warnings), window=w if settings.keep_windows else None)


class StepAnalyzer:
    """Incremental analysis: :meth:`feed` chunks, :meth:`finish` at the end."""

    def __init__(self, settings: AnalysisSettings = AnalysisSettings(),
                 *, has_setpoint: bool = True) -> None:
        self.settings = settings
        self.detector = StepDetector(settings.detect, has_setpoint=has_setpoint)

    def feed(self, chunk: SampleChunk) -> list[StepResult]:
        """Results of the steps whose windows this chunk closed."""
        windows = self.detector.feed(chunk.t, chunk.feedback, chunk.setpoint)
        return [analyze_window(w, self.settings) for w in windows]

    def finish(self, reason: str = "end of data") -> list[StepResult]:
        """Results of the step still open at the end of the stream (or segment)."""
        return [analyze_window(w, self.settings) for w in self.detector.finish(reason)]


def analyze_chunks(chunks: Iterable[SampleChunk], settings: AnalysisSettings = AnalysisSettings(),
                   *, has_setpoint: bool = True, workers: int = 1) -> Iterator[StepResult]:
    """Yield every step of a stream of chunks, in order.

    ``workers`` > 1 measures and fits the steps in that many forked worker processes
    while this one reads and detects (offline analysis of long recordings); the results
    are the same, in the same order. Start it before any other thread of the process.
    """
    if workers <= 1 or "fork" not in mp.get_all_start_methods():
        analyzer = StepAnalyzer(settings, has_setpoint=has_setpoint)
        for chunk in chunks:
            yield from analyzer.feed(chunk)
        yield from analyzer.finish()
        return
    detector = StepDetector(settings.detect, has_setpoint=has_setpoint)
    with mp.get_context("fork").Pool(workers) as pool:  # forked now, before any reading
        pending: deque[AsyncResult[StepResult]] = deque()

        def submit(windows: list[StepWindow]) -> Iterator[StepResult]:
            for w in windows:
                pending.append(pool.apply_async(analyze_window, (w, settings)))
            while pending and (pending[0].ready() or len(pending) > 8 * workers):
                yield pending.popleft().get()

        for chunk in chunks:
            yield from submit(detector.feed(chunk.t, chunk.feedback, chunk.setpoint))
        yield from submit(detector.finish())
        while pending:
            yield pending.popleft().get()
