"""The [controller] section: what it declares, and one clear line for each mistake."""

from __future__ import annotations

import math
import tomllib

import pytest

from livestep.errors import InputError
from livestep.judge.profile import parse_profile
from livestep.tuning.controller import parse_controller

GOOD = """
[limits]
overshoot_pct = { max = 10 }
[controller]
rate = 1000
derivative = "error"
derivative_filter = 100
output_limit = 12.5
delay = 2
plant = "process"
output_unit = "V"
[controller.limits]
kp = { min = 0.1, max = 4 }
"""


def test_a_profile_may_hold_the_section():
    parse_profile(GOOD, "p.toml")  # the profile reader accepts it
    spec = parse_controller(tomllib.loads(GOOD), "p.toml")
    assert spec is not None
    assert (spec.rate, spec.derivative, spec.derivative_filter, spec.output_limit,
            spec.delay, spec.plant, spec.output_unit) == (1000, "error", 100, 12.5, 2,
                                                          "process", "V")
    assert spec.bounds("kp") == (0.1, 4.0) and spec.bounds("kd") == (None, None)
    assert spec.period == pytest.approx(1e-3)


def test_defaults_and_absence():
    assert parse_controller({}) is None
    spec = parse_controller({"controller": {"rate": 500}})
    assert spec is not None and math.isinf(spec.output_limit) and spec.delay == 0


@pytest.mark.parametrize("section, message", [
    ({"derivative": "error"}, "rate: missing"),
    ({"rate": 0}, "positive loop rate"),
    ({"rate": 100, "law": "fuzzy"}, "only \"pid\""),
    ({"rate": 100, "derivative": "both"}, "derivative: expected"),
    ({"rate": 100, "delay": 1.5}, "delay: expected a whole number"),
    ({"rate": 100, "gain": 3}, "gain: unknown key"),
    ({"rate": 100, "limits": {"kx": {"max": 1}}}, "limits.kx: unknown gain"),
    ({"rate": 100, "limits": {"kp": {"min": 3, "max": 1}}}, "min 3 is greater than max 1"),
    ({"rate": 100, "output_limit": -1}, "output_limit: expected a number >= 0"),
])
def test_mistakes_are_one_line_naming_the_key(section, message):
    with pytest.raises(InputError, match=message) as err:
        parse_controller({"controller": section}, "c.toml")
    assert "\n" not in str(err.value) and str(err.value).startswith("c.toml: [controller]")
