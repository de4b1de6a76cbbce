"""Step results as CSV rows: ``analyze --csv``.

One row per step with the JSON document's step fields (:mod:`livestep.reports.tables`),
the model's, the warnings, one column per note name and, judged, the verdict. Floats are
written to the resolution the measurement has (times to a hundredth of the sample
period, levels to 1e-5 of the amplitude, the rest to 6 significant digits), booleans as
``true``/``false``: README "CSV rows".
"""

from __future__ import annotations

import csv
import math
from collections.abc import Sequence
from typing import IO, Any

from livestep.judge.verdict import StepVerdict
from livestep.reports.tables import MODEL_FIELDS, STEP_FIELDS, step_record
from livestep.steps.analysis import StepResult

__all__ = ["CSV_DIGITS", "CSV_LEVEL_COLUMNS", "CSV_TIME_COLUMNS", "TAG_PREFIX", "csv_number",
           "csv_tag_names", "level_decimals", "time_decimals", "write_csv"]

#: CSV columns in seconds: written to a hundredth of the step's sample period.
CSV_TIME_COLUMNS = frozenset({"t_step", "rise_time", "delay_time", "peak_time", "settling_time",
                              "sample_period", "model_dead_time",
                              "model_settling_time_estimate"})
#: CSV columns in setpoint or feedback units: written to 1e-5 of the step's amplitude.
CSV_LEVEL_COLUMNS = frozenset({"setpoint_before", "setpoint_after", "initial", "final",
                               "amplitude", "peak", "steady_state_error", "noise_sigma"})
#: Significant digits of every other CSV float (percentages, ratios, model parameters).
CSV_DIGITS = 6
#: Prefix of the CSV columns that hold the steps' tags, one column per note name.
TAG_PREFIX = "tag_"


def _fixed(x: float, decimals: int) -> str:
    """``x`` with at most ``decimals`` decimals, trailing zeros dropped, never "-0"."""
    text = f"{x:.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def time_decimals(sample_period: float) -> int:
    """Decimals of a time in seconds: a hundredth of the sample period, rounded down to a
    power of ten (2 kHz: 6, to the microsecond; 20 kHz: 7)."""
    if not (math.isfinite(sample_period) and sample_period > 0):
        return 9
    return min(12, max(0, -math.floor(math.log10(sample_period / 100.0))))


def level_decimals(amplitude: float) -> int | None:
    """Decimals of a level: 1e-5 of |amplitude| rounded down to a power of ten (amplitude
    50: 4 decimals); ``None`` (significant digits instead) without an amplitude."""
    if not (math.isfinite(amplitude) and amplitude != 0):
        return None
    return min(12, max(0, 5 - math.floor(math.log10(abs(amplitude)))))


def csv_number(x: float, column: str, *, sample_period: float, amplitude: float) -> str:
    """One float as the CSV writes it (see :func:`write_csv`)."""
    if not math.isfinite(x):
        return ""
    if column in CSV_TIME_COLUMNS:
        return _fixed(x, time_decimals(sample_period))
    decimals = level_decimals(amplitude) if column in CSV_LEVEL_COLUMNS else None
    if decimals is not None:
        return _fixed(x, decimals)
    text = format(x, f".{CSV_DIGITS}g")
    return "0" if text == "-0" else text


def _csv_cell(x: Any, column: str, m: Any) -> str:
    if x is None:
        return ""
    if isinstance(x, bool):
        return "true" if x else "false"
    if isinstance(x, float):
        return csv_number(x, column, sample_period=m.sample_period, amplitude=m.amplitude)
    return str(x)


def csv_tag_names(results: Sequence[StepResult]) -> list[str]:
    """The note names the steps carry, in order of first appearance."""
    return list(dict.fromkeys(name for r in results for name, _ in r.tags))


def write_csv(results: Sequence[StepResult], out: IO[str],
              verdicts: Sequence[StepVerdict] | None = None) -> None:
    """One row per step (RFC 4180 quoting): the step fields of the JSON document, model
    values as ``model_<name>``, warnings joined by ``; ``, then one ``tag_<name>`` column
    per note name the steps carry (the value, empty where a step does not carry it); with
    verdicts, a ``verdict`` column and ``failed`` (the quantities that failed, space
    separated). Empty cells are undefined values; booleans are ``true``/``false``.
    Floats are written to the resolution the measurement has, without float noise:
    times (seconds) to a hundredth of the step's sample period, levels to 1e-5 of its
    amplitude, everything else to :data:`CSV_DIGITS` significant digits."""
    w = csv.writer(out, lineterminator="\n")
    tag_names = csv_tag_names(results)
    extra = ["verdict", "failed"] if verdicts is not None else []
    w.writerow([*STEP_FIELDS, *(f"model_{k}" for k in MODEL_FIELDS), "warnings",
                *(TAG_PREFIX + name for name in tag_names), *extra])
    for i, r in enumerate(results):
        rec, m = step_record(r), r.metrics
        model = rec["model"] or {}
        tags = dict(r.tags)
        row = [*(_csv_cell(rec[k], k, m) for k in STEP_FIELDS),
               *(_csv_cell(model.get(k), f"model_{k}", m) for k in MODEL_FIELDS),
               "; ".join(rec["warnings"]), *(tags.get(name, "") for name in tag_names)]
        if verdicts is not None:
            row += [verdicts[i].verdict, " ".join(c.quantity for c in verdicts[i].failed())]
        w.writerow(row)
