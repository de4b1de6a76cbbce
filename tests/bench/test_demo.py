"""``livestep demo``: the virtual bench, the built-in plan and the live path, end to end."""

from __future__ import annotations

import json

from livestep.bench.demo import demo_plan
from livestep.cli import main


def test_demo_measures_every_planned_step_and_records_them(tmp_path, capsys):
    rec = tmp_path / "demo.csv"
    assert main(["demo", "--quick", "--record", str(rec)]) == 0
    out, err = capsys.readouterr()
    plan = demo_plan(quick=True)
    n_steps = sum(c.kind == "setpoint" for c in plan.commands)
    lines = [ln for ln in out.splitlines() if ln.startswith("step ")]
    assert len(lines) == n_steps, out + err
    # each printed step names its plan entry and gain set
    # (tags sorted by name: the plan's entry, and the gains the bench echoes as notes)
    assert "[gains=soft, kd=0.1, ki=60, kp=20, plan_entry=2, repeat=1, setpoint=5]" \
        in lines[0], lines[0]
    assert "gains=firm" in lines[-1]
    # each step is judged against the built-in demo spec (overshoot at most 20 %): the soft
    # set overshoots far past it (more than 50 %) and fails; the firm set does not fail
    assert lines[0].endswith(": ✘ fail") and lines[1].endswith(": ✘ fail")
    assert not any(ln.endswith("✘ fail") for ln in lines[4:6])
    assert "plan: sent the safe command 'sp 0'" in err
    # the recording reads back offline with the same steps; the device clock wrapped after
    # 3 s of it without breaking the time line
    result = main(["analyze", str(rec), "--json"])
    doc = json.loads(capsys.readouterr().out)
    assert result == 0 and len(doc["steps"]) == n_steps
    # ... and the same tags, from the recording's notes
    assert [s["tags"]["plan_entry"] for s in doc["steps"]] == ["2", "3", "5", "6", "8", "9",
                                                               "10", "11"]
    assert doc["steps"][-1]["tags"]["kd"] == "0.3"
    t = [s["t_step"] for s in doc["steps"]]
    assert all(0.4 < b - a < 0.9 for a, b in zip(t, t[1:], strict=False)), t
    assert t[-1] > 3.0
    # more derivative gain, less overshoot: the mean of each gain set's up and down steps
    os_ = [s["overshoot_pct"] for s in doc["steps"]]
    soft, medium, firm = (sum(os_[k:k + 2]) / 2 for k in (0, 2, 4))
    assert soft > medium > firm, os_
    # the long move under the last gain set (40 mm out and back) asks the axis for more
    # than its 250 N: kp 20 N/mm x 40 mm = 800 N at the step instant (proportional kick,
    # common practice, no source), so its force channel sits at +250 N, then at -250 N on
    # the way back, during the rise; the 5 mm steps (kick 100 N) never reach it
    limits = [s["output_limit"] for s in doc["steps"]]
    assert limits[:6] == [None] * 6, limits
    assert [(x["channel"], x["value"]) for x in limits[6:]] == [("force", 250.0),
                                                                ("force", -250.0)]
    assert all(0.005 < x["duration"] < 0.05 for x in limits[6:]), limits
    assert all(s["warnings"][0].startswith("force at its limit") for s in doc["steps"][6:])
    assert all(s["tags"]["move"] == "long" and s["tags"]["gains"] == "firm"
               for s in doc["steps"][6:])
    assert "force at its limit" in out  # the console says it under the step


def test_demo_stops_when_asked_and_sends_the_safe_command(tmp_path, capsys):
    # how a terminal UI runs it: in a worker thread, with its own sink, ended by an event
    import threading

    from livestep.bench.demo import run_demo
    from livestep.sinks.base import Sink

    class Steps(Sink):
        def __init__(self) -> None:
            self.steps = []

        def on_step(self, result, verdict=None) -> None:
            self.steps.append(result)

    sink, stop, status = Steps(), threading.Event(), []
    worker = threading.Thread(target=lambda: status.append(run_demo(
        record=None, sinks=[sink], print_steps=False, stop=stop)))
    worker.start()
    threading.Timer(2.5, stop.set).start()
    worker.join(30)
    err = capsys.readouterr().err
    assert status == [130]  # stopped before the plan's end
    assert "plan: sent the safe command 'sp 0'" in err
    assert 1 <= len(sink.steps) < 12
    assert dict(sink.steps[0].tags)["gains"] == "soft"
