"""Step plans: which setpoints (and gain sets) to send a controller, and when. Pure, no I/O
beyond reading the plan file.

A plan is a TOML document (or the same keys from command-line options)::

    levels = [0.0, 5.0, 0.0, -5.0]   # setpoint levels, in order (setpoint units)
    dwell = 1.0                      # seconds at each level
    repeats = 2                      # passes through the levels for each gain set
    rest = 0.0                       # where the loop rests before the plan (setpoint units)
    lead_in = 1.0                    # seconds of data before the first command (default dwell)
    gain_settle = 0.2                # seconds after a gains command (default 0.2)

    [limits]                         # mandatory for a plan that is sent
    min = -10.0                      # lowest setpoint allowed
    max = 10.0                       # highest setpoint allowed
    max_step = 10.0                  # largest setpoint change allowed (rest -> first level too)

    [commands]                       # templates in the controller's own syntax
    setpoint = "sp {value}"          # {value}: the level; format specs allowed ({value:.2f})
    gains = "gains kp={kp} ki={ki} kd={kd}"   # fields: the keys of each gain set
    safe = "sp 0"                    # sent once at the end, on error, link loss and Ctrl-C
                                     # (default: the setpoint command at the rest level)
    eol = "\\n"                       # line ending appended to each command

    [[gains]]                        # optional; each set runs the whole level sequence
    name = "soft"
    kp = 20.0
    ki = 60.0
    kd = 0.12

Every command of the expanded plan carries tags (``plan_entry``, ``setpoint``, ``repeat``,
``gains``) that the steps it causes inherit.

Every line a plan can send is checked as it will be sent (:mod:`livestep.live.plan_text`):
printable ASCII, no command separator, numbers rendered faithfully; with limits, every
setpoint sent, the safe command (read back through the setpoint template) and the return
to it from any level (the safe command goes out whenever the plan stops) lie inside them.
A plan expands to at most :data:`MAX_COMMANDS` commands, counted before it is expanded.
"""

from __future__ import annotations

import math
import string
import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from livestep.errors import InputError
from livestep.live.plan_text import (
    SEPARATORS,
    Template,
    check_line,
    parse_template,
    read_setpoint,
)

__all__ = ["MAX_COMMANDS", "Limits", "Plan", "PlanCommand", "check_sendable", "describe_plan",
           "load_plan_file", "parse_plan"]

#: The most commands a plan may expand to (counted before expanding).
MAX_COMMANDS = 100_000

_TOP = {"levels", "dwell", "repeats", "rest", "lead_in", "gain_settle", "limits", "commands",
        "gains", "controller"}  # [controller]: read by livestep.tuning.controller


@dataclass(frozen=True)
class Limits:
    """Setpoint limits (setpoint units): ``low`` <= every level <= ``high``; no change larger
    than ``max_step``."""

    low: float
    high: float
    max_step: float


@dataclass(frozen=True)
class PlanCommand:
    """One command of the expanded plan: ``text`` (without line ending), ``kind``
    (``setpoint`` or ``gains``), ``value`` (the setpoint), ``dwell`` (seconds to wait after
    sending it), ``tags`` for the steps it causes."""

    entry: int
    kind: str
    text: str
    dwell: float
    value: float | None = None
    tags: tuple[tuple[str, str], ...] = ()


@dataclass(frozen=True)
class Plan:
    """An expanded, validated plan. ``lead_in``: seconds of data before the first command;
    ``safe``: the safe command (``None`` when neither it nor ``rest`` is given)."""

    commands: tuple[PlanCommand, ...]
    safe: str | None
    eol: str
    rest: float | None
    limits: Limits | None
    lead_in: float
    source: str = "plan"
    safe_value: float | None = None  # the setpoint the safe command sends, when it is one
    safe_unchecked: bool = False  # the plan allows a safe command that is not a setpoint

    @property
    def lines(self) -> frozenset[str]:
        """Every command line the plan may send (the runner sends nothing else)."""
        return frozenset([c.text for c in self.commands]
                         + ([self.safe] if self.safe is not None else []))

    @property
    def duration(self) -> float:
        """Seconds from the first command to the end of the last dwell."""
        return sum(c.dwell for c in self.commands)

    def setpoints(self) -> list[float]:
        """The setpoint sequence sent, starting from ``rest`` when known."""
        values = [c.value for c in self.commands if c.value is not None]
        return ([] if self.rest is None else [self.rest]) + values


