"""The report's overlay section: the steps of each gain set (or note value) on common axes,
when the session has several (the figure: :func:`livestep.reports.plots.overlay_figure`).

The groups are the overview's (:func:`livestep.reports.summary.overview_groups`); each
group's representative is its median step by overshoot (among the steps whose drive was
not at its limit, when there are such), as in the terminal UI's overlay
(:mod:`livestep.tui.overlay`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from livestep.reports.html_parts import e
from livestep.reports.summary import overview_groups
from livestep.steps.analysis import StepResult

__all__ = ["overlay_groups", "overlay_section"]


def _plottable(r: StepResult) -> bool:
    m = r.metrics
    return r.window is not None and np.isfinite(m.amplitude) and m.amplitude != 0


def overlay_groups(results: Sequence[StepResult]
                   ) -> tuple[str, list[tuple[str, StepResult, list[StepResult]]]]:
    """(how the steps are grouped, [(group, its median step by overshoot, its other steps)])
    for the groups with plotted steps; no groups when fewer than two have any, or when the
    grouping is only by direction (one session, one gain set)."""
    how, groups = overview_groups(results)
    if how == "direction":
        return how, []
    out = []
    for g in groups:
        kept = sorted((r for r in g.steps if _plottable(r)),
                      key=lambda r: (np.nan_to_num(r.metrics.overshoot_pct, nan=0.0), r.index))
        linear = [r for r in kept if r.limit is None] or kept  # a limited step is atypical
        if kept:
            rep = linear[(len(linear) - 1) // 2]
            out.append((g.key, rep, [r for r in kept if r is not rep]))
    return how, out if len(out) > 1 else []


def overlay_section(svg: str, how: str) -> str:
    """The HTML section around the overlay figure."""
    return ('<section id="overlay"><h2>Responses overlaid</h2><p>The steps of each'
            f" {e(how)} on common axes: time from the step instant, the response normalised to"
            " the step (0 before it, 1 at its final level), so steps of any size and"
            " direction compare. The thick line of each group is its median step by"
            " overshoot, the thin ones its other steps; the shaded band is the settling"
            f' band around the final level.</p><figure aria-label="responses overlaid">{svg}'
            "</figure></section>")
