"""Gain suggestions from a session's own steps: trends across gain sets (any controller)
and, with a declared controller, an identified plant and searched gains.

:func:`suggest` is the one entry point the command line, the live view and the demo use.
A suggestion is information only: nothing here (or anywhere in livestep) sends gains to a
controller; see :data:`CAUTIONS`.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from livestep.judge.profile import Profile
from livestep.judge.quantities import value_of
from livestep.steps.analysis import StepResult
from livestep.tuning.controller import ControllerSpec
from livestep.tuning.identify import Identification, identify
from livestep.tuning.records import gain_sets, records_of, saturation
from livestep.tuning.search import Prediction, predict, search_gains, search_space
from livestep.tuning.trend import Trend, trends

__all__ = ["CAUTIONS", "Suggestion", "suggest"]

#: Shown with every suggestion, wherever it is shown.
CAUTIONS = (
    "A suggestion comes from a model fitted to a few steps: it holds only near the"
    " conditions measured (step size, load, no saturation).",
    "Nothing has been sent to the controller. Try new gains first with a small step,"
    " guards in place, the emergency stop within reach and the drive's own limits set in"
    " the drive; the machine's qualified people and local rules decide.",
)

#: The figures compared between prediction and measurement.
COMPARED = ("rise_time", "overshoot_pct", "settling_time")


@dataclass(frozen=True)
class Suggestion:
    """Everything :func:`suggest` found. ``gain_sets``: (gains, number of steps) in order of
    first appearance; ``excluded``: (step number, reason) of steps left out of
    identification; ``checks``: the model's predictions for the measured gain sets, with
    the measured means (quantity -> (measured mean, predicted)); ``suggested``: the gains
    found, or ``None``; ``notes``: why something is missing, one sentence each."""

    names: tuple[str, ...]
    gain_sets: tuple[tuple[tuple[float, ...], int], ...]
    trends: tuple[Trend, ...]
    controller: ControllerSpec | None = None
    identification: Identification | None = None
    excluded: tuple[tuple[int, str], ...] = ()
    checks: tuple[tuple[Prediction, dict[str, tuple[float | None, float | None]]], ...] = ()
    suggested: Prediction | None = None
    amplitude: float | None = None
    sample_period: float | None = None
    notes: tuple[str, ...] = field(default=())
    cautions: tuple[str, ...] = CAUTIONS


def _sample_period(results: Sequence[StepResult]) -> float:
    dts = [float(np.median(np.diff(r.window.t))) for r in results
           if r.window is not None and len(r.window.t) > 2]
    return float(np.median(dts)) if dts else math.nan


def suggest(results: Sequence[StepResult], profile: Profile,
            controller: ControllerSpec | None = None,
            names: Sequence[str] = ("kp", "ki", "kd"), *,
            output: tuple[np.ndarray, np.ndarray] | None = None,
            span: float = 0.6) -> Suggestion:
    """Trends, and with ``controller`` an identified model and suggested gains. ``results``
    must carry their windows (``AnalysisSettings.keep_windows``) for the model; ``output``:
    (times, values) of a recorded controller output channel, if any."""
    names = tuple(names)
    sets = gain_sets(results, names)
    base = dict(names=names, gain_sets=tuple((g, len(s)) for g, s in sets.items()),
                trends=tuple(trends(results, profile, names)))
    notes: list[str] = []
    if not sets:
        notes.append(f"no step carries the gain notes {', '.join(names)}: nothing to trend")
    if controller is None:
        notes.append("no [controller] section: trends only, no model-based suggestion")
        return Suggestion(**base, notes=tuple(notes))
    records = records_of(results, names, span=span, output=output)
    excluded = []
    kept = []
    for rec in records:
        why = saturation(rec, controller)
        if why is None:
            kept.append(rec)
        else:
            excluded.append((rec.index, f"left out of identification: {why}"))
    period = _sample_period(results)
    amps = [abs(r.amplitude) for r in kept]
    amplitude = float(np.median(amps)) if amps else None
    common = dict(controller=controller, excluded=tuple(excluded), amplitude=amplitude,
                  sample_period=period)
    n_sets = len({r.gains for r in kept})
    if n_sets < 2:
        notes.append(f"not identifiable: steps under {n_sets} gain set"
                     f"{'s' if n_sets != 1 else ''} without saturation; a model needs two"
                     " or more")
        return Suggestion(**base, **common, notes=tuple(notes))
    try:
        ident = identify(kept, controller)
    except (ValueError, np.linalg.LinAlgError, FloatingPointError) as exc:
        notes.append(f"not identifiable: {exc}")
        return Suggestion(**base, **common, notes=tuple(notes))
    assert amplitude is not None
    measured = [g for g in sets if any(r.gains == g for r in kept)]
    preds = predict(ident, controller, profile, [g[:3] for g in measured],
                    amplitude=amplitude, sample_period=period, span=span)
    checks = []
    for g, pred in zip(measured, preds, strict=True):
        steps = sets[g]
        cmp: dict[str, tuple[float | None, float | None]] = {}
        for q in COMPARED:
            vals = [v for r in steps if (v := value_of(r, q)) is not None]
            cmp[q] = (float(np.mean(vals)) if vals else None, pred.figures.get(q))
        checks.append((pred, cmp))
    space = search_space([g[:3] for g in measured], controller)
    best = search_gains(ident, controller, profile, space, amplitude=amplitude,
                        sample_period=period, span=span)
    if best is None:
        notes.append("no gains inside the search range meet every limit with margin on"
                     " the model: widen [controller.limits] or relax the profile")
    return Suggestion(**base, **common, identification=ident, checks=tuple(checks),
                      suggested=best, notes=tuple(notes))
