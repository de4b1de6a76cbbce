"""`livestep analyze`: outputs, the JSON contract, and bad input."""

from __future__ import annotations

import csv
import io
import json
import math
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from livestep.cli import main
from livestep.judge.quantities import QUANTITIES

ROOT = Path(__file__).resolve().parents[2]
ZETA, WN, RATE = 0.4, 30.0, 2000.0
STEP_KEYS = {"index", "t_step", "direction", "setpoint_before", "setpoint_after", "initial",
             "final", "amplitude", "rise_time", "delay_time", "peak_time", "peak",
             "overshoot_pct", "undershoot_pct", "settling_time", "settled",
             "steady_state_error", "steady_state_error_pct", "iae", "ise", "itae",
             "noise_sigma", "model", "warnings"}
MODEL_KEYS = {"zeta", "wn", "gain", "dead_time", "fit_r2"}


@pytest.fixture(scope="module")
def recording(tmp_path_factory) -> Path:
    """Three steps (up, down, up from an offset) of wn^2/(s^2 + 2 zeta wn s + wn^2),
    simulated by scipy.signal.lsim, written with 6 decimals."""
    t = np.arange(int(6 * RATE)) / RATE
    sp = np.select([t < 1.5, t < 3.0, t < 4.5], [10.0, 12.0, 9.0], 9.5)
    sys_ = signal.TransferFunction([WN**2], [1.0, 2 * ZETA * WN, WN**2])
    _, y, _ = signal.lsim(sys_, sp - sp[0], t)
    path = tmp_path_factory.mktemp("rec") / "axis.csv"
    with path.open("w") as fh:
        fh.write("# source: simulated axis\nt,setpoint,feedback\n")
        np.savetxt(fh, np.column_stack((t, sp, sp[0] + y)), fmt="%.6f", delimiter=",")
    return path


def run_cli(capsys, *argv: str) -> tuple[int, str, str]:
    status = main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


def test_json_contract_and_values(capsys, recording):
    status, out, err = run_cli(capsys, "analyze", str(recording), "--json")
    assert status == 0, err
    doc = json.loads(out)
    assert doc["source"] == str(recording) and doc["samples"] == 12000
    steps = doc["steps"]
    assert [s["direction"] for s in steps] == ["up", "down", "up"]
    assert [s["t_step"] for s in steps] == pytest.approx([1.5, 3.0, 4.5])
    # Closed form (Ogata): %OS = 100 exp(-zeta pi / sqrt(1 - zeta^2)), Tp = pi / wd.
    os_pct = 100 * math.exp(-ZETA * math.pi / math.sqrt(1 - ZETA**2))
    tp = math.pi / (WN * math.sqrt(1 - ZETA**2))
    for s in steps:
        assert STEP_KEYS <= s.keys() and MODEL_KEYS <= s["model"].keys()
        assert s["overshoot_pct"] == pytest.approx(os_pct, abs=0.3)
        assert s["peak_time"] == pytest.approx(tp, rel=0.01)
        assert s["settled"] is True
        assert s["model"]["zeta"] == pytest.approx(ZETA, rel=0.03)
        assert s["model"]["wn"] == pytest.approx(WN, rel=0.03)
        assert s["model"]["gain"] == pytest.approx(1.0, abs=0.01)
        assert s["amplitude"] == pytest.approx(s["setpoint_after"] - s["setpoint_before"],
                                               abs=0.002 * abs(s["amplitude"]))


def test_csv_output_has_one_row_per_step(capsys, recording):
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--csv")
    assert status == 0
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 3 and {"rise_time", "model_zeta"} <= rows[0].keys()
    assert [r["direction"] for r in rows] == ["up", "down", "up"]


def test_table_output(capsys, recording):
    status, out, _ = run_cli(capsys, "analyze", str(recording))
    assert status == 0 and "3 steps" in out


def test_settings_reach_the_measurement(capsys, recording):
    _, out, _ = run_cli(capsys, "analyze", str(recording), "--json")
    _, wide, _ = run_cli(capsys, "analyze", str(recording), "--json", "--settling-band", "5",
                         "--rise-levels", "5,95", "--no-fit")
    narrow_s, wide_s = json.loads(out)["steps"][0], json.loads(wide)["steps"][0]
    assert wide_s["settling_time"] < narrow_s["settling_time"]
    assert wide_s["rise_time"] > narrow_s["rise_time"]
    assert wide_s["model"] is None


