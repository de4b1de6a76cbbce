"""What the commands print, for scripts and colleagues: never wrapped or coloured off a
terminal, `--color` and NO_COLOR (no-color.org), `analyze --csv` that round-trips through
the `csv` module and pandas with its tags, the table's numbers and the verdict wording.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from livestep.cli import build_parser, main

ROOT = Path(__file__).resolve().parents[2]
BELT = ROOT / "fixtures" / "belt-axis.csv"
SPEC = ROOT / "fixtures" / "belt-axis-spec.toml"
ESC = "\x1b["  # the start of every ANSI colour or style sequence


def _env(**extra: str) -> dict[str, str]:
    """The environment of a child livestep: none of the variables that steer colour or
    width, unless given."""
    env = {k: v for k, v in os.environ.items()
           if k not in ("NO_COLOR", "FORCE_COLOR", "COLUMNS", "TTY_COMPATIBLE", "CLICOLOR")}
    env.update(extra)
    return env


def _run(*argv: str, **env: str) -> subprocess.CompletedProcess[str]:
    """livestep with stdout and stderr both pipes (as `| cat` or `> file` gives them)."""
    return subprocess.run([sys.executable, "-m", "livestep", *argv], capture_output=True,
                          text=True, cwd=ROOT, env=_env(**env), timeout=120)


def _run_on_a_terminal(*argv: str, **env: str) -> str:
    """livestep with stdout on a pseudo-terminal of 100 columns; what it printed there."""
    import fcntl
    import struct
    import termios

    main_fd, child_fd = os.openpty()
    fcntl.ioctl(child_fd, termios.TIOCSWINSZ, struct.pack("HHHH", 50, 100, 0, 0))
    proc = subprocess.Popen([sys.executable, "-m", "livestep", *argv], stdout=child_fd,
                            stderr=subprocess.DEVNULL, cwd=ROOT, env=_env(TERM="xterm", **env))
    os.close(child_fd)
    chunks = []
    while True:
        try:
            data = os.read(main_fd, 65536)
        except OSError:  # EIO: the child closed its end
            break
        if not data:
            break
        chunks.append(data)
    proc.wait(timeout=120)
    os.close(main_fd)
    return b"".join(chunks).decode("utf-8", "replace")


@pytest.fixture(scope="module")
def piped() -> subprocess.CompletedProcess[str]:
    """The issue's example: `livestep analyze fixtures/belt-axis.csv --profile ... | cat`."""
    return _run("analyze", str(BELT), "--profile", str(SPEC))


def test_piped_table_is_neither_wrapped_nor_coloured(piped) -> None:
    assert piped.returncode == 1  # some steps fail the line spec
    assert ESC not in piped.stdout and ESC not in piped.stderr
    lines = piped.stdout.splitlines()
    # The check line the issue saw cut after "the limit 350", whole.
    assert ("step 2: ▲ warn settling time 327 ms (max 350 ms): within 35 ms of the limit"
            " 350 ms") in lines
    # Every check line is whole: it ends with its limit and unit, never mid-phrase.
    checks = [ln for ln in lines if re.match(r"step \d+: [✘▲] ", ln)]
    assert len(checks) >= 10
    assert all(re.search(r"(the (minimum|maximum|limit) [\d.]+( ms| %)?)$", ln)
               for ln in checks), checks
    # Lines wider than 80 columns exist and stay single lines (the captions), and no line
    # is a wrapped remainder starting with a lower-case word fragment.
    assert max(len(ln) for ln in lines) > 200
    guidance = [ln for ln in lines if ln.startswith("  step ")]
    assert guidance and all("short" in ln for ln in guidance)


def test_the_table_never_shows_negative_zero(piped, capsys) -> None:
    # Clean steps have steady-state errors of either sign far below 0.005 %: the table
    # shows them as 0.00, without a sign; a real negative error keeps its sign.
    from _results import result

    from livestep.reports.tables import render_table
    from livestep.sinks.terminal import make_console

    errors = [-0.0027, -0.0001, 0.0004, -0.013, -1e-9, 0.0]
    steps = [result(k, steady_state_error_pct=x, steady_state_error=x / 10)
             for k, x in enumerate(errors)]
    render_table(steps, make_console(), title="t")
    rows = [ln.split() for ln in capsys.readouterr().out.splitlines() if re.match(r"\d \s", ln)]
    assert [row[7] for row in rows] == ["0.00", "0.00", "0.00", "-0.01", "0.00", "0.00"]
    # and the whole piped table of the demo recording
    assert "-0.00" not in piped.stdout
    assert not re.search(r"(?<![\w.])-0(\.0+)?(?![\d.])", piped.stdout)


def test_margins_of_percentages_are_percentage_points(piped) -> None:
    # The return-move section warns within 1 (a difference of percentages) of 5 %.
    assert re.search(r"^step \d+: ▲ warn overshoot [\d.]+ % \(max 5 %\): within 1 pp of the"
                     r" limit 5 %$", piped.stdout, re.M), piped.stdout
    assert "within 1 % of" not in piped.stdout


