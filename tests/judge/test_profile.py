"""Tolerance profiles: parsing, rules per step, and located errors."""

from __future__ import annotations

from pathlib import Path

import pytest
from _results import result

from livestep.errors import InputError
from livestep.judge.profile import Limit, load_profile, parse_profile
from livestep.judge.quantities import QUANTITIES

ROOT = Path(__file__).resolve().parents[2]

GOOD = """\
name = "axis"
settling_band = 5
rise_levels = [5, 95]
warn_pct = 10

[limits]
rise_time = { max = 0.1 }
overshoot_pct = { max = 10, warn = 2 }
zeta = { min = 0.4, max = 0.8 }

[[when]]
name = "big"
size_min = 50
[when.limits]
rise_time = { max = 0.2 }

[[when]]
direction = "down"
tag = "gains = soft"
[when.limits]
overshoot_pct = { max = 5 }
"""


def test_a_profile_reads_back_as_written():
    p = parse_profile(GOOD, "axis.toml")
    assert (p.name, p.settling_band, p.rise_levels) == ("axis", 5.0, (5.0, 95.0))
    # warn_pct 10 gives 10 % of the limit; an explicit warn wins; with two limits, 10 % of
    # the smaller.
    assert p.all_limits() == (Limit("rise_time", None, 0.1, pytest.approx(0.01)),
                              Limit("overshoot_pct", None, 10.0, 2.0),
                              Limit("zeta", 0.4, 0.8, pytest.approx(0.04)))
    assert [r.name for r in p.rules] == ["big", "when #2"]
    assert p.rules[1].tag == ("gains", "soft")


def test_rules_replace_limits_for_the_steps_they_match():
    p = parse_profile(GOOD)

    def limits(**kw):
        return {lim.quantity: (lim.high, lim.rule) for lim in p.limits_for(result(**kw))}

    small_up = limits(setpoint_before=0.0, setpoint_after=10.0)
    assert small_up["rise_time"] == (0.1, "") and small_up["overshoot_pct"] == (10.0, "")
    big = limits(setpoint_before=100.0, setpoint_after=40.0, direction="down")
    assert big["rise_time"] == (0.2, "big")
    # The down rule also needs the tag: without it the base overshoot limit stays.
    assert big["overshoot_pct"] == (10.0, "")
    tagged = {lim.quantity: lim.high for lim in p.limits_for(
        result(direction="down", tags=(("gains", "soft"),)))}
    assert tagged["overshoot_pct"] == 5.0
    # Without a setpoint, the size is the feedback amplitude.
    assert limits(setpoint_before=None, setpoint_after=None, amplitude=-60.0)["rise_time"] \
        == (0.2, "big")


@pytest.mark.parametrize("text, line, words", [
    ("[limits]\nrise_time = { max = 0.1 }\nrise_tme = { max = 1 }\n", 3,
     "limits.rise_tme: unknown key"),
    ("[limits]\novershoot_pct = { min = 20, max = 10 }\n", 2,
     "limits.overshoot_pct: min 20 is greater than max 10"),
    ("[limits]\n\nzeta = { min = \"half\" }\n", 3, "limits.zeta.min: expected a number"),
    ("[limits]\nzeta = { min = true }\n", 2, "limits.zeta.min: expected a number"),
    ("[limits]\nzeta = { lower = 0.5 }\n", 2, "limits.zeta.lower: unknown key"),
    ("[limits]\nzeta = {}\n", 2, "limits.zeta: give min, max or both"),
    ("[limits]\nzeta = { min = 0.5, warn = -1 }\n", 2, "expected a margin >= 0"),
    ("[limits]\nzeta = 0.5\n", 2, "limits.zeta: expected a table"),
    ("name = \"x\"\nsettle_band = 2\n[limits]\nzeta = { min = 0.5 }\n", 2,
     "settle_band: unknown key"),
    ("settling_band = -2\n[limits]\nzeta = { min = 0.5 }\n", 1, "expected a positive number"),
    ("rise_levels = [90, 10]\n[limits]\nzeta = { min = 0.5 }\n", 1, "0 <= low < high"),
    ("[limits]\nzeta = { min = 0.5 }\n[[when]]\n[when.limits]\nzeta = { min = 0.6 }\n"
     "[[when]]\ndirection = \"sideways\"\n[when.limits]\nzeta = { min = 0.7 }\n", 7,
     "when[2].direction: expected \"up\" or \"down\""),
    ("[[when]]\nname = \"big\"\nsize_min = 10\n", 1, "when[1]: has no [when.limits] table"),
    ("[limits]\nzeta = { min = 0.5 \n", 2, "not valid TOML"),
    ("name = \"nothing\"\n", None, "sets no limits"),
])
def test_every_mistake_names_file_line_and_key(text, line, words):
    with pytest.raises(InputError) as err:
        parse_profile(text, "bad.toml")
    message = str(err.value)
    assert words in message
    assert message.startswith("bad.toml" + ("" if line is None else f", line {line}:"))
    assert err.value.line == line and "\n" not in message


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="no such profile file"):
        load_profile(tmp_path / "none.toml")


@pytest.mark.parametrize("name", ["belt-axis-spec.toml", "belt-axis-commissioning.toml"])
def test_shipped_profiles_load(name):
    p = load_profile(ROOT / "fixtures" / name)
    assert p.all_limits() and all(lim.quantity in QUANTITIES for lim in p.all_limits())