def load_plan_file(path: str | Path) -> dict[str, Any]:
    """The TOML document of a plan file (not yet validated)."""
    p = Path(path)
    try:
        with p.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InputError("no such plan file", source=str(p)) from None
    except OSError as exc:
        raise InputError(f"cannot read the plan: {exc.strerror}", source=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=str(p)) from None


def _num(doc: dict[str, Any], key: str, src: str, default: float | None = None, *,
         positive: bool = False) -> float | None:
    """``doc[key]`` as a float (``default`` when absent); one line for anything else."""
    if key not in doc:
        return default
    x = doc[key]
    if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
        raise InputError(f"{key} must be a number", source=src)
    if positive and not x > 0:
        raise InputError(f"{key} must be positive", source=src)
    return float(x)


def _seconds(doc: dict[str, Any], key: str, src: str, default: float) -> float:
    value = _num(doc, key, src, default, positive=True)
    assert value is not None
    return value


def _fields(template: str, what: str, src: str) -> set[str]:
    try:
        names = {f for _, f, _, _ in string.Formatter().parse(template) if f is not None}
    except ValueError as exc:
        raise InputError(f"{what} template {template!r}: {exc}", source=src) from None
    if "" in names or any(n.isdigit() for n in names):
        raise InputError(f"{what} template {template!r}: use named fields like {{value}}",
                         source=src)
    return names


GainSet = tuple[str, dict[str, int | float]]


def _gain_sets(doc: dict[str, Any], src: str) -> list[GainSet]:
    """The ``[[gains]]`` tables as (name, gains); values kept as written (20, not 20.0);
    a name is printable text (it becomes a tag and a note in the recording)."""
    raw = doc.get("gains", [])
    if not isinstance(raw, list) or not all(isinstance(g, dict) for g in raw):
        raise InputError("gains must be a list of tables ([[gains]])", source=src)
    sets = []
    for k, g in enumerate(raw, start=1):
        values = {key: v for key, v in g.items() if key != "name"}
        for key in values:
            _num(values, key, f"{src}, gains {k}")
        if not values:
            raise InputError(f"gain set {k} has no gains", source=src)
        name = str(g.get("name", f"set {k}"))
        if not name.isprintable() or any(ch in name for ch in SEPARATORS) or len(name) > 64:
            raise InputError(f"gain set {k}: its name {name!r} must be printable text of at"
                             f" most 64 characters without {SEPARATORS}", source=src)
        sets.append((name, values))
    return sets


def _templates(doc: dict[str, Any], src: str,
               sets: list[GainSet]) -> tuple[dict[str, Any], Template, Template | None]:
    """The ``[commands]`` table, checked: a setpoint template with only ``{value}``, a gains
    template when there are gain sets, a known line ending, a literal safe command, every
    template's text as it will be sent (:mod:`livestep.live.plan_text`)."""
    cmds = doc.get("commands", {})
    if not isinstance(cmds, dict):
        raise InputError("commands must be a table", source=src)
    bad = sorted(set(cmds) - {"setpoint", "gains", "safe", "eol", "safe_unchecked"})
    if bad:
        raise InputError(f"unknown key commands.{bad[0]}", source=src)
    if not all(isinstance(v, str) for k, v in cmds.items() if k != "safe_unchecked"):
        raise InputError("commands.* must be strings", source=src)
    if not isinstance(cmds.get("safe_unchecked", False), bool):
        raise InputError("commands.safe_unchecked must be true or false", source=src)
    if "setpoint" not in cmds:
        raise InputError("commands.setpoint (the setpoint command template) is missing",
                         source=src)
    if not _fields(cmds["setpoint"], "setpoint", src) <= {"value"}:
        raise InputError(f"setpoint template {cmds['setpoint']!r}: its only field is"
                         " {value}", source=src)
    setpoint = parse_template(cmds["setpoint"], "setpoint", src, numeric={"value"})
    if len(setpoint.fields) != 1:
        raise InputError(f"setpoint template {cmds['setpoint']!r}: {{value}} exactly once",
                         source=src)
    gains = None
    if sets and "gains" not in cmds:
        raise InputError("gain sets need commands.gains (the gains command template)",
                         source=src)
    if sets:
        keys = {key for _, values in sets for key in values}
        gains = parse_template(cmds["gains"], "gains", src, numeric=keys, names={"name"})
    if cmds.get("eol", "\n") not in ("\n", "\r\n", "\r"):
        raise InputError("commands.eol must be \\n, \\r\\n or \\r", source=src)
    if "safe" in cmds:
        check_line(cmds["safe"], "commands.safe", src)
    return cmds, setpoint, gains


