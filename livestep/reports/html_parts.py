"""Small pieces of the report's HTML: escaping, verdict badges, values in display units.

Text from outside (file names, metadata, tags, profile names, reasons, warnings) goes
through :func:`e` wherever it is written.
"""

from __future__ import annotations

import html
from collections.abc import Sequence

from livestep.judge.quantities import QUANTITIES
from livestep.judge.verdict import FAIL, NOT_MEASURED, PASS, SYMBOLS, WARN
from livestep.reports.summary import display_unit

__all__ = ["e", "label", "limits_text", "num", "rows", "value", "verdict_badge",
           "verdict_class", "verdict_counts"]

_CLASS = {PASS: "v-pass", WARN: "v-warn", FAIL: "v-fail", NOT_MEASURED: "v-none"}


def e(x: object) -> str:
    """Text escaped for HTML content and attribute values."""
    return html.escape(str(x), quote=True)


def verdict_class(v: str) -> str:
    """The CSS class of a verdict (border style and background)."""
    return _CLASS[v]


def verdict_badge(v: str) -> str:
    """A verdict as symbol and word in a bordered badge (never colour alone)."""
    return f'<span class="verdict {_CLASS[v]}">{e(SYMBOLS[v])} {e(v)}</span>'


def verdict_counts(verdicts: Sequence[str], *, all_three: bool = False) -> str:
    """"2 ✔ pass, 1 ✘ fail": the count of each verdict (the zero ones too with
    ``all_three``), in the order pass, warn, fail."""
    parts = [f"{list(verdicts).count(v)} {verdict_badge(v)}" for v in (PASS, WARN, FAIL)
             if all_three or v in verdicts]
    return ", ".join(parts)


def _no_negative_zero(text: str) -> str:
    if text.startswith("-") and not any(ch in "123456789" for ch in text.split("e")[0]):
        return text[1:]
    return text


def num(x: float | None, fmt: str = ".4g") -> str:
    """A number, "-" for ``None``; never "-0"."""
    return "-" if x is None else _no_negative_zero(format(x, fmt))


def value(quantity: str, x: float | None) -> str:
    """A number in the quantity's display unit (the unit is in its label)."""
    return "-" if x is None else num(x * display_unit(quantity)[0])


def label(quantity: str) -> str:
    """The quantity's label with its display unit: "rise time (ms)"."""
    unit = display_unit(quantity)[1]
    return f"{QUANTITIES[quantity].label} ({unit})" if unit else QUANTITIES[quantity].label


def limits_text(quantity: str, low: float | None, high: float | None) -> str:
    """"≤ 120", "≥ 0.5", "2 .. 10" or "-" (display units)."""
    if low is None and high is None:
        return "-"
    if low is None:
        return f"\u2264 {value(quantity, high)}"
    if high is None:
        return f"\u2265 {value(quantity, low)}"
    return f"{value(quantity, low)} .. {value(quantity, high)}"


def rows(pairs: Sequence[tuple[str, str]]) -> str:
    """Two-column table rows; both cells are HTML already."""
    return "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in pairs)