@pytest.mark.parametrize(("argv", "message"), [
    (["analyze", "/nonexistent.csv"], "no such file"),
    (["analyze", "{file}", "--rise-levels", "90,10"], "rise levels"),
    (["analyze", "{file}", "--settling-band", "-1"], "positive"),
    (["analyze", "{file}", "--time-unit", "h"], "invalid choice"),
    (["analyze", "{file}", "--feedback", "nope"], "no feedback column 'nope'"),
    (["frobnicate"], "invalid choice"),
])
def test_bad_options_are_one_line_with_status_2(capsys, recording, argv, message):
    argv = [a.replace("{file}", str(recording)) for a in argv]
    status, out, err = run_cli(capsys, *argv)
    assert status == 2
    assert message in err and err.count("\n") == 1 and "Traceback" not in err


def test_bad_file_through_python_m(tmp_path):
    bad = tmp_path / "junk.csv"
    bad.write_bytes(bytes(range(256)) * 10)
    proc = subprocess.run([sys.executable, "-m", "livestep", "analyze", str(bad)],
                          capture_output=True, text=True, cwd=ROOT)
    assert proc.returncode == 2
    assert proc.stderr.startswith("livestep: error:") and proc.stderr.count("\n") == 1


def test_skipped_cells_are_reported(capsys, tmp_path, recording):
    lines = recording.read_text().splitlines(keepends=True)
    lines[100] = "0.049,10.0,n/a\n"
    path = tmp_path / "gappy.csv"
    path.write_text("".join(lines))
    status, out, err = run_cli(capsys, "analyze", str(path), "--json")
    assert status == 0
    assert "skipped 1 bad data rows (first at line 101)" in err
    assert json.loads(out)["samples"] == 11999


def test_shipped_example_runs(capsys):
    status, out, err = run_cli(capsys, "analyze", str(ROOT / "fixtures" / "belt-axis.csv"),
                               "--json")
    assert status == 0, err
    assert len(json.loads(out)["steps"]) == 8


# %OS of the recording's loop, closed form (Ogata): 25.4 % at zeta = 0.4.
OS_PCT = 100 * math.exp(-ZETA * math.pi / math.sqrt(1 - ZETA**2))


def test_profile_verdicts_in_json_and_exit_status(capsys, recording, write_file):
    loose = write_file("loose.toml", "[limits]\novershoot_pct = { max = 30 }\n")
    status, out, err = run_cli(capsys, "analyze", str(recording), "--json", "--profile",
                               str(loose))
    doc = json.loads(out)
    assert status == 0, err
    assert doc["profile"] == {"name": "loose", "source": str(loose)}
    assert [s["verdict"] for s in doc["steps"]] == ["pass"] * 3
    check = doc["steps"][0]["checks"][0]
    assert check["quantity"] == "overshoot_pct" and check["max"] == 30
    assert check["value"] == pytest.approx(OS_PCT, abs=0.3)
    assert check["margin"] == pytest.approx(30 - check["value"])
    assert "3 steps, 3 pass, 0 warn, 0 fail" in err
    # Only the down step is held to 20 %: it alone fails, and the run's status is 1.
    down = write_file("down.toml", "[limits]\novershoot_pct = { max = 30 }\n[[when]]\n"
                      "direction = \"down\"\n[when.limits]\novershoot_pct = { max = 20 }\n")
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--json", "--profile",
                             str(down))
    steps = json.loads(out)["steps"]
    assert status == 1 and [s["verdict"] for s in steps] == ["pass", "fail", "pass"]
    assert steps[1]["checks"][0]["rule"] == "when #1"
    assert steps[1]["checks"][0]["reason"] == "above the maximum 20 %"


def test_profile_in_table_and_csv(capsys, recording, write_file):
    tight = write_file("tight.toml", "[limits]\novershoot_pct = { max = 20 }\n")
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--profile", str(tight))
    assert status == 1
    assert out.count("✘ fail") == 3 + 3  # the verdict column and one line per failed check
    assert "overshoot 25.4 % (max 20 %): above the maximum 20 %" in out
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--csv", "--profile",
                             str(tight))
    rows = list(csv.DictReader(io.StringIO(out)))
    assert [(r["verdict"], r["failed"]) for r in rows] == [("fail", "overshoot_pct")] * 3


def test_profile_sets_the_settling_band_unless_the_option_does(capsys, recording, write_file):
    def settling(*argv):
        _, out, _ = run_cli(capsys, "analyze", str(recording), "--json", *argv)
        return [s["settling_time"] for s in json.loads(out)["steps"]]

    wide = write_file("wide.toml", "settling_band = 5\n[limits]\nzeta = { min = 0.1 }\n")
    by_option = settling("--settling-band", "5")
    assert settling("--profile", str(wide)) == by_option
    assert settling() != by_option  # the 2 % default differs
    assert settling("--profile", str(wide), "--settling-band", "2") == settling()


