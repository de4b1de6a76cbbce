"""Verdicts: one step judged against a tolerance profile.

Each limit that applies to the step gives one :class:`Check`:

- ``fail`` when the value is outside ``[min, max]``, or when the response never got
  there (never reached the upper rise level, never settled) and a maximum is set;
- ``warn`` when inside but closer to a limit than the limit's warning margin;
- ``pass`` otherwise (a value exactly at a limit passes);
- ``not measured`` when the quantity is undefined for the step (no overshoot peak, no
  model, no setpoint); this neither passes nor fails the step.

The step's verdict is the worst of its checks: ``fail`` > ``warn`` > ``pass``.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from livestep.errors import EXIT_FAIL, EXIT_OK
from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES, Quantity
from livestep.steps.analysis import StepResult

__all__ = ["FAIL", "NOT_MEASURED", "PASS", "SYMBOLS", "WARN", "Check", "StepVerdict",
           "check_limit", "describe_check", "format_difference", "format_seconds",
           "format_value", "gate_status", "judge", "verdict_summary", "worst"]

PASS, WARN, FAIL, NOT_MEASURED = "pass", "warn", "fail", "not measured"

#: Shown beside the verdict's text wherever it is coloured, so colour is never alone.
SYMBOLS = {PASS: "✔", WARN: "▲", FAIL: "✘", NOT_MEASURED: "·"}


@dataclass(frozen=True)
class Check:
    """One limit applied to one step, in the quantity's unit.

    ``limit``: the binding limit (the one nearest the value, or the one broken);
    ``margin``: distance to it, positive inside the limits, negative outside
    (``None`` when not measured); ``reason``: a short sentence when not ``pass``.
    """

    quantity: str
    value: float | None
    low: float | None
    high: float | None
    limit: float | None
    margin: float | None
    verdict: str
    reason: str = ""
    rule: str = ""


@dataclass(frozen=True)
class StepVerdict:
    """The verdict of one step and its checks, in profile order."""

    verdict: str
    checks: tuple[Check, ...]

    def failed(self) -> tuple[Check, ...]:
        return tuple(c for c in self.checks if c.verdict == FAIL)


def format_seconds(x: float) -> str:
    """A time, below 1 s in milliseconds: "62.3 ms", "1.25 s"."""
    return f"{1e3 * x:.3g} ms" if abs(x) < 1.0 else f"{x:.4g} s"


def format_value(q: Quantity, x: float | None) -> str:
    """A value with its unit, times below 1 s in milliseconds ("62.3 ms", "12.5 %")."""
    if x is None:
        return "-"
    if q.unit == "s":
        return format_seconds(x)
    if q.unit == "%":
        return f"{x:.3g} %"
    return f"{x:.3g} {q.unit}".rstrip()


def format_difference(q: Quantity, x: float | None) -> str:
    """A difference of two values (a margin), as :func:`format_value` but in percentage
    points for a quantity in percent: "2 pp" is the distance from 8 % to 10 %."""
    if x is not None and q.unit == "%":
        return f"{x:.3g} pp"
    return format_value(q, x)


def check_limit(q: Quantity, value: float | None, low: float | None, high: float | None,
                warn: float = 0.0, rule: str = "") -> Check:
    """Judge one value against ``[low, high]`` (either may be ``None``)."""
    if value is None:
        if q.unreached is not None and high is not None:
            return Check(q.name, None, low, high, high, None, FAIL, q.unreached, rule)
        return Check(q.name, None, low, high, None, None, NOT_MEASURED,
                     q.unreached or q.missing, rule)
    sides = [(value - low, low, "below the minimum")] if low is not None else []
    if high is not None:
        sides.append((high - value, high, "above the maximum"))
    margin, limit, where = min(sides, key=lambda s: s[0])
    if margin < 0:
        return Check(q.name, value, low, high, limit, margin, FAIL,
                     f"{where} {format_value(q, limit)}", rule)
    if margin < warn:
        return Check(q.name, value, low, high, limit, margin, WARN,
                     f"within {format_difference(q, warn)} of the limit"
                     f" {format_value(q, limit)}",
                     rule)
    return Check(q.name, value, low, high, limit, margin, PASS, "", rule)


def worst(verdicts: Iterable[str]) -> str:
    """The overall verdict of several: fail > warn > pass; ``not measured`` is ignored."""
    seen = set(verdicts)
    return FAIL if FAIL in seen else WARN if WARN in seen else PASS


def judge(result: StepResult, profile: Profile) -> StepVerdict:
    """Every limit of ``profile`` that applies to the step, checked."""
    checks = tuple(
        check_limit(QUANTITIES[lim.quantity], QUANTITIES[lim.quantity].get(result),
                    lim.low, lim.high, lim.warn, lim.rule)
        for lim in profile.limits_for(result))
    return StepVerdict(worst(c.verdict for c in checks), checks)


def describe_check(c: Check) -> str:
    """One line without the verdict: "overshoot 12.5 % (max 10 %): above the maximum 10 %"."""
    q = QUANTITIES[c.quantity]
    bounds = " ".join(f"{k} {format_value(q, v)}" for k, v in (("min", c.low), ("max", c.high))
                      if v is not None)
    text = f"{q.label} {format_value(q, c.value)} ({bounds})"
    return f"{text}: {c.reason}" if c.reason else text


def verdict_summary(verdicts: Sequence[str], profile_name: str) -> str:
    """One line: "profile 'x': 12 steps, 10 pass, 1 warn, 1 fail"."""
    counts = ", ".join(f"{list(verdicts).count(v)} {v}" for v in (PASS, WARN, FAIL))
    return f"profile {profile_name!r}: {len(verdicts)} steps, {counts}"


def gate_status(verdicts: Sequence[StepVerdict | None]) -> int:
    """Exit status of a judged run: 0 when every step passed (or warned), 1 when any
    failed or when there was no step to judge."""
    if not verdicts or any(v is not None and v.verdict == FAIL for v in verdicts):
        return EXIT_FAIL
    return EXIT_OK
