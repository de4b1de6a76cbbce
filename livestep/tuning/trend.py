"""How each limited quantity moves with a gain, across the session's gain sets; any
controller, no model.

For every gain that took two values or more while the other gains stayed equal (a
"family" of gain sets), each quantity the profile limits is averaged per gain set (mean and
sample standard deviation of its steps) and a low-order polynomial in the gain is fitted
to the means (a line through two or three gain sets, a parabola through more). The gain at
which the fit meets the limit (and the limit tightened by its warning margin) is solved
for and said in words, marked as extrapolated when it lies outside the measured gains.

A trend is ``noisy`` when the step-to-step scatter (pooled standard deviation) is larger
than the change of the fit across the measured gains: the data do not support a trend. It
is ``flat`` when both are below 2 % of the limit: the quantity does not depend on the gain
here. Pure numpy.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from livestep.judge.profile import Limit, Profile
from livestep.judge.quantities import QUANTITIES, display_unit, value_of
from livestep.steps.analysis import StepResult
from livestep.tuning.records import gain_sets

__all__ = ["GainPoint", "Trend", "trends"]

FLAT = 0.02  # share of the limit below which change and scatter count as nothing


@dataclass(frozen=True)
class GainPoint:
    """One gain set of a family: the gain's value, how many steps had the quantity, their
    mean and sample standard deviation (0 for one step), in the quantity's unit."""

    gain: float
    n: int
    mean: float
    std: float


@dataclass(frozen=True)
class Trend:
    """One quantity against one gain. ``others``: the gains held equal; ``status``:
    ``trend``, ``flat``, ``noisy`` or ``too few`` (under two gain sets with the quantity);
    ``coeffs``: the fitted polynomial (highest power first); ``meets_at`` / ``margin_at``:
    the gain where the fit meets the limit / the limit with its warning margin (``None``:
    nowhere in reach); ``met_above``: whether the limit holds above that gain;
    ``extrapolated``: that gain lies outside the measured ones; ``text``: the sentence."""

    gain: str
    quantity: str
    limit: Limit
    others: tuple[tuple[str, float], ...]
    points: tuple[GainPoint, ...]
    status: str
    coeffs: tuple[float, ...]
    change: float
    scatter: float
    meets_at: float | None
    margin_at: float | None
    met_above: bool | None
    extrapolated: bool
    text: str


def _fmt(q: str, v: float) -> str:
    f, unit = display_unit(q)
    return f"{v * f:.3g} {unit}" if unit else f"{v * f:.3g}"


def _crossing(coeffs: np.ndarray, bound: float, lo: float, hi: float) -> float | None:
    """The root of fit(x) = bound nearest the measured range [lo, hi] (inside first)."""
    p = np.array(coeffs, dtype=float)
    p[-1] -= bound
    roots = [r.real for r in np.roots(p) if abs(r.imag) < 1e-9 * max(1.0, abs(r.real))] \
        if np.any(p[:-1]) else []
    if not roots:
        return None
    mid, half = (lo + hi) / 2, (hi - lo) / 2
    return min(roots, key=lambda r: max(abs(r - mid) - half, 0.0))


def _bound(limit: Limit) -> tuple[float, float, str]:
    """(limit, limit with margin, sense) of the side that binds: "max" or "min"."""
    if limit.high is not None:
        return limit.high, limit.high - limit.warn, "max"
    assert limit.low is not None
    return limit.low, limit.low + limit.warn, "min"


