"""What a step plan's command lines may contain: every line that leaves livestep is
checked as it will be sent, not as it was meant.

A command line is printable ASCII (no control character such as a newline, NUL or
escape, nothing invisible) and holds none of ``;``, ``|`` or ``&``, which many command
syntaxes read as the end of one command and the start of another. A template field
renders a number faithfully: a plain numeric format spec only (``{value}``,
``{value:.2f}``, ``{value:g}``, a width, a sign, zero padding), never a conversion
(``!s``), a percent (``%`` scales by 100), grouping (``1,000``), a locale (``n``), a
fill or alignment that pads on the right (``0<5`` appends zeros); and the characters
around it in the template cannot extend the number (``{value}0``, ``-{value}``,
``{value}e3``). The rendered text is read back and must equal the value it was made
from, so what is checked against the limits is exactly what the controller reads.

A literal safe command is read back through the setpoint template (``sp 0`` with
``sp {value:g}`` is the setpoint 0) and checked like a level; one that is not a setpoint
command (``motor off``) cannot be checked and is refused unless the plan says
``safe_unchecked = true``.
"""

from __future__ import annotations

import math
import re
import string
from dataclasses import dataclass

from livestep.errors import InputError

__all__ = ["SEPARATORS", "Template", "check_line", "parse_template", "read_setpoint"]

SEPARATORS = ";|&"
# A Python format spec, read field by field (the spec is the user's own, a few characters).
_SPEC = re.compile(r"(?:(?P<fill>.)?(?P<align>[<>=^]))?(?P<sign>[-+ ])?(?P<z>z)?(?P<alt>#)?"
                   r"(?P<zero>0)?(?P<width>\d+)?(?P<grouping>[,_])?(?:\.(?P<precision>\d+))?"
                   r"(?P<type>[a-zA-Z%]?)", re.S)
_NUMBER = re.compile(r" *([-+]?(?:\d++(?:\.\d*+)?|\.\d++)(?:[eE][-+]?\d++)?)")
_BEFORE = set("0123456789.+-")  # a template character just before a field must not be these
_AFTER = set("0123456789.eE")  # nor just after it


def check_line(text: str, what: str, src: str) -> None:
    """Refuse (:class:`InputError`) a command line that is not printable ASCII or holds a
    command separator."""
    bad = next((ch for ch in text if not " " <= ch <= "~"), None)
    if bad is not None:
        raise InputError(f"{what} {text!r}: holds the character {bad!r}; a command line"
                         " is printable ASCII only (no control characters)", source=src)
    sep = next((ch for ch in text if ch in SEPARATORS), None)
    if sep is not None:
        raise InputError(f"{what} {text!r}: holds {sep!r}, which could end one command and"
                         " start another; one command per line", source=src)


@dataclass(frozen=True)
class Template:
    """A checked command template: literal ``parts`` around the ``fields`` (name, spec),
    ``parts`` one longer than ``fields``."""

    text: str
    parts: tuple[str, ...]
    fields: tuple[tuple[str, str], ...]

    def render(self, what: str, src: str, **values: object) -> str:
        """The command for ``values``, each number read back and compared with its value;
        :class:`InputError` when a rendering would not be what it stands for."""
        out = [self.parts[0]]
        for (name, spec), part in zip(self.fields, self.parts[1:], strict=True):
            if name not in values:
                raise InputError(f"{what} template {self.text!r}: no value for {{{name}}}",
                                 source=src)
            value = values[name]
            try:
                shown = format(value, spec)
            except (ValueError, TypeError) as exc:
                raise InputError(f"{what} template {self.text!r}: {exc}", source=src) from None
            if isinstance(value, int | float) and not isinstance(value, bool):
                try:
                    back = float(shown)
                except ValueError:
                    back = math.nan
                if not math.isclose(back, float(value), rel_tol=1e-9, abs_tol=1e-12):
                    raise InputError(f"{what} template {self.text!r} renders {value!r} as"
                                     f" {shown!r}, not the same number; give a format that"
                                     " keeps it (e.g. {" + name + "} or {" + name + ":g})",
                                     source=src)
            out += [shown, part]
        text = "".join(out)
        check_line(text, what, src)
        return text


def parse_template(text: str, what: str, src: str, *, numeric: set[str],
                   names: set[str] = frozenset()) -> Template:  # type: ignore[assignment]
    """Check a template: its literal text (printable ASCII, no separator), each field a
    known name (``numeric``: numbers with a plain numeric spec; ``names``: text, no spec),
    no conversion, nothing around a number that could extend it."""
    try:
        pieces = list(string.Formatter().parse(text))
    except ValueError as exc:
        raise InputError(f"{what} template {text!r}: {exc}", source=src) from None
    parts, fields = [], []
    for literal, name, spec, conversion in pieces:
        parts.append(literal)
        if name is None:
            continue
        if name == "" or name.isdigit():
            raise InputError(f"{what} template {text!r}: use named fields like {{value}}",
                             source=src)
        if conversion is not None:
            raise InputError(f"{what} template {text!r}: no conversion (!{conversion}) in"
                             f" {{{name}}}: the number must be rendered as a number",
                             source=src)
        if "{" in (spec or ""):
            raise InputError(f"{what} template {text!r}: no nested fields", source=src)
        if name in numeric:
            _check_spec(text, what, src, name, spec or "")
        elif name in names:
            if spec:
                raise InputError(f"{what} template {text!r}: {{{name}}} takes no format spec",
                                 source=src)
        else:
            known = ", ".join("{" + n + "}" for n in sorted(numeric | names))
            raise InputError(f"{what} template {text!r}: no value for {{{name}}} (fields:"
                             f" {known})", source=src)
        fields.append((name, spec or ""))
    if len(parts) == len(fields):
        parts.append("")
    check_line("".join(parts), f"{what} template", src)
    for k, (name, _) in enumerate(fields):
        if name not in numeric:
            continue
        before, after = parts[k][-1:], parts[k + 1][:1]
        if (before and before in _BEFORE) or (after and after in _AFTER):
            raise InputError(f"{what} template {text!r}: {{{name}}} touches"
                             f" {(before if before in _BEFORE else after)!r}, which would"
                             " change the number the controller reads", source=src)
    return Template(text=text, parts=tuple(parts), fields=tuple(fields))


def _check_spec(text: str, what: str, src: str, name: str, spec: str) -> None:
    m = _SPEC.fullmatch(spec)
    why = None
    if m is None:
        why = "is not a format spec"
    elif m["type"] not in ("", "e", "E", "f", "F", "g", "G"):
        why = {"%": "scales the number by 100", "n": "depends on the locale"}.get(
            m["type"], f"is not a plain number format (type {m['type']!r})")
    elif m["grouping"]:
        why = "groups digits, which reads as two numbers"
    elif m["align"] in ("<", "^") or (m["fill"] not in (None, " ", "0")):
        why = "pads with characters that would change the number"
    if why is not None:
        raise InputError(f"{what} template {text!r}: the spec {spec!r} of {{{name}}} {why}",
                         source=src)


def read_setpoint(template: Template, text: str) -> float | None:
    """The setpoint a command line sends when it has the setpoint template's shape
    (``sp 0`` for ``sp {value:g}``), else ``None``."""
    prefix, suffix = template.parts[0], template.parts[-1]
    if len(template.fields) != 1 or not (text.startswith(prefix) and text.endswith(suffix)):
        return None
    middle = text[len(prefix):len(text) - len(suffix)]
    m = _NUMBER.fullmatch(middle)
    return float(m[1]) if m else None