def test_statistics_say_why_there_is_no_limit_or_cpk(piped) -> None:
    lines = piped.stdout.splitlines()
    rows = {ln.split()[0]: ln for ln in lines[lines.index("statistics over 8 steps") + 1:]
            if ln and not ln.startswith(("─", " "))}
    # Rise, overshoot and settling limits differ between steps ([[when]] sections).
    for name in ("rise", "OS", "settle"):
        assert rows[name].endswith("per step  limits vary"), rows[name]
    # SSE and zeta have one limit for every step, but 8 steps are fewer than 30.
    assert re.search(r"<= 1 +n < 30$", rows["SSE"]), rows["SSE"]
    assert rows["zeta"].endswith("n < 30")
    caption = next(ln for ln in lines if ln.startswith("delay: to 50 %"))
    assert "[[when]] sections give some steps other limits" in caption
    assert "n >= 30 steps" in caption


@pytest.mark.parametrize("argv", [
    ["compare", str(BELT), "--tags", "gains=A", "gains=C"],
    ["analyze", str(BELT)],
])
def test_other_tables_piped(argv: list[str]) -> None:
    proc = _run(*argv)
    assert proc.returncode == 0, proc.stderr
    assert ESC not in proc.stdout and ESC not in proc.stderr
    assert max(len(ln) for ln in proc.stdout.splitlines()) > 100  # a caption, whole
    if argv[0] == "compare":  # a change of a percentage is in percentage points
        assert "change = B - A (of a quantity in %: percentage points)" in proc.stdout


def test_color_option_and_no_color(tmp_path: Path) -> None:
    args = ("analyze", str(BELT), "--profile", str(SPEC))
    # --color always colours a pipe too, and wins over NO_COLOR (no-color.org: a
    # command-line option overrides the variable).
    assert ESC in _run(*args, "--color", "always").stdout
    assert ESC in _run(*args, "--color", "always", NO_COLOR="1").stdout
    # On a terminal: colour by default, none with --color never or a non-empty NO_COLOR;
    # an empty NO_COLOR does not count.
    assert ESC in _run_on_a_terminal(*args)
    assert ESC in _run_on_a_terminal(*args, NO_COLOR="")
    assert ESC not in _run_on_a_terminal(*args, NO_COLOR="1")
    never = _run_on_a_terminal(*args, "--color", "never")
    assert ESC not in never and "✘ fail" in never
    # Still a terminal: rich fits the table to its 100 columns.
    assert max(len(ln) for ln in never.splitlines()) <= 100


def test_every_command_takes_color_and_one_profile_metavar() -> None:
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    assert set(sub.choices) >= {"analyze", "compare", "report", "live", "replay", "watch",
                                "ports", "demo", "sim"}
    for name, command in sub.choices.items():
        options = {o: a for a in command._actions for o in a.option_strings}
        assert options["--color"].choices == ("auto", "always", "never"), name
        if "--profile" in options:
            assert options["--profile"].metavar == "TOML", name
        assert "--profile FILE" not in command.format_help(), name


def test_consoles_off_a_terminal(capsys, monkeypatch) -> None:
    from rich.table import Table

    from livestep.sinks.terminal import make_console, set_color_mode

    monkeypatch.setenv("COLUMNS", "40")  # a pipe's width is not the terminal's
    monkeypatch.setenv("FORCE_COLOR", "1")  # nor does this make a pipe a terminal
    long = " ".join(f"word{k}" for k in range(60))
    console = make_console()
    console.print(f"[bold red]{long}[/]")
    table = Table("a", "b")
    table.add_row(long, "x")
    console.print(table)
    out = capsys.readouterr().out
    assert ESC not in out and long in out.splitlines()[0]
    assert any(long in ln and ln.rstrip().endswith("x │") for ln in out.splitlines())
    try:
        set_color_mode("always")
        make_console(stderr=True).print("[red]red[/]")
        assert ESC + "31m" in capsys.readouterr().err
    finally:
        set_color_mode("auto")


def test_the_terminal_ui_hears_the_color_option(monkeypatch) -> None:
    from textual.app import App

    from livestep.sinks.terminal import textual_color

    # textual turns monochrome when NO_COLOR is present at all (App.no_color); livestep
    # follows no-color.org, where an empty value does not count, and --color decides.
    cases = [("never", None, True), ("always", "1", False), ("auto", "", False),
             ("auto", "1", True), ("auto", None, False)]
    for mode, env, mono in cases:
        if env is None:
            monkeypatch.delenv("NO_COLOR", raising=False)
        else:
            monkeypatch.setenv("NO_COLOR", env)
        with textual_color(mode):
            assert App().no_color is mono, (mode, env)
        assert os.environ.get("NO_COLOR") == env  # restored