def _expand(levels: list[int | float], repeats: int, dwell: float, settle: float,
            sets: list[GainSet], setpoint: Template, gains: Template | None,
            src: str) -> list[PlanCommand]:
    """Each gain set's command, then its levels ``repeats`` times, with their tags."""
    count = max(1, len(sets)) * (repeats * len(levels) + (1 if sets else 0))
    if count > MAX_COMMANDS:
        raise InputError(f"the plan would expand to {count} commands (at most"
                         f" {MAX_COMMANDS}): fewer repeats, levels or gain sets", source=src)
    out: list[PlanCommand] = []
    rendered = {written: setpoint.render("setpoint", src, value=written)
                for written in dict.fromkeys(levels)}
    for name, values in sets or [("", {})]:
        gain_tags = (("gains", name),) if sets else ()
        if sets:
            assert gains is not None
            text = gains.render("gains", src, name=name, **values)
            out.append(PlanCommand(entry=len(out) + 1, kind="gains", text=text, dwell=settle,
                                   tags=gain_tags))
        for r in range(repeats):
            for written in levels:
                level, entry = float(written), len(out) + 1
                tags = (("plan_entry", str(entry)), ("setpoint", f"{level:g}"),
                        ("repeat", str(r + 1)), *gain_tags)
                out.append(PlanCommand(entry=entry, kind="setpoint", text=rendered[written],
                                       dwell=dwell, value=level, tags=tags))
    return out


def parse_plan(doc: dict[str, Any], source: str = "plan") -> Plan:
    """Validate a plan document and expand it into commands; raises :class:`InputError`
    (one line) for anything wrong, including a level outside the limits or a step larger
    than ``max_step`` when limits are given, and any command line that is not what it
    stands for (see the module docstring)."""
    src = source
    unknown = sorted(set(doc) - _TOP)
    if unknown:
        raise InputError(f"unknown key {unknown[0]!r}", source=src)
    levels = doc.get("levels")
    if (not isinstance(levels, list) or not levels
            or any(isinstance(x, bool) or not isinstance(x, int | float)
                   or not math.isfinite(x) for x in levels)):
        raise InputError("levels must be a non-empty list of numbers", source=src)
    if "dwell" not in doc:
        raise InputError("dwell (seconds at each level) is missing", source=src)
    dwell = _seconds(doc, "dwell", src, 0.0)
    repeats = doc.get("repeats", 1)
    if isinstance(repeats, bool) or not isinstance(repeats, int) or repeats < 1:
        raise InputError("repeats must be a whole number >= 1", source=src)
    rest = _num(doc, "rest", src)
    sets = _gain_sets(doc, src)
    cmds, setpoint, gains = _templates(doc, src, sets)
    commands = _expand(levels, repeats, dwell, _seconds(doc, "gain_settle", src, 0.2), sets,
                       setpoint, gains, src)
    safe, safe_value = None, None
    if "safe" in cmds:
        safe = cmds["safe"]
        safe_value = read_setpoint(setpoint, safe)
    elif rest is not None:
        safe = setpoint.render("setpoint", src, value=doc["rest"])
        safe_value = rest
    plan = Plan(commands=tuple(commands), safe=safe, eol=cmds.get("eol", "\n"), rest=rest,
                limits=_limits(doc, src), lead_in=_seconds(doc, "lead_in", src, dwell),
                source=src, safe_value=safe_value,
                safe_unchecked=cmds.get("safe_unchecked", False))
    if plan.limits is not None:
        _check_limits(plan, setpoint)
    return plan


def _limits(doc: dict[str, Any], src: str) -> Limits | None:
    raw = doc.get("limits")
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise InputError("limits must be a table", source=src)
    bad = sorted(set(raw) - {"min", "max", "max_step"})
    if bad:
        raise InputError(f"unknown key limits.{bad[0]}", source=src)
    lo, hi = _num(raw, "min", src), _num(raw, "max", src)
    step = _num(raw, "max_step", src, positive=True)
    if lo is None or hi is None or step is None:
        missing = [k for k, v in (("min", lo), ("max", hi), ("max_step", step)) if v is None]
        raise InputError(f"limits.{missing[0]} is missing (min, max and max_step are all"
                         " needed)", source=src)
    if lo > hi:
        raise InputError("limits.min is above limits.max", source=src)
    return Limits(low=lo, high=hi, max_step=step)


