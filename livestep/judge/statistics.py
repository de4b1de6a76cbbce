"""Summary statistics of a session's steps, over all steps and per group, with Cpk.

For every quantity of :data:`livestep.judge.quantities.QUANTITIES`: the count of steps on
which it is defined, mean, sample standard deviation (``ddof=1``, the n - 1
denominator), minimum and maximum, in the quantity's unit, and where a tolerance
profile limits it, the process capability index

    Cpk = min(USL - mean, mean - LSL) / (3 s)

with both limits, or the one-sided Cpu = (USL - mean) / (3 s) or
Cpl = (mean - LSL) / (3 s) with one (common practice in production test; the
NIST/SEMATECH e-Handbook of Statistical Methods, section 6.1.6, gives these
definitions; cited from memory). s is the sample standard deviation.

Cpk is not computed (``None``, with the reason in ``cpk_note``) from fewer than
:data:`CPK_MIN_COUNT` = 30 values: an index from a handful of steps is mostly
noise. 30 is a rule of thumb of capability studies (common practice, no source);
even at 30 the estimate is loose: Bissell's normal approximation of its standard
error, sqrt(1 / (9 n) + Cpk^2 / (2 (n - 1))) (Applied Statistics 39, 1990, from
memory), puts the 95 % interval of a Cpk of 1.33 at about +-0.36 for n = 30 and
+-0.73 for n = 8. Nor is it computed with s = 0, without a limit, or for a group
whose steps have different limits on the quantity. It describes the spread of
these steps only: the usual reading (1.33 or more is capable) assumes a stable,
roughly normal process.

Groups: ``all``; ``direction`` (up, down); ``size``, the decade of the step
size |setpoint change| (the feedback amplitude without a setpoint), in setpoint
units, e.g. ``1-10`` for sizes from 1 up to (not including) 10, so sessions of the
same axis fall into the same classes; ``tag``, each value of each note name
active at the steps (``gains=A``). A step's limits are those the profile applies
to it (:meth:`~livestep.judge.profile.Profile.limits_for`); a group whose steps have
different limits on a quantity gets no Cpk for it. Pure: no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from livestep.judge.profile import Profile, step_size
from livestep.judge.quantities import QUANTITIES
from livestep.steps.analysis import StepResult

__all__ = ["CPK_MIN_COUNT", "GROUPINGS", "GroupStats", "MetricStats", "capability",
           "metric_stats", "session_statistics", "size_class"]

#: The groupings :func:`session_statistics` knows, besides ``all``.
GROUPINGS = ("direction", "size", "tag")
#: The fewest values Cpk is computed from (a rule of thumb; see the module docstring).
CPK_MIN_COUNT = 30
#: Why Cpk was not computed (``MetricStats.cpk_note``); the count one is formatted.
NOTE_NO_LIMIT = "no limit"
NOTE_LIMITS_DIFFER = "limits differ between steps"
NOTE_NO_SPREAD = "s = 0"
NOTE_TOO_FEW = "n < {min_count}"


@dataclass(frozen=True)
class MetricStats:
    """Statistics of one quantity over a group of steps, in the quantity's unit.

    ``count``: steps on which it is defined; ``missing``: steps on which it is not
    (never settled, no model...); ``std``: sample standard deviation (ddof = 1),
    ``None`` below 2 values; ``low``/``high``: the limits ``cpk`` is against
    (``None`` when absent); ``cpk``: Cpk, Cpu or Cpl (see the module docstring);
    ``cpk_note``: why ``cpk`` is ``None`` ("no limit", "limits differ between steps",
    "n < 30", "s = 0"; empty when computed); ``limits_differ``: the group's steps have
    different limits on the quantity (through ``[[when]]`` sections), so
    ``low``/``high`` are ``None``.
    """

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
    cpk_note: str = ""
    limits_differ: bool = False


@dataclass(frozen=True)
class GroupStats:
    """Statistics of a group of steps: ``by`` the grouping (``all``, ``direction``,
    ``size`` or ``tag``), ``key`` the group (``all``, ``up``, ``1-10``, ``gains=A``),
    ``steps`` its step indices."""

    by: str
    key: str
    steps: tuple[int, ...]
    metrics: tuple[MetricStats, ...]

    def get(self, quantity: str) -> MetricStats | None:
        return next((m for m in self.metrics if m.quantity == quantity), None)


def capability(mean: float, std: float | None, low: float | None,
               high: float | None) -> float | None:
    """Cpk = min(high - mean, mean - low) / (3 std), or the one-sided index with one limit;
    ``None`` without a limit, without ``std`` or with ``std == 0``."""
    if std is None or not std > 0 or (low is None and high is None):
        return None
    sides = [d for d in (None if high is None else high - mean,
                         None if low is None else mean - low) if d is not None]
    return min(sides) / (3.0 * std)


def _cpk_note(n: int, std: float | None, low: float | None, high: float | None,
              limits_differ: bool, min_count: int) -> str:
    """Why Cpk is not computed, or "" when it is."""
    if limits_differ:
        return NOTE_LIMITS_DIFFER
    if low is None and high is None:
        return NOTE_NO_LIMIT
    if n < max(min_count, 2):
        return NOTE_TOO_FEW.format(min_count=max(min_count, 2))
    if std is None or not std > 0:
        return NOTE_NO_SPREAD
    return ""


def metric_stats(quantity: str, values: Iterable[float | None], low: float | None = None,
                 high: float | None = None, *, min_count: int = CPK_MIN_COUNT,
                 limits_differ: bool = False) -> MetricStats:
    """Statistics of ``values`` (``None`` and non-finite values are counted as missing);
    Cpk against ``low``/``high`` from ``min_count`` values on (at least 2).
    ``limits_differ``: the values were judged against different limits (no Cpk)."""
    raw = list(values)
    kept = [float(v) for v in raw if v is not None and math.isfinite(v)]
    n = len(kept)
    if limits_differ:
        low = high = None
    note = _cpk_note(n, None, low, high, limits_differ, min_count)
    if n <= 1:  # (a tag that is new at every step has a group per step: no numpy there)
        v = kept[0] if kept else None
        return MetricStats(quantity, n, len(raw) - n, v, None, v, v, low, high, None,
                           note, limits_differ)
    x = np.array(kept)
    mean = float(np.mean(x))
    std = float(np.std(x, ddof=1))
    note = _cpk_note(n, std, low, high, limits_differ, min_count)
    cpk = None if note else capability(mean, std, low, high)
    return MetricStats(quantity, n, len(raw) - n, mean, std, float(np.min(x)), float(np.max(x)),
                       low, high, cpk, note, limits_differ)


def size_class(result: StepResult) -> str:
    """The decade of the step size, ``"1-10"`` for 1 <= size < 10 (setpoint units)."""
    size = step_size(result)
    if not size > 0:
        return "0"
    k = math.floor(math.log10(size))
    return f"{10.0 ** k:g}-{10.0 ** (k + 1):g}"


def _group_keys(result: StepResult, by: str) -> list[str]:
    if by == "direction":
        return [result.metrics.direction]
    if by == "size":
        return [size_class(result)]
    if by == "tag":
        return [f"{name}={value}" for name, value in result.tags]
    raise ValueError(f"unknown grouping {by!r}; use one of {', '.join(GROUPINGS)}")


def _sort_key(by: str, key: str) -> tuple[float, str]:
    if by == "direction":
        return (0.0 if key == "up" else 1.0, key)
    if by == "size":
        return (float(key.split("-")[0]), key)
    return (0.0, key)


_Bounds = dict[str, tuple[float | None, float | None]]  # quantity -> (low, high)


def _limits(bounds: Sequence[_Bounds], quantity: str) -> tuple[float | None, float | None,
                                                             bool]:
    """The limits every step of the group shares on ``quantity``, and whether they
    differ between its steps (then ``None, None, True``)."""
    found = {b.get(quantity, (None, None)) for b in bounds}
    if len(found) > 1:
        return None, None, True
    low, high = found.pop() if found else (None, None)
    return low, high, False


def _group(by: str, key: str, results: Sequence[StepResult], names: Sequence[str],
           limits: dict[int, _Bounds] | None, min_count: int) -> GroupStats:
    bounds = [limits[r.index] for r in results] if limits is not None else []
    metrics = []
    for q in names:
        low, high, differ = _limits(bounds, q)
        metrics.append(metric_stats(q, (QUANTITIES[q].get(r) for r in results), low, high,
                                    min_count=min_count, limits_differ=differ))
    return GroupStats(by, key, tuple(r.index for r in results), tuple(metrics))


def session_statistics(results: Sequence[StepResult], profile: Profile | None = None,
                       group_by: Sequence[str] = GROUPINGS, *,
                       min_count: int = CPK_MIN_COUNT) -> tuple[GroupStats, ...]:
    """``all`` first, then each grouping of ``group_by`` in order, its groups sorted (up
    before down, sizes ascending, tags by name and value). Only quantities defined on
    at least one step are listed, in :data:`QUANTITIES` order, the same in every group.
    Cpk needs ``min_count`` values (default :data:`CPK_MIN_COUNT`)."""
    names = [q for q, spec in QUANTITIES.items() if any(spec.get(r) is not None
                                                        for r in results)]
    limits = None if profile is None else {  # each step's limits, looked up once
        r.index: {lim.quantity: (lim.low, lim.high) for lim in profile.limits_for(r)}
        for r in results}
    out = [_group("all", "all", results, names, limits, min_count)]
    for by in group_by:
        groups: dict[str, list[StepResult]] = {}
        for r in results:
            for key in _group_keys(r, by):
                groups.setdefault(key, []).append(r)
        for key in sorted(groups, key=lambda k: _sort_key(by, k)):
            out.append(_group(by, key, groups[key], names, limits, min_count))
    return tuple(out)
