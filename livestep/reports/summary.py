"""What the report summarises: which quantities it shows, and their statistics per group.

STAND-IN: :class:`MetricStats`, :class:`GroupStats`, :func:`metric_stats` and
:func:`session_statistics` are a small local computation with the interface of
``livestep.statistics``, kept until that module is on main; the report should then
import them from there (this module keeping :func:`report_quantities`,
:func:`display_unit` and :func:`cp`).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from livestep.analysis import StepResult
from livestep.profile import Profile
from livestep.quantities import QUANTITIES

__all__ = ["DEFAULT_QUANTITIES", "GroupStats", "MetricStats", "cp", "display_unit", "metric_stats",
           "report_quantities", "session_statistics"]

#: Shown in every report, after the quantities the profile limits.
DEFAULT_QUANTITIES = ("rise_time", "overshoot_pct", "settling_time", "steady_state_error_pct",
                      "iae", "zeta", "wn", "dead_time", "fit_r2")


def display_unit(quantity: str) -> tuple[float, str]:
    """(factor, unit) a report shows the quantity in: seconds as milliseconds, the rest in
    their own unit."""
    unit = QUANTITIES[quantity].unit
    return (1e3, "ms") if unit == "s" else (1.0, unit)


def report_quantities(results: Sequence[StepResult], profile: Profile | None) -> list[str]:
    """The profile's limited quantities (base limits, then those only ``[[when]]``
    sections limit), then :data:`DEFAULT_QUANTITIES`; only those some step defines
    or a limit names."""
    names: list[str] = []
    if profile is not None:
        names += [lim.quantity for lim in profile.all_limits()]
        names += [lim.quantity for rule in profile.rules for lim in rule.limits]
    limited = set(names)
    names += DEFAULT_QUANTITIES
    seen: list[str] = []
    for n in names:
        if n in seen:
            continue
        if n in limited or any(QUANTITIES[n].get(r) is not None for r in results):
            seen.append(n)
    return seen


@dataclass(frozen=True)
class MetricStats:
    """Statistics of one quantity over a group of steps, in the quantity's unit.

    ``count``: steps on which it is defined, ``missing``: steps on which it is not;
    ``std``: sample standard deviation (n - 1), ``None`` below two values;
    ``low``/``high``: the limits ``cpk`` is against; ``cpk`` = min(USL - mean,
    mean - LSL) / 3 s, the one side alone when only one limit is set (ISO 22514-2;
    AIAG SPC manual; from memory), ``None`` without limits, below two values or with
    s = 0. With s the overall standard deviation of individual steps and no
    subgroups, AIAG would call it Ppk."""

    quantity: str
    count: int
    missing: int
    mean: float | None
    std: float | None
    min: float | None
    max: float | None
    low: float | None = None
    high: float | None = None
    cpk: float | None = None



@dataclass(frozen=True)
class GroupStats:
    """A group of steps: ``by`` its grouping (``all``, ``direction``, ``tag``), ``key``
    the group (``all``, ``up``, ``gains=soft``), ``steps`` their indices."""

    by: str
    key: str
    steps: tuple[int, ...]
    metrics: tuple[MetricStats, ...]

    def get(self, quantity: str) -> MetricStats | None:
        return next((m for m in self.metrics if m.quantity == quantity), None)


def metric_stats(quantity: str, values: Iterable[float | None], low: float | None = None,
                 high: float | None = None) -> MetricStats:
    """Statistics of ``values`` (``None`` and non-finite ones count as missing) against
    the limits ``low`` and ``high`` (either may be ``None``)."""
    raw = list(values)
    x = np.array([v for v in raw if v is not None and math.isfinite(v)], dtype=float)
    n = int(x.size)
    if n == 0:
        return MetricStats(quantity, 0, len(raw), None, None, None, None, low, high)
    mean = float(x.mean())
    std = float(x.std(ddof=1)) if n > 1 else None
    cpk = None
    if std and (low is not None or high is not None):
        cpk = min(d for d in ((None if high is None else high - mean),
                              (None if low is None else mean - low)) if d is not None)
        cpk /= 3.0 * std
    return MetricStats(quantity, n, len(raw) - n, mean, std, float(x.min()), float(x.max()),
                       low, high, cpk)


def cp(s: MetricStats) -> float | None:
    """Cp = (USL - LSL) / 6 s with both limits (ISO 22514-2; from memory), else ``None``."""
    if s.low is None or s.high is None or not s.std:
        return None
    return (s.high - s.low) / (6.0 * s.std)


def _shared_limits(results: Sequence[StepResult], profile: Profile | None,
                   quantity: str) -> tuple[float | None, float | None]:
    """The limits every step of a group has on ``quantity``; none when they differ."""
    if profile is None:
        return None, None
    found = set()
    for r in results:
        lim = next((x for x in profile.limits_for(r) if x.quantity == quantity), None)
        found.add((None, None) if lim is None else (lim.low, lim.high))
    return found.pop() if len(found) == 1 else (None, None)


def _keys(r: StepResult, by: str) -> list[str]:
    return [r.metrics.direction] if by == "direction" else [f"{k}={v}" for k, v in r.tags]


def session_statistics(results: Sequence[StepResult], profile: Profile | None = None,
                       group_by: Sequence[str] = ("direction", "tag"),
                       quantities: Sequence[str] | None = None) -> tuple[GroupStats, ...]:
    """Statistics of each quantity (default: every one some step defines) over all
    steps, then per direction (up first) and per tag ``name=value``; a step's limits
    are those ``profile`` applies to it."""
    names = list(quantities) if quantities is not None else [
        q for q, spec in QUANTITIES.items() if any(spec.get(r) is not None for r in results)]
    groups: list[tuple[str, str, list[StepResult]]] = [("all", "all", list(results))]
    for by in group_by:
        members: dict[str, list[StepResult]] = {}
        for r in results:
            for key in _keys(r, by):
                members.setdefault(key, []).append(r)
        order = sorted(members, key=lambda k: (k != "up", k))
        groups += [(by, key, members[key]) for key in order]
    return tuple(
        GroupStats(by, key, tuple(r.index for r in rs), tuple(
            metric_stats(q, (QUANTITIES[q].get(r) for r in rs), *_shared_limits(rs, profile, q))
            for q in names))
        for by, key, rs in groups)
