"""What the report summarises: which quantities it shows and in which units, and Cp
beside :mod:`livestep.judge.statistics`' Cpk."""

from __future__ import annotations

from collections.abc import Sequence

from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES, display_unit
from livestep.judge.statistics import MetricStats
from livestep.steps.analysis import StepResult

__all__ = ["DEFAULT_QUANTITIES", "cp", "display_unit", "report_quantities"]

#: Shown in every report, after the quantities the profile limits.
DEFAULT_QUANTITIES = ("rise_time", "overshoot_pct", "settling_time", "steady_state_error_pct",
                      "iae", "zeta", "wn", "dead_time", "fit_r2")


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


def cp(s: MetricStats) -> float | None:
    """Cp = (USL - LSL) / (6 s) with both limits, else ``None`` (NIST/SEMATECH
    e-Handbook of Statistical Methods, section 6.1.6, from memory); like Cpk, not from
    fewer values than :data:`livestep.judge.statistics.CPK_MIN_COUNT` (``s.cpk_note``
    says why)."""
    if s.low is None or s.high is None or not s.std or s.cpk is None:
        return None
    return (s.high - s.low) / (6.0 * s.std)
