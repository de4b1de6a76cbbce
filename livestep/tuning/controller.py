"""The ``[controller]`` section: the control law the firmware runs, declared by the user.

It may sit in the tolerance profile or the plan (any TOML file given to ``suggest``)::

    [controller]
    law = "pid"                 # u = kp e + ki integral(e) dt - kd d(y)/dt (parallel form)
    rate = 5000                 # Hz, the loop runs once per period
    derivative = "measurement"  # or "error": what the derivative term differentiates
    derivative_filter = 400     # Hz, first-order filter of the derivative term (0: none)
    output_limit = 250          # the output is clipped to +-this (output units, e.g. N)
    delay = 1                   # loop periods between reading the feedback and applying
                                #  the output computed from it (computation delay)
    plant = "position"          # "position" (the output drives a mass: an integrating loop),
                                #  "process" (self-regulating: first or second order) or
                                #  "auto" (any of them)
    output_unit = "N"           # for display only
    [controller.limits]         # suggestions never leave these (gain units as the notes)
    kp = { min = 5, max = 40 }
    kd = { min = 0.05, max = 0.6 }

The gains are read from each step's notes ``kp``, ``ki``, ``kd`` (the controller echoes
them, or the plan's gain sets carry them); ``ki`` is in output units per (feedback unit x
s), ``kd`` in output units x s per feedback unit. While the output is clipped the integral
does not grow (conditional integration). Pure: dicts in, a frozen dataclass out.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from livestep.errors import InputError

__all__ = ["GAIN_NAMES", "ControllerSpec", "parse_controller"]

#: The gains of the PID law, in the order the simulation takes them.
GAIN_NAMES = ("kp", "ki", "kd")

_KEYS = {"law", "rate", "derivative", "derivative_filter", "output_limit", "delay", "plant",
         "output_unit", "limits"}


@dataclass(frozen=True)
class ControllerSpec:
    """A declared discrete PID loop. ``rate`` (Hz), ``derivative`` ("measurement" or
    "error"), ``derivative_filter`` (Hz, 0 for none), ``output_limit`` (output units,
    ``inf`` for none), ``delay`` (whole loop periods), ``plant`` ("position", "process",
    "auto"), ``limits``: gain name -> (low, high), either side ``None`` when not given."""

    rate: float
    derivative: str = "measurement"
    derivative_filter: float = 0.0
    output_limit: float = math.inf
    delay: int = 0
    plant: str = "auto"
    output_unit: str = ""
    limits: dict[str, tuple[float | None, float | None]] = field(default_factory=dict)
    source: str = "[controller]"

    @property
    def period(self) -> float:
        """Loop period, s."""
        return 1.0 / self.rate

    def bounds(self, name: str) -> tuple[float | None, float | None]:
        """The declared (low, high) of a gain; (None, None) when it is not limited."""
        return self.limits.get(name, (None, None))


def _fail(source: str, key: str, message: str) -> InputError:
    return InputError(f"[controller] {key}: {message}", source=source)


def _number(x: Any, source: str, key: str, *, low: float = -math.inf) -> float:
    if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
        raise _fail(source, key, f"expected a number, got {x!r}")
    if x < low:
        raise _fail(source, key, f"expected a number >= {low:g}, got {x!r}")
    return float(x)


def parse_controller(doc: dict[str, Any], source: str = "<controller>") -> ControllerSpec | None:
    """The ``[controller]`` section of a parsed TOML document, or ``None`` when there is
    none; :class:`InputError` (one line naming the key) on any mistake."""
    sec = doc.get("controller")
    if sec is None:
        return None
    if not isinstance(sec, dict):
        raise InputError("[controller] must be a table", source=source)
    for key in sec:
        if key not in _KEYS:
            raise _fail(source, key, f"unknown key (expected one of {', '.join(sorted(_KEYS))})")
    law = sec.get("law", "pid")
    if law != "pid":
        raise _fail(source, "law", f"only \"pid\" is known, got {law!r}")
    if "rate" not in sec:
        raise _fail(source, "rate", "missing: the loop rate in Hz")
    rate = _number(sec["rate"], source, "rate", low=0.0)
    if rate == 0:
        raise _fail(source, "rate", "expected a positive loop rate")
    derivative = sec.get("derivative", "measurement")
    if derivative not in ("measurement", "error"):
        raise _fail(source, "derivative", f"expected \"measurement\" or \"error\", got"
                    f" {derivative!r}")
    plant = sec.get("plant", "auto")
    if plant not in ("position", "process", "auto"):
        raise _fail(source, "plant", f"expected \"position\", \"process\" or \"auto\", got"
                    f" {plant!r}")
    delay = sec.get("delay", 0)
    if isinstance(delay, bool) or not isinstance(delay, int) or not 0 <= delay <= 100:
        raise _fail(source, "delay", f"expected a whole number of loop periods 0..100, got"
                    f" {delay!r}")
    unit = sec.get("output_unit", "")
    if not isinstance(unit, str) or len(unit) > 12 or not unit.isprintable():
        raise _fail(source, "output_unit", f"expected a short unit name, got {unit!r}")
    limits: dict[str, tuple[float | None, float | None]] = {}
    raw = sec.get("limits", {})
    if not isinstance(raw, dict):
        raise _fail(source, "limits", "expected a table of gains")
    for name, spec in raw.items():
        if name not in GAIN_NAMES:
            raise _fail(source, f"limits.{name}", f"unknown gain (expected one of"
                        f" {', '.join(GAIN_NAMES)})")
        if not isinstance(spec, dict) or not spec or set(spec) - {"min", "max"}:
            raise _fail(source, f"limits.{name}", "expected { min = .., max = .. }")
        lo = _number(spec["min"], source, f"limits.{name}.min", low=0.0) \
            if "min" in spec else None
        hi = _number(spec["max"], source, f"limits.{name}.max", low=0.0) \
            if "max" in spec else None
        if lo is not None and hi is not None and lo > hi:
            raise _fail(source, f"limits.{name}", f"min {lo:g} is greater than max {hi:g}")
        limits[name] = (lo, hi)
    limit = _number(sec["output_limit"], source, "output_limit", low=0.0) \
        if "output_limit" in sec else math.inf
    if limit == 0:
        raise _fail(source, "output_limit", "expected a positive limit")
    return ControllerSpec(
        rate=rate, derivative=derivative,
        derivative_filter=_number(sec.get("derivative_filter", 0.0), source,
                                  "derivative_filter", low=0.0),
        output_limit=limit, delay=delay, plant=plant, output_unit=unit, limits=limits,
        source=source)