def _check_limits(plan: Plan, setpoint: Template) -> None:
    lim = plan.limits
    assert lim is not None
    src = plan.source
    if plan.rest is not None and not lim.low <= plan.rest <= lim.high:
        raise InputError(f"rest {plan.rest:g} is outside the limits [{lim.low:g},"
                         f" {lim.high:g}]", source=src)
    for c in plan.commands:
        if c.value is not None and not lim.low <= c.value <= lim.high:
            raise InputError(f"entry {c.entry}: setpoint {c.value:g} is outside the limits"
                             f" [{lim.low:g}, {lim.high:g}]", source=src)
    seq = plan.setpoints()
    for k in range(1, len(seq)):
        if abs(seq[k] - seq[k - 1]) > lim.max_step:
            where = "the first level" if k == 1 and plan.rest is not None else f"step {k}"
            raise InputError(f"{where}: a change of {seq[k] - seq[k - 1]:+g} from {seq[k - 1]:g}"
                             f" to {seq[k]:g} exceeds limits.max_step = {lim.max_step:g}",
                             source=src)
    _check_safe(plan, setpoint)


def _check_safe(plan: Plan, setpoint: Template) -> None:
    """The safe command is a setpoint inside the limits, within ``max_step`` of every level
    (it is sent whenever the plan stops), unless the plan allows an unchecked one."""
    lim, src, safe, v = plan.limits, plan.source, plan.safe, plan.safe_value
    assert lim is not None
    if safe is None:
        return
    if v is None:
        if plan.safe_unchecked:
            return
        raise InputError(f"commands.safe {safe!r} is not a setpoint command like"
                         f" {setpoint.text!r}, so it cannot be checked against the limits;"
                         " set commands.safe_unchecked = true to send it unchecked",
                         source=src)
    if not lim.low <= v <= lim.high:
        raise InputError(f"the safe command {safe!r} sends {v:g}, outside the limits"
                         f" [{lim.low:g}, {lim.high:g}]", source=src)
    levels = [c.value for c in plan.commands if c.value is not None]
    worst = max(levels, key=lambda x: abs(x - v))
    if abs(worst - v) > lim.max_step:
        raise InputError(f"the safe command {safe!r}: the return to {v:g} from level"
                         f" {worst:g} (a change of {v - worst:+g}; it is sent whenever the"
                         f" plan stops) exceeds limits.max_step = {lim.max_step:g}",
                         source=src)


def check_sendable(plan: Plan) -> None:
    """Raise :class:`InputError` unless the plan may be sent: limits, ``rest`` and a safe
    command are mandatory (the limits themselves were checked by :func:`parse_plan`)."""
    if plan.limits is None:
        raise InputError("a plan that is sent needs [limits] min, max and max_step",
                         source=plan.source)
    if plan.rest is None:
        raise InputError("a plan that is sent needs rest (the setpoint before the plan)",
                         source=plan.source)
    if plan.safe is None:  # pragma: no cover - rest gives a default safe command
        raise InputError("a plan that is sent needs commands.safe", source=plan.source)


def describe_plan(plan: Plan) -> list[str]:
    """Lines that show the plan before it is confirmed: limits, safe command, and every
    command with the time it is sent (seconds after the lead-in)."""
    lines = []
    if plan.limits is not None:
        lim = plan.limits
        lines.append(f"limits: setpoint {lim.low:g} .. {lim.high:g}, largest change"
                     f" {lim.max_step:g}")
    if plan.safe is None:
        checked = ""
    elif plan.safe_value is not None:
        checked = f" (the setpoint {plan.safe_value:g})"
    else:
        checked = " (NOT a setpoint: not checked against the limits)"
    lines.append(f"rest: {'-' if plan.rest is None else f'{plan.rest:g}'};"
                 f" safe command: {plan.safe!r}{checked}")
    lines.append(f"{len(plan.commands)} commands over {plan.duration:.1f} s, after"
                 f" {plan.lead_in:g} s of data:")
    t = 0.0
    for c in plan.commands:
        lines.append(f"  {c.entry:3d}  t+{t:7.2f} s  {c.text}")
        t += c.dwell
    return lines
