"""What the report summarises: which quantities it shows and in which units, how its
overview groups the steps (by gain set, another note, or direction), and Cp beside
:mod:`livestep.judge.statistics`' Cpk."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES, display_unit
from livestep.judge.statistics import MetricStats
from livestep.steps.analysis import StepResult

__all__ = ["DEFAULT_QUANTITIES", "OverviewGroup", "cp", "display_unit", "overview_groups",
           "overview_note", "report_quantities"]

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


#: The note the overview groups by when the steps carry it: the gain set of a step plan.
GAIN_NOTE = "gains"


def overview_note(results: Sequence[StepResult]) -> str | None:
    """The note name the report's overview groups the steps by: ``gains`` when a step
    carries it; otherwise the name whose values split the steps it is on into groups
    of more than one step on average and into at least two groups (the most steps first,
    then the fewest values, then the first seen); ``None`` when no name does."""
    values: dict[str, list[str]] = {}
    for r in results:
        for name, value in r.tags:
            values.setdefault(name, []).append(value)
    if GAIN_NOTE in values:
        return GAIN_NOTE
    useful = [(-len(v), len(set(v)), i, name) for i, (name, v) in enumerate(values.items())
              if 2 <= len(set(v)) < len(v)]
    return min(useful)[3] if useful else None


@dataclass(frozen=True)
class OverviewGroup:
    """One row of the overview: ``key`` (``gains=A``, ``up``...), its steps in session
    order and the tags every one of them carries besides the grouping note."""

    key: str
    steps: tuple[StepResult, ...]
    shared: tuple[tuple[str, str], ...]


def overview_groups(results: Sequence[StepResult]) -> tuple[str, list[OverviewGroup]]:
    """How the overview splits the steps, and the groups in order of first appearance (a
    session's gain sets in the order they were tried): by :func:`overview_note` when
    there is one (steps without the note last, as "no NAME"), else by direction. Returns
    (a description of the grouping, the groups)."""
    name = overview_note(results)
    groups: dict[str, list[StepResult]] = {}
    if name is None:
        for r in results:
            groups.setdefault(r.metrics.direction, []).append(r)
        how = "direction"
    else:
        missing = f"no {name}"
        for r in results:
            value = dict(r.tags).get(name)
            groups.setdefault(missing if value is None else f"{name}={value}", []).append(r)
        if missing in groups:
            groups[missing] = groups.pop(missing)  # last
        how = "gain set (note gains)" if name == GAIN_NOTE else f"note {name}"
    out = []
    for key, steps in groups.items():
        common = set(steps[0].tags)
        for r in steps[1:]:
            common &= set(r.tags)
        shared = tuple(t for t in steps[0].tags if t in common and t[0] != name)
        out.append(OverviewGroup(key, tuple(steps), shared))
    return how, out
