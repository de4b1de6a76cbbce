"""Comparing two sets of steps (two recordings, or two tags of one) quantity by quantity.

For each quantity defined in either set: the statistics of each
(:func:`livestep.judge.statistics.metric_stats`), the change of the mean B - A (and in
percent of |mean A|), whether that change is ``better`` or ``worse`` by the
quantity's preferred direction (:attr:`livestep.judge.quantities.Quantity.better`;
``same`` for no change, ``None`` when the quantity has no preferred direction or a
side has no value), and the p-value of Welch's two-sample t-test of the two means
(``scipy.stats.ttest_ind`` with ``equal_var=False``; Welch, 1947), which says how
likely a difference this large is from step-to-step scatter alone; ``significant``
when it is below 0.05 (the conventional level; common practice, no source). Pure:
no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from livestep.judge.quantities import QUANTITIES
from livestep.judge.statistics import MetricStats, metric_stats
from livestep.steps.analysis import StepResult

__all__ = ["BETTER", "SAME", "SIGNIFICANCE", "WORSE", "Comparison", "MetricChange", "compare",
           "judge_change"]

BETTER, WORSE, SAME = "better", "worse", "same"
SIGNIFICANCE = 0.05


@dataclass(frozen=True)
class MetricChange:
    """One quantity in both sets. ``change`` = mean B - mean A in the quantity's unit;
    ``change_pct`` = 100 change / |mean A| (``None`` when mean A is 0); ``judgement``:
    better, worse, same or ``None``; ``p_value``: Welch's t-test, ``None`` with fewer
    than 2 values on a side or no scatter on either."""

    quantity: str
    a: MetricStats
    b: MetricStats
    change: float | None
    change_pct: float | None
    judgement: str | None
    p_value: float | None

    @property
    def significant(self) -> bool | None:
        """Whether the change stands out of the scatter (p < 0.05); ``None``: no p-value."""
        return None if self.p_value is None else self.p_value < SIGNIFICANCE


@dataclass(frozen=True)
class Comparison:
    """``a_label`` and ``b_label`` name the two sets (a file, a tag); ``a_steps`` and
    ``b_steps`` count their steps."""

    a_label: str
    b_label: str
    a_steps: int
    b_steps: int
    changes: tuple[MetricChange, ...]

    def get(self, quantity: str) -> MetricChange | None:
        return next((c for c in self.changes if c.quantity == quantity), None)


def judge_change(change: float | None, better: str | None) -> str | None:
    """``better``/``worse``/``same`` for a change of the mean against the preferred
    direction ``better`` ("lower" or "higher"); ``None`` when either is unknown."""
    if change is None or better is None:
        return None
    if change == 0.0:
        return SAME
    return BETTER if (change < 0) == (better == "lower") else WORSE


def _welch(a: list[float], b: list[float]) -> float | None:
    if len(a) < 2 or len(b) < 2 or (np.ptp(a) == 0 and np.ptp(b) == 0):
        return None
    from scipy import stats

    p = float(stats.ttest_ind(a, b, equal_var=False).pvalue)
    return p if math.isfinite(p) else None


def _defined(values: list[float | None]) -> list[float]:
    return [v for v in values if v is not None and math.isfinite(v)]


def compare(a: Sequence[StepResult], b: Sequence[StepResult], a_label: str = "A",
            b_label: str = "B") -> Comparison:
    """Compare the steps ``a`` with the steps ``b`` (B is the new one: a change is B - A)."""
    changes = []
    for name, q in QUANTITIES.items():
        raw_a, raw_b = [q.get(r) for r in a], [q.get(r) for r in b]
        va, vb = _defined(raw_a), _defined(raw_b)
        if not va and not vb:
            continue
        sa, sb = metric_stats(name, raw_a), metric_stats(name, raw_b)
        change = None if sa.mean is None or sb.mean is None else sb.mean - sa.mean
        pct = None if change is None or sa.mean == 0 else 100.0 * change / abs(sa.mean)
        changes.append(MetricChange(name, sa, sb, change, pct, judge_change(change, q.better),
                                    _welch(va, vb)))
    return Comparison(a_label, b_label, len(a), len(b), tuple(changes))
