"""The measured quantities that profiles limit and statistics, reports and the UI show.

Each quantity is named by its key in the ``analyze --json`` step record (measured
figures) or in its ``model`` object (fitted second-order model). Steady-state
errors are taken as magnitudes here, so one ``max`` limits both signs.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, replace

from livestep.steps.analysis import StepResult

__all__ = ["QUANTITIES", "Quantity", "display_unit", "value_of"]


@dataclass(frozen=True)
class Quantity:
    """One limitable figure of a step.

    ``unit``: "s", "%" (of |step amplitude|, steady-state error: of the setpoint
    change), "rad/s", "feedback units", "feedback units x s" or "" (dimensionless).
    ``better``: which direction is an improvement ("lower", "higher", or ``None``).
    ``unreached``: a sentence for a step on which the figure is undefined because the
    response never got there (never rose, never settled): such a step fails a maximum;
    ``None`` when undefined just means "not measured"; ``missing`` then says why.
    ``short``: a label of at most 10 characters for narrow tables.
    """

    name: str
    label: str
    unit: str
    better: str | None
    get: Callable[[StepResult], float | None]
    unreached: str | None = None
    missing: str = "not defined for this step"
    short: str = ""  # a label for narrow tables; see :func:`short_label`


def _metric(name: str) -> Callable[[StepResult], float | None]:
    return lambda r: getattr(r.metrics, name)


def _magnitude(name: str) -> Callable[[StepResult], float | None]:
    def get(r: StepResult) -> float | None:
        x = getattr(r.metrics, name)
        return None if x is None else abs(x)
    return get


def _model(name: str) -> Callable[[StepResult], float | None]:
    return lambda r: None if r.model is None else getattr(r.model, name)


def _settling(r: StepResult) -> float | None:
    return r.metrics.settling_time if r.metrics.settled else None


_NO_SETPOINT = "needs the setpoint"
_NO_MODEL = "no model was fitted"


_SHORT = {"rise_time": "rise", "delay_time": "delay", "peak_time": "peak",
          "overshoot_pct": "overshoot", "undershoot_pct": "undershoot",
          "settling_time": "settling", "steady_state_error": "|SSE|",
          "steady_state_error_pct": "|SSE|", "iae": "IAE", "ise": "ISE", "itae": "ITAE",
          "zeta": "ζ", "wn": "ωn", "dead_time": "dead time", "gain": "gain", "fit_r2": "R²"}


def _table(*qs: Quantity) -> dict[str, Quantity]:
    return {q.name: replace(q, short=_SHORT[q.name]) for q in qs}


#: Every quantity a profile may limit, by name.
QUANTITIES: dict[str, Quantity] = _table(
    Quantity("rise_time", "rise time", "s", "lower", _metric("rise_time"),
             "the response never reached the upper rise level"),
    Quantity("delay_time", "delay time (to 50 %)", "s", "lower", _metric("delay_time"),
             "the response never reached half the step"),
    Quantity("peak_time", "peak time", "s", "lower", _metric("peak_time"),
             missing="the response has no overshoot peak"),
    Quantity("overshoot_pct", "overshoot", "%", "lower", _metric("overshoot_pct")),
    Quantity("undershoot_pct", "undershoot", "%", "lower", _metric("undershoot_pct")),
    Quantity("settling_time", "settling time", "s", "lower", _settling,
             "the response never settled inside the band"),
    Quantity("steady_state_error", "steady-state error (magnitude)", "feedback units",
             "lower", _magnitude("steady_state_error"), missing=_NO_SETPOINT),
    Quantity("steady_state_error_pct", "steady-state error (magnitude)", "%", "lower",
             _magnitude("steady_state_error_pct"), missing=_NO_SETPOINT),
    Quantity("iae", "IAE", "feedback units x s", "lower", _metric("iae"),
             missing=_NO_SETPOINT),
    Quantity("ise", "ISE", "feedback units^2 x s", "lower", _metric("ise"),
             missing=_NO_SETPOINT),
    Quantity("itae", "ITAE", "feedback units x s^2", "lower", _metric("itae"),
             missing=_NO_SETPOINT),
    Quantity("zeta", "damping ratio (model)", "", None, _model("zeta"),
             missing=_NO_MODEL),
    Quantity("wn", "natural frequency (model)", "rad/s", "higher", _model("wn"),
             missing=_NO_MODEL),
    Quantity("dead_time", "dead time (model)", "s", "lower", _model("dead_time"),
             missing=_NO_MODEL),
    Quantity("gain", "steady-state gain (model)", "", None, _model("gain"),
             missing=_NO_MODEL),
    Quantity("fit_r2", "model fit R^2", "", "higher", _model("fit_r2"),
             missing=_NO_MODEL),
)


def display_unit(name: str) -> tuple[float, str]:
    """(factor, unit) tables and plots show the quantity in: seconds as milliseconds, the
    rest in their own unit."""
    unit = QUANTITIES[name].unit
    return (1e3, "ms") if unit == "s" else (1.0, unit)


def value_of(result: StepResult, name: str) -> float | None:
    """The quantity ``name`` of one step in its unit; ``None`` where undefined."""
    return QUANTITIES[name].get(result)
