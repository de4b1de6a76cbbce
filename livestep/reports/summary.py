"""What the report summarises: which quantities it shows, and their statistics per group.

STAND-IN: :func:`group_statistics` is a small local computation kept until
``livestep.statistics`` (``session_statistics``) is on main; the report should then
take its figures from there.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from livestep.analysis import StepResult
from livestep.profile import Limit, Profile
from livestep.quantities import QUANTITIES

__all__ = ["DEFAULT_QUANTITIES", "GroupStats", "MetricStats", "display_unit",
           "group_statistics", "metric_stats", "report_quantities"]

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

    ``std``: sample standard deviation (n - 1), ``None`` below two values. ``cp`` =
    (USL - LSL) / 6 s and ``cpk`` = min(USL - mean, mean - LSL) / 3 s, the one side
    alone when only one limit is set (ISO 22514-2; AIAG SPC manual; from memory).
    With s the overall standard deviation of individual steps and no subgroups, AIAG
    would call these Pp and Ppk. ``None`` without limits (in a group: when its steps do
    not all have the same limits) or with fewer than two values."""

    count: int
    mean: float | None
    std: float | None
    min: float | None
    max: float | None
    low: float | None
    high: float | None
    cp: float | None
    cpk: float | None


@dataclass(frozen=True)
class GroupStats:
    """One group of steps ("all steps", "up", "gains=soft"...) and its statistics."""

    name: str
    count: int
    stats: dict[str, MetricStats]


def metric_stats(values: Sequence[float], low: float | None = None,
                 high: float | None = None) -> MetricStats:
    """Statistics of some values of one quantity and their capability against the limits
    ``low`` and ``high`` (either may be ``None``)."""
    n = len(values)
    if n == 0:
        return MetricStats(0, None, None, None, None, low, high, None, None)
    x = np.asarray(values, dtype=float)
    mean = float(x.mean())
    std = float(x.std(ddof=1)) if n > 1 else None
    cp = cpk = None
    if std is not None and std > 0 and (low is not None or high is not None):
        cpk = min(d for d in ((None if high is None else high - mean),
                              (None if low is None else mean - low)) if d is not None)
        cpk /= 3.0 * std
        if low is not None and high is not None:
            cp = (high - low) / (6.0 * std)
    return MetricStats(n, mean, std, float(x.min()), float(x.max()), low, high, cp, cpk)


def group_statistics(results: Sequence[StepResult], quantities: Sequence[str],
                     limits_of: Callable[[StepResult], tuple[Limit, ...]] | None = None
                     ) -> list[GroupStats]:
    """Statistics of each quantity over all steps, then per direction and per tag
    (``name=value``) when there is more than one such group. ``limits_of`` gives a
    step's limits (``Profile.limits_for``) for the capability indices."""
    groups: list[tuple[str, list[StepResult]]] = [("all steps", list(results))]
    for label, key in (("direction", lambda r: [r.metrics.direction]),
                       ("tag", lambda r: [f"{k}={v}" for k, v in r.tags])):
        names: dict[str, list[StepResult]] = {}
        for r in results:
            for name in key(r):
                names.setdefault(name, []).append(r)
        if len(names) > 1 or (label == "tag" and names):
            groups += sorted(names.items())
    out = []
    for name, members in groups:
        stats = {}
        for q in quantities:
            values, limits = [], set()
            for r in members:
                v = QUANTITIES[q].get(r)
                if v is None or not math.isfinite(v):
                    continue
                values.append(v)
                lim = next((x for x in limits_of(r) if x.quantity == q), None) \
                    if limits_of else None
                limits.add((lim.low, lim.high) if lim else (None, None))
            # One set of limits for the whole group, or none (no capability indices).
            low, high = next(iter(limits)) if len(limits) == 1 else (None, None)
            stats[q] = metric_stats(values, low, high)
        out.append(GroupStats(name, len(members), stats))
    return out
