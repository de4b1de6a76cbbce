"""The step panel while a step is under way (a pure rich renderable)."""

from __future__ import annotations

import io

from rich.console import Console

from livestep.steps.progress import StepProgress
from livestep.tui.views import under_way_panel


def text_of(renderable) -> str:
    out = io.StringIO()
    Console(file=out, width=80, color_system=None).print(renderable)
    return out.getvalue()


def test_under_way_panel_says_what_is_known_so_far() -> None:
    rising = StepProgress(t_step=2.288, direction="up", size=1.0, elapsed=0.02, phase="rising")
    text = text_of(under_way_panel(rising))
    assert "step under way  up +1 at 2.288 s" in text and "rising" in text
    assert "rise " not in text and "peak" not in text
    settling = StepProgress(t_step=2.288, direction="up", size=1.0, elapsed=0.16,
                            phase="settling", rise_time=0.0409, peak_time=0.0925,
                            overshoot_pct=16.86)
    text = text_of(under_way_panel(settling))
    assert "settling" in text and "40.9 ms" in text and "16.9 % at 92.5 ms" in text


def test_the_step_panel_gives_margins_of_percentages_in_points() -> None:
    from _results import result

    from livestep.judge.profile import parse_profile
    from livestep.judge.verdict import judge
    from livestep.live.watch import StepEntry
    from livestep.tui.views import step_panel

    r = result(overshoot_pct=12.0)
    v = judge(r, parse_profile("[limits]\novershoot_pct = { max = 20 }\n"))
    text = text_of(step_panel(StepEntry(r, v), live=True))
    assert "8 pp" in text and "8 %" not in text  # 20 % - 12 % is 8 percentage points