def test_bad_color_value_is_one_line(capsys) -> None:
    assert main(["analyze", str(BELT), "--color", "sometimes"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--color" in err and "invalid choice" in err


def test_live_check_lines_are_not_wrapped(tmp_path: Path) -> None:
    # The demo's console output is live's: steps, verdicts and the checks that did not
    # pass, printed by the console sink while the session runs.
    proc = _run("demo", "--quick", "--console", "--no-record")
    assert proc.returncode == 0, proc.stderr
    assert ESC not in proc.stdout and ESC not in proc.stderr
    lines = proc.stdout.splitlines()
    steps = [ln for ln in lines if ln.startswith("step ")]
    checks = [ln for ln in lines if re.match(r"  [✘▲] (fail|warn): ", ln)]
    assert steps and checks
    # Each printed line is one of the sink's kinds: nothing is a wrapped remainder.
    kinds = ("step ", "  ", "note at ", "link ")
    assert all(ln.startswith(kinds) for ln in lines if ln), lines
    assert max(len(ln) for ln in steps) > 80
    assert all(re.search(r"\((min|max) [^)]*\)(: .+)?$", ln) for ln in checks), checks


# -- analyze --csv ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def tagged_csv(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, dict]:
    """analyze --csv and --json of the demo recording with two note names: the recording's
    own `gains` and a `load` note with a comma, a quote and a space in its value."""
    text = BELT.read_text().splitlines(keepends=True)
    at = next(i for i, ln in enumerate(text) if ln.startswith("11.0"))  # t = 11 s: steps 5-7
    t = text[at].split(",")[0]
    text.insert(at + 1, f'# note: {t} load=half, "wet" belt\n')
    path = tmp_path_factory.mktemp("csv") / "tagged.csv"
    path.write_text("".join(text))
    out_csv = _run("analyze", str(path), "--csv", "--profile", str(SPEC))
    out_json = _run("analyze", str(path), "--json", "--profile", str(SPEC))
    return out_csv.stdout, json.loads(out_json.stdout)


def _resolution(column: str, step: dict) -> float:
    """The CSV's documented resolution of a column (README, "analyze --csv")."""
    if column in {"t_step", "rise_time", "delay_time", "peak_time", "settling_time",
                  "sample_period", "model_dead_time", "model_settling_time_estimate"}:
        return 10.0 ** math.floor(math.log10(step["sample_period"] / 100)) / 2
    if column in {"setpoint_before", "setpoint_after", "initial", "final", "amplitude",
                  "peak", "steady_state_error", "noise_sigma"}:
        return 10.0 ** (math.floor(math.log10(abs(step["amplitude"]))) - 5) / 2
    return None  # 6 significant digits


def _json_value(step: dict, column: str):
    if column.startswith("model_"):
        return (step["model"] or {}).get(column[len("model_"):])
    return step[column]


def test_csv_round_trips_through_the_csv_module(tagged_csv) -> None:
    text, doc = tagged_csv
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == len(doc["steps"]) == 8
    header = next(csv.reader(io.StringIO(text)))
    assert header[-4:] == ["tag_gains", "tag_load", "verdict", "failed"]
    for row, step in zip(rows, doc["steps"], strict=True):
        # tags: one column per note name, the value exactly, empty where not carried
        assert {k[4:]: v for k, v in row.items() if k.startswith("tag_") and v} == step["tags"]
        assert row["settled"] == ("true" if step["settled"] else "false")
        assert row["verdict"] == step["verdict"]
        assert row["failed"].split() == [c["quantity"] for c in step["checks"]
                                         if c["verdict"] == "fail"]
        for column, cell in row.items():
            want = _json_value(step, column) if column in header[:31] else None
            if not isinstance(want, float) or isinstance(want, bool):
                continue
            got = float(cell)
            res = _resolution(column, step)
            if res is None:
                assert got == pytest.approx(want, rel=5e-6, abs=1e-300), column
                # no float noise: at most 6 significant digits
                assert len(re.sub(r"[-.]|e.*$", "", cell).lstrip("0")) <= 6, (column, cell)
            else:
                assert abs(got - want) <= res * 1.0000001, (column, cell, want)
            assert cell != "-0"
    assert rows[5]["tag_load"] == 'half, "wet" belt' and rows[4]["tag_load"] == ""


def test_csv_round_trips_through_pandas(tagged_csv) -> None:
    import pandas as pd  # in the test extra
    text, doc = tagged_csv
    df = pd.read_csv(io.StringIO(text), dtype={"tag_gains": str, "tag_load": str})
    assert len(df) == 8 and df["settled"].dtype == bool
    assert df["t_step"].dtype.kind == "f" and df["model_zeta"].dtype.kind == "f"
    assert list(df["tag_gains"]) == [s["tags"]["gains"] for s in doc["steps"]]
    assert df["tag_load"].isna().sum() == 5 and df.loc[5, "tag_load"] == 'half, "wet" belt'
    assert list(df["t_step"]) == pytest.approx([s["t_step"] for s in doc["steps"]], abs=1e-6)
    assert list(df["overshoot_pct"]) == pytest.approx(
        [s["overshoot_pct"] for s in doc["steps"]], rel=1e-5)
    # Written back and read again, nothing changes (pandas' own round trip).
    again = pd.read_csv(io.StringIO(df.to_csv(index=False)),
                        dtype={"tag_gains": str, "tag_load": str})
    pd.testing.assert_frame_equal(df, again)
    by_gains = df.groupby("tag_gains")["overshoot_pct"].mean()
    assert by_gains["A"] == pytest.approx(doc["steps"][0]["overshoot_pct"], rel=1e-3)