def test_no_step_to_judge_fails_the_gate(capsys, tmp_path, write_file):
    flat = tmp_path / "flat.csv"
    flat.write_text("t,setpoint,feedback\n" + "".join(f"{i / 100},1,1\n" for i in range(500)))
    profile = write_file("p.toml", "[limits]\nzeta = { min = 0.1 }\n")
    status, _, err = run_cli(capsys, "analyze", str(flat), "--profile", str(profile))
    assert status == 1 and "0 steps" in err


def test_bad_profile_is_one_line_with_status_2(capsys, recording, write_file):
    bad = write_file("bad.toml", "[limits]\novershot_pct = { max = 10 }\n")
    status, out, err = run_cli(capsys, "analyze", str(recording), "--profile", str(bad))
    assert status == 2 and out == ""
    assert err == f"livestep: error: {bad}, line 2: limits.overshot_pct: unknown key (expected" \
        f" one of {', '.join(sorted(QUANTITIES))})\n"


def test_shipped_profile_judges_the_shipped_example(capsys):
    # The demo recording's loop is retuned from zeta 0.35 to 1.3 (tools/make_demo.py); the
    # line spec asks zeta >= 0.5 and at most 10 % overshoot, so the first steps fail.
    status, out, _ = run_cli(capsys, "analyze", str(ROOT / "fixtures" / "belt-axis.csv"),
                             "--json", "--profile", str(ROOT / "fixtures" / "belt-axis-spec.toml"))
    verdicts = [s["verdict"] for s in json.loads(out)["steps"]]
    assert status == 1 and verdicts[:2] == ["fail", "fail"] and "pass" in verdicts


def test_statistics_and_guidance_in_json(capsys, recording, write_file):
    # The recording's three steps share zeta = 0.4; the overshoot limit 10 % needs zeta >=
    # -ln 0.1 / sqrt(pi^2 + ln^2 0.1) = 0.591 (Ogata; Nise), which every step misses.
    spec = write_file("spec.toml", "[limits]\novershoot_pct = { max = 10 }\n")
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--json", "--profile",
                             str(spec))
    doc = json.loads(out)
    every = doc["statistics"][0]
    assert (every["by"], every["key"], every["steps"]) == ("all", "all", [0, 1, 2])
    os_stats = every["metrics"]["overshoot_pct"]
    values = [s["overshoot_pct"] for s in doc["steps"]]
    assert os_stats["count"] == 3 and os_stats["mean"] == pytest.approx(np.mean(values))
    assert os_stats["std"] == pytest.approx(np.std(values, ddof=1))
    # Three steps are far fewer than the 30 Cpk needs: not computed, and why.
    assert os_stats["cpk"] is None and os_stats["cpk_note"] == "n < 30"
    assert (os_stats["high"], os_stats["limits_differ"]) == (10, False)
    assert {(g["by"], g["key"]) for g in doc["statistics"]} >= {("direction", "up"),
                                                                ("direction", "down")}
    zeta_min = -math.log(0.1) / math.sqrt(math.pi**2 + math.log(0.1) ** 2)
    assert doc["design"]["zeta_min"] == pytest.approx(zeta_min)
    assert "not a tuning rule" in doc["design"]["assumes"]
    for s in doc["steps"]:
        (sentence,) = s["guidance"]
        assert sentence.startswith(f"damping ratio {s['model']['zeta']:.2f}, needs >= 0.59")
    # Without a profile: statistics, but no Cpk and no guidance.
    status, out, _ = run_cli(capsys, "analyze", str(recording), "--json")
    doc = json.loads(out)
    assert doc["statistics"][0]["metrics"]["overshoot_pct"]["cpk"] is None
    assert "design" not in doc and "guidance" not in doc["steps"][0]


def test_statistics_and_guidance_in_the_table(capsys):
    status, out, _ = run_cli(capsys, "analyze", str(ROOT / "fixtures" / "belt-axis.csv"),
                             "--profile", str(ROOT / "fixtures" / "belt-axis-spec.toml"))
    assert "statistics over 8 steps" in out and "mean per group" in out
    assert "tag gains=A" in out  # the demo's notes
    assert "step 0: damping ratio 0.35, needs >= 0.59" in out
