"""Tolerance profiles: limits on the measured quantities, read from TOML.

A profile is a TOML file (read with :mod:`tomllib`)::

    name = "carton transfer axis"     # shown in tables and reports
    settling_band = 2.0               # optional: +- % of |amplitude| for settling
    rise_levels = [10, 90]            # optional: rise-time levels, % of amplitude
    warn_pct = 10                     # optional: default warning margin, % of each limit

    [limits]                          # for every step
    rise_time = { max = 0.060 }       # seconds
    overshoot_pct = { max = 10, warn = 2 }   # warn within 2 (%) of the limit
    zeta = { min = 0.5, max = 0.9 }

    [[when]]                          # limits for some steps only; later sections win
    name = "large steps"
    size_min = 50                     # |setpoint change| (feedback amplitude without a
    size_max = 1000                   #  setpoint), setpoint units
    direction = "down"                # "up" or "down"
    tag = "gains=soft"                # a note active at the step
    [when.limits]
    settling_time = { max = 0.4 }     # replaces the [limits] entry for these steps

Quantity names are those of :data:`livestep.judge.quantities.QUANTITIES`, in their units
(times in seconds, ``*_pct`` in percent). Every mistake (bad TOML, an unknown key or
quantity, a wrong type, min > max) is an :class:`~livestep.errors.InputError` naming
the file, the line and the key.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from livestep.errors import InputError
from livestep.judge.quantities import QUANTITIES
from livestep.steps.analysis import StepResult

__all__ = ["Limit", "Profile", "Rule", "load_profile", "parse_profile"]


@dataclass(frozen=True)
class Limit:
    """Limits on one quantity, in its unit. ``low``/``high``: ``None`` when absent.
    ``warn``: a value inside the limits but closer than this to one of them warns."""

    quantity: str
    low: float | None
    high: float | None
    warn: float = 0.0
    rule: str = ""  # the ``[[when]]`` section that gave it; "" for ``[limits]``


@dataclass(frozen=True)
class Rule:
    """A ``[[when]]`` section: limits for the steps that match every condition given."""

    name: str
    direction: str | None
    size_min: float | None
    size_max: float | None
    tag: tuple[str, str] | None
    limits: tuple[Limit, ...]

    def matches(self, result: StepResult) -> bool:
        m = result.metrics
        if self.direction is not None and m.direction != self.direction:
            return False
        size = step_size(result)
        if self.size_min is not None and size < self.size_min:
            return False
        if self.size_max is not None and size > self.size_max:
            return False
        return self.tag is None or self.tag in result.tags


def step_size(result: StepResult) -> float:
    """|setpoint change| of a step, or |feedback amplitude| without a setpoint."""
    m = result.metrics
    if m.setpoint_before is not None and m.setpoint_after is not None:
        return abs(m.setpoint_after - m.setpoint_before)
    return abs(m.amplitude)


@dataclass(frozen=True)
class Profile:
    """A tolerance profile. ``settling_band`` (+- % of |amplitude|) and ``rise_levels``
    (% of amplitude) are ``None`` when the profile leaves them to the options."""

    name: str
    source: str
    settling_band: float | None
    rise_levels: tuple[float, float] | None
    limits: tuple[Limit, ...]
    rules: tuple[Rule, ...] = ()

    def all_limits(self) -> tuple[Limit, ...]:
        """The ``[limits]`` entries, for every step."""
        return self.limits

    def limits_for(self, result: StepResult) -> tuple[Limit, ...]:
        """The limits that apply to one step: ``[limits]``, each quantity replaced by the
        last matching ``[[when]]`` section that limits it; in profile order."""
        chosen = {lim.quantity: lim for lim in self.limits}
        for rule in self.rules:
            if rule.matches(result):
                chosen.update({lim.quantity: lim for lim in rule.limits})
        return tuple(chosen.values())


_TOP_KEYS = {"name", "description", "settling_band", "rise_levels", "warn_pct", "limits",
             "when", "controller"}  # [controller]: read by livestep.tuning.controller
_RULE_KEYS = {"name", "direction", "size_min", "size_max", "tag", "limits"}
_LIMIT_KEYS = {"min", "max", "warn"}


class _Reader:
    """Validates the parsed TOML, turning every problem into a located InputError."""

    def __init__(self, text: str, source: str) -> None:
        self.lines = text.splitlines()
        self.source = source

    def fail(self, path: tuple[str | int, ...], message: str) -> InputError:
        key = ".".join(f"[{p + 1}]" if isinstance(p, int) else p for p in path)
        key = key.replace(".[", "[")
        return InputError(f"{key}: {message}" if key else message, source=self.source,
                          line=self.line_of(path))

    def line_of(self, path: tuple[str | int, ...]) -> int | None:
        """Best-effort line of a key: each part searched from the line of the one before;
        an index ``i`` of an array of tables finds its ``i``-th ``[[...]]`` header."""
        row, found = 0, None
        for i, part in enumerate(path):
            if isinstance(part, int):
                header = re.compile(r"^\s*\[\[\s*" + re.escape(str(path[i - 1])) + r"\s*\]\]")
                hits = [n for n, s in enumerate(self.lines) if header.match(s)]
                if part >= len(hits):
                    return found
                row = found = hits[part]
                continue
            pat = re.compile(r"(^|[\s{,.\[])\"?" + re.escape(part) + r"\"?\s*[=.\]]")
            for n in range(row, len(self.lines)):
                if pat.search(self.lines[n].split("#", 1)[0]):
                    row = found = n
                    break
        return None if found is None else found + 1

    def number(self, path: tuple[str | int, ...], x: Any, *, positive: bool = False) -> float:
        if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
            raise self.fail(path, f"expected a number, got {x!r}")
        if positive and not x > 0:
            raise self.fail(path, f"expected a positive number, got {x!r}")
        return float(x)

    def table(self, path: tuple[str | int, ...], x: Any, allowed: set[str]) -> dict[str, Any]:
        if not isinstance(x, dict):
            raise self.fail(path, f"expected a table, got {x!r}")
        for key in x:
            if key not in allowed:
                raise self.fail((*path, key), "unknown key (expected one of "
                                f"{', '.join(sorted(allowed))})")
        return x

    def limits(self, path: tuple[str | int, ...], x: Any, rule: str,
               warn_pct: float | None) -> tuple[Limit, ...]:
        out = []
        for name, spec in self.table(path, x, set(QUANTITIES)).items():
            p = (*path, name)
            spec = self.table(p, spec, _LIMIT_KEYS)
            low = self.number((*p, "min"), spec["min"]) if "min" in spec else None
            high = self.number((*p, "max"), spec["max"]) if "max" in spec else None
            if low is None and high is None:
                raise self.fail(p, "give min, max or both")
            if low is not None and high is not None and low > high:
                raise self.fail(p, f"min {low:g} is greater than max {high:g}")
            if "warn" in spec:
                warn = self.number((*p, "warn"), spec["warn"])
                if warn < 0:
                    raise self.fail((*p, "warn"), f"expected a margin >= 0, got {warn:g}")
            else:
                sides = [abs(v) for v in (low, high) if v is not None]
                warn = 0.0 if warn_pct is None else warn_pct / 100.0 * min(sides)
            out.append(Limit(name, low, high, warn, rule))
        return tuple(out)

    def rule(self, i: int, x: Any, warn_pct: float | None) -> Rule:
        path: tuple[str | int, ...] = ("when", i)
        x = self.table(path, x, _RULE_KEYS)
        name = x.get("name", f"when #{i + 1}")
        if not isinstance(name, str):
            raise self.fail((*path, "name"), f"expected a string, got {name!r}")
        direction = x.get("direction")
        if direction not in (None, "up", "down"):
            raise self.fail((*path, "direction"), f"expected \"up\" or \"down\", got "
                            f"{direction!r}")
        size_min, size_max = (self.number((*path, k), x[k]) if k in x else None
                              for k in ("size_min", "size_max"))
        if size_min is not None and size_max is not None and size_min > size_max:
            raise self.fail((*path, "size_min"), f"size_min {size_min:g} is greater than "
                            f"size_max {size_max:g}")
        tag = None
        if "tag" in x:
            text = x["tag"]
            if not isinstance(text, str) or "=" not in text:
                raise self.fail((*path, "tag"), f"expected \"name=value\", got {text!r}")
            k, v = text.split("=", 1)
            tag = (k.strip(), v.strip())
        if "limits" not in x:
            raise self.fail(path, "has no [when.limits] table")
        return Rule(name, direction, size_min, size_max, tag,
                    self.limits((*path, "limits"), x["limits"], name, warn_pct))


def parse_profile(text: str, source: str = "<profile>") -> Profile:
    """A profile from TOML text; ``source`` names it in messages."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column \d+\)", str(exc))
        message = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        raise InputError(f"not valid TOML: {message}", source=source,
                         line=int(m.group(1)) if m else None) from None
    r = _Reader(text, source)
    r.table((), doc, _TOP_KEYS)
    name = doc.get("name", Path(source).stem)
    if not isinstance(name, str):
        raise r.fail(("name",), f"expected a string, got {name!r}")
    band = r.number(("settling_band",), doc["settling_band"], positive=True) \
        if "settling_band" in doc else None
    levels = None
    if "rise_levels" in doc:
        x = doc["rise_levels"]
        if not isinstance(x, list) or len(x) != 2:
            raise r.fail(("rise_levels",), f"expected [low, high] in percent, got {x!r}")
        lo, hi = (r.number(("rise_levels",), v) for v in x)
        if not 0 <= lo < hi <= 100:
            raise r.fail(("rise_levels",), f"expected 0 <= low < high <= 100, got {x!r}")
        levels = (lo, hi)
    warn_pct = r.number(("warn_pct",), doc["warn_pct"]) if "warn_pct" in doc else None
    if warn_pct is not None and not 0 <= warn_pct < 100:
        raise r.fail(("warn_pct",), f"expected 0 <= warn_pct < 100, got {warn_pct:g}")
    limits = r.limits(("limits",), doc.get("limits", {}), "", warn_pct)
    when = doc.get("when", [])
    if not isinstance(when, list):
        raise r.fail(("when",), "expected [[when]] sections")
    rules = tuple(r.rule(i, x, warn_pct) for i, x in enumerate(when))
    if not limits and not rules:
        raise InputError("the profile sets no limits ([limits] or [[when]] sections)",
                         source=source)
    return Profile(name=name, source=source, settling_band=band, rise_levels=levels,
                   limits=limits, rules=rules)


def load_profile(path: str | Path) -> Profile:
    """Read a profile file; :class:`InputError` (exit status 2) on any problem."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("no such profile file", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the profile: {exc}", source=str(path)) from None
    return parse_profile(text, str(path))
