"""Hand-made step results with known figures, for verdict, statistics and report tests."""

from __future__ import annotations

from dataclasses import replace
from typing import Any

from livestep.steps.analysis import StepResult
from livestep.steps.measure import StepMetrics
from livestep.steps.model_fit import ClosedFormEstimate, ModelFit

_METRICS = StepMetrics(
    t_step=1.0, direction="up", setpoint_before=0.0, setpoint_after=10.0, initial=0.0,
    final=10.0, amplitude=10.0, rise_time=0.05, delay_time=0.03, peak_time=0.1, peak=10.5,
    overshoot_pct=5.0, undershoot_pct=0.0, settling_time=0.2, settled=True,
    steady_state_error=0.0, steady_state_error_pct=0.0, iae=0.3, ise=1.5, itae=0.01,
    noise_sigma=0.001, sample_period=0.001, smoothing_samples=1)
_MODEL = ModelFit(zeta=0.7, wn=40.0, gain=1.0, dead_time=0.002, amplitude=10.0, fit_r2=0.999,
                  fit_nrmse=0.01, bandwidth=40.0, phase_margin_deg=65.0,
                  settling_time_estimate=0.15)


def result(index: int = 0, *, model: dict[str, Any] | None = None, no_model: bool = False,
           tags: tuple[tuple[str, str], ...] = (), **metrics: Any) -> StepResult:
    """A step whose measured figures are ``metrics`` (the rest: a clean 10-unit up step)
    and whose model has the fields in ``model`` (``no_model``: no fit)."""
    return StepResult(index=index, metrics=replace(_METRICS, **metrics),
                      estimate=ClosedFormEstimate(zeta=None, wn=None, settling_time=None),
                      model=None if no_model else replace(_MODEL, **(model or {})),
                      end_reason="next step", warnings=(), tags=tags)