def _one(gain: str, q: str, limit: Limit, others: tuple[tuple[str, float], ...],
         points: list[GainPoint]) -> Trend:
    label = QUANTITIES[q].label
    lim, tight, sense = _bound(limit)
    op = "≤" if sense == "max" else "≥"
    head = f"{label} {op} {_fmt(q, lim)}"
    xs = np.array([p.gain for p in points])
    ms = np.array([p.mean for p in points])
    measured = ", ".join(f"{p.gain:g}: {_fmt(q, p.mean)}" for p in points)

    def trend(status: str, coeffs: tuple[float, ...], change: float, scatter: float,
              text: str, at: float | None = None, margin_at: float | None = None,
              above: bool | None = None, extra: bool = False) -> Trend:
        return Trend(gain, q, limit, others, tuple(points), status, coeffs, change, scatter,
                     at, margin_at, above, extra, text)

    if len(points) < 2:
        return trend("too few", (), 0.0, 0.0, f"{head}: only one {gain} has steps with this"
                     " figure, no trend")
    deg = 1 if len(points) <= 3 else 2
    coeffs = np.polyfit(xs, ms, deg)
    fit = np.polyval(coeffs, xs)
    change = float(abs(np.polyval(coeffs, xs.max()) - np.polyval(coeffs, xs.min())))
    pooled = [(p.n - 1, p.std**2) for p in points if p.n > 1]
    if pooled:
        scatter = math.sqrt(sum(d * v for d, v in pooled) / sum(d for d, _ in pooled))
    else:  # one step per gain set: the scatter about the fit, when it has any freedom
        scatter = float(np.sqrt(np.sum((ms - fit) ** 2) / (len(xs) - deg - 1))) \
            if len(xs) > deg + 1 else 0.0
    c = tuple(float(x) for x in coeffs)
    small = FLAT * abs(lim) if lim else FLAT
    ok_all = all((m <= tight) if sense == "max" else (m >= tight) for m in ms)
    if scatter > change and scatter > small:
        return trend("noisy", c, change, scatter,
                     f"{head}: the data do not support a trend in {gain}: step-to-step"
                     f" scatter ±{_fmt(q, scatter)} is larger than the change"
                     f" {_fmt(q, change)} across {gain} {xs.min():g} to {xs.max():g}"
                     f" (measured {measured})")
    if change <= small and scatter <= small:
        verdict = "met" if ok_all else "not met"
        return trend("flat", c, change, scatter,
                     f"{head}: flat, {gain} does not move it ({measured}); {verdict} at"
                     f" every measured {gain}")
    at = _crossing(coeffs, lim, xs.min(), xs.max())
    margin_at = _crossing(coeffs, tight, xs.min(), xs.max()) if tight != lim else at
    if at is None:
        where = "at every measured" if ok_all else "at no measured"
        return trend("trend", c, change, scatter, f"{head}: met {where} {gain}, and the"
                     f" fit never crosses it (measured {measured})")
    slope = float(np.polyval(np.polyder(coeffs), at))
    above = (slope < 0) if sense == "max" else (slope > 0)
    extra = not (xs.min() <= at <= xs.max())
    word = "from" if above else "up to"
    if at < 0 or (extra and ok_all):  # met throughout: the crossing is only a far-off hint
        where = "negative: out of reach" if at < 0 else f"EXTRAPOLATED beyond {xs.min():g} to" \
            f" {xs.max():g}"
        text = (f"{head}: met at every measured {gain} ({measured}); the fit reaches the limit"
                f" only at {gain} ≈ {at:.3g} ({where})")
    else:
        text = f"{head} is met {word} {gain} ≈ {at:.3g}"
        if margin_at is not None and margin_at != at and margin_at >= 0:
            text += (f"; {op} {_fmt(q, tight)} with the warning margin {word} {gain} ≈"
                     f" {margin_at:.3g}")
        if extra:
            text += (f", EXTRAPOLATED beyond the measured {gain} {xs.min():g} to"
                     f" {xs.max():g} ({measured})")
        else:
            i = int(np.searchsorted(xs, at))
            lo_p, hi_p = points[max(i - 1, 0)], points[min(i, len(points) - 1)]
            text += (f" (between the measured {lo_p.gain:g}: {_fmt(q, lo_p.mean)} and"
                     f" {hi_p.gain:g}: {_fmt(q, hi_p.mean)})")
    return trend("trend", c, change, scatter, text, at, margin_at, above, extra)


def trends(results: Sequence[StepResult], profile: Profile,
           names: Sequence[str] = ("kp", "ki", "kd")) -> list[Trend]:
    """One :class:`Trend` per (gain family, limited quantity) of the profile's ``[limits]``
    (the ``[[when]]`` sections are not trended), in gain then profile order."""
    sets = gain_sets(results, names)
    out = []
    for i, gain in enumerate(names):
        families: dict[tuple[float, ...], dict[float, list[StepResult]]] = {}
        for g, steps in sets.items():
            rest = g[:i] + g[i + 1:]
            families.setdefault(rest, {}).setdefault(g[i], []).extend(steps)
        for rest, by_value in families.items():
            if len(by_value) < 2:
                continue
            others = tuple(zip([n for n in names if n != gain], rest, strict=True))
            for limit in profile.limits:
                points = []
                for value in sorted(by_value):
                    xs = [v for r in by_value[value]
                          if (v := value_of(r, limit.quantity)) is not None]
                    if xs:
                        points.append(GainPoint(value, len(xs), float(np.mean(xs)),
                                                float(np.std(xs, ddof=1)) if len(xs) > 1
                                                else 0.0))
                out.append(_one(gain, limit.quantity, limit, others, points))
    return out
