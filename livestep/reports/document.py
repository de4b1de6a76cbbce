"""Making a report: verdicts, figures and statistics for a list of steps, written as one
HTML file (and PNG files of the plots, if asked)."""

from __future__ import annotations

import datetime as dt
import os
import tempfile
from collections.abc import Sequence
from pathlib import Path

from livestep import __version__
from livestep.errors import InputError
from livestep.judge.profile import Profile
from livestep.judge.quantities import QUANTITIES
from livestep.judge.statistics import session_statistics
from livestep.judge.verdict import StepVerdict, judge
from livestep.reports.overlay import overlay_groups, overlay_section
from livestep.reports.page import ReportContent, render_page
from livestep.reports.plots import (
    TrendPoint,
    overlay_figure,
    save_png,
    step_figure,
    svg_text,
    trend_figure,
)
from livestep.reports.session_info import SessionInfo
from livestep.reports.summary import display_unit, report_quantities
from livestep.steps.analysis import StepResult
from livestep.steps.measure import MeasureSettings

__all__ = ["write_report"]


def _trend_points(results: Sequence[StepResult], quantity: str,
                  verdicts: Sequence[StepVerdict] | None) -> list[TrendPoint]:
    scale = display_unit(quantity)[0]

    def scaled(x: float | None) -> float | None:
        return None if x is None else scale * x

    points = []
    for i, r in enumerate(results):
        check = None
        if verdicts is not None:
            check = next((c for c in verdicts[i].checks if c.quantity == quantity), None)
        points.append(TrendPoint(r.index, scaled(QUANTITIES[quantity].get(r)),
                                 check.verdict if check else None,
                                 scaled(check.low) if check else None,
                                 scaled(check.high) if check else None))
    return points


def _write_atomically(path: Path, text: str) -> None:
    """Write through a temporary file in the same folder, so a reader never sees half a
    report and a failed run leaves any earlier report in place."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    except OSError as exc:
        raise InputError(f"{path}: cannot write ({exc.strerror or exc})") from None
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException as exc:
        Path(tmp).unlink(missing_ok=True)
        if isinstance(exc, OSError):
            raise InputError(f"{path}: cannot write ({exc.strerror or exc})") from None
        raise


def write_report(path: str | Path, results: Sequence[StepResult], session_info: SessionInfo,
                 profile: Profile | None = None, png_dir: str | Path | None = None, *,
                 measure: MeasureSettings | None = None) -> Path:
    """Write the HTML report of ``results`` to ``path``; returns the path.

    ``results`` need their samples for the step plots (analyse with
    ``AnalysisSettings(keep_windows=True)``; a step without them gets no plot).
    ``session_info`` describes the recording (:func:`livestep.reports.read_session_info`).
    With ``profile`` every step is judged against it. ``measure``: the settings the
    steps were measured with (their settling band and rise levels are drawn; default
    ``MeasureSettings()``). With
    ``png_dir`` (created if needed) the plots are written there as well, as
    ``step-NNN.png``, ``trend-<quantity>.png`` and ``overlay.png`` (the steps of each gain
set on common axes, when there are several). Raises :class:`InputError` when a
    file cannot be written.
    """
    path = Path(path)
    measure = measure or MeasureSettings()
    verdicts = [judge(r, profile) for r in results] if profile is not None else None
    quantities = report_quantities(results, profile)
    png = Path(png_dir) if png_dir is not None else None
    if png is not None and png.exists() and not png.is_dir():
        raise InputError(f"{png}: exists and is not a folder (for the PNG files)")
    try:
        if png is not None:
            png.mkdir(parents=True, exist_ok=True)
        step_svgs = {}
        for r in results:
            if r.window is None:
                continue
            fig = step_figure(r, settling_band=measure.settling_band,
                              rise_levels=measure.rise_levels)
            step_svgs[r.index] = svg_text(fig, f"s{r.index}-")
            if png is not None:
                save_png(fig, png / f"step-{r.index:03d}.png")
        overlay = ""
        how, groups = overlay_groups(results)
        if groups:  # several gain sets (or note values): their steps on common axes
            fig = overlay_figure(groups, settling_band=measure.settling_band)
            overlay = overlay_section(svg_text(fig, "o-"), how)
            if png is not None:
                save_png(fig, png / "overlay.png")
        trend_svgs = []
        for q in quantities if results else ():  # no steps: nothing to plot
            fig = trend_figure(_trend_points(results, q, verdicts), label=QUANTITIES[q].label,
                               unit=display_unit(q)[1])
            trend_svgs.append((q, svg_text(fig, f"t-{q}-")))
            if png is not None:
                save_png(fig, png / f"trend-{q}.png")
        content = ReportContent(
            results=results, session=session_info, measure=measure, quantities=quantities,
            stats=session_statistics(results, profile),
            step_svgs=step_svgs, trend_svgs=trend_svgs, profile=profile, verdicts=verdicts,
            overlay=overlay,
            generated=dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
            version=__version__)
        _write_atomically(path, render_page(content))
    except OSError as exc:  # the PNG folder or files
        raise InputError(f"{exc.filename or png_dir}: cannot write"
                         f" ({exc.strerror or exc})") from None
    return path
