"""Design guidance: where a profile wants the dominant closed-loop poles, and how far a
step's fitted model is from there.

For a dominant pole pair s = -sigma +- j wd, with sigma = zeta wn and
wd = wn sqrt(1 - zeta^2), the standard second-order relations turn a profile's
maxima into a region of the s-plane:

- overshoot <= OS (a fraction): zeta >= -ln(OS) / sqrt(pi^2 + ln^2 OS), a cone about
  the negative real axis (Ogata, *Modern Control Engineering*; Nise, *Control Systems
  Engineering*; Dorf & Bishop); zeta >= 1 when no overshoot is allowed;
- settling time <= Ts: sigma >= c / Ts, left of a vertical line, with c the rule-of-thumb
  constant of the settling band, 4 for 2 %, -ln(band) otherwise (3.0 for 5 %, 4.6 for
  1 %) (Ogata; Nise). It follows the decay envelope exp(-sigma t) and leaves out the
  1/sqrt(1 - zeta^2) factor of the exact envelope bound, which adds
  -ln(sqrt(1 - zeta^2)) / sigma of time (0.22 / sigma at zeta = 0.6, 0.51 at 0.8);
- peak time <= Tp: wd >= pi / Tp, outside a horizontal strip (Ogata).

livestep measures settling and peak times from the step instant, so a model's dead
time uses part of each: its poles are held to Ts - theta and Tp - theta. A model with
zeta >= 1 has real poles; its slower pole, wn (zeta - sqrt(zeta^2 - 1)), takes the
place of sigma, and it has no overshoot peak to time.

This assumes the response is dominated by one second-order pole pair (other poles
much faster, no nearby zeros). It is guidance on where the poles should go, not a
tuning rule. Pure: no I/O.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

from livestep.judge.profile import Limit
from livestep.judge.verdict import format_seconds as _ms
from livestep.steps import second_order as so
from livestep.steps.model_fit import ModelFit

__all__ = ["ASSUMPTION", "SHORT_ASSUMPTION", "DesignCheck", "DesignRegion", "assess",
           "design_checks", "design_region"]

#: Said wherever guidance is shown.
ASSUMPTION = ("assumes a dominant second-order response (standard second-order relations);"
              " guidance on where the closed-loop poles should be, not a tuning rule")
SHORT_ASSUMPTION = "if the response is dominantly second order; guidance, not a tuning rule"


@dataclass(frozen=True)
class DesignRegion:
    """The dominant pole pair's region from a profile's maxima (``None``: not limited).

    ``zeta_min`` (dimensionless) from ``overshoot_max`` (%); ``sigma_min`` = minimum
    zeta wn (1/s) from ``settling_max`` (s) in the ``band_pct`` band; ``wd_min`` (rad/s)
    from ``peak_max`` (s). ``sigma_min`` and ``wd_min`` are for a model without dead time.
    """

    zeta_min: float | None
    sigma_min: float | None
    wd_min: float | None
    overshoot_max: float | None = None
    settling_max: float | None = None
    peak_max: float | None = None
    band_pct: float = 2.0

    @property
    def empty(self) -> bool:
        """True when the profile limits none of overshoot, settling time and peak time."""
        return self.zeta_min is None and self.sigma_min is None and self.wd_min is None


@dataclass(frozen=True)
class DesignCheck:
    """One requirement on the poles. ``value`` and ``needed`` (a minimum) in the unit of
    the requirement; ``met`` is ``None`` when it does not apply to the model."""

    requirement: str  # "damping ratio", "decay rate", "damped frequency"
    value: float | None
    needed: float | None
    met: bool | None
    text: str


def _high(limits: Iterable[Limit], quantity: str) -> float | None:
    return next((lim.high for lim in limits if lim.quantity == quantity), None)


def design_region(limits: Iterable[Limit], band_pct: float = 2.0) -> DesignRegion:
    """The region from the maxima on ``overshoot_pct``, ``settling_time`` and ``peak_time``
    among ``limits`` (a profile's :meth:`~livestep.judge.profile.Profile.limits_for` a step, or
    its ``all_limits()``); ``band_pct``: the settling band, +- % of the amplitude."""
    limits = tuple(limits)
    os_max = _high(limits, "overshoot_pct")
    ts_max = _high(limits, "settling_time")
    tp_max = _high(limits, "peak_time")
    zeta_min = None
    if os_max is not None and os_max < 100.0:
        zeta_min = 1.0 if os_max <= 0.0 else so.zeta_from_overshoot(os_max)
    sigma_min = (so.settling_constant(band_pct) / ts_max
                 if ts_max is not None and ts_max > 0 else None)
    wd_min = math.pi / tp_max if tp_max is not None and tp_max > 0 else None
    return DesignRegion(zeta_min, sigma_min, wd_min, os_max, ts_max, tp_max, band_pct)


def _short(value: float, needed: float) -> str:
    return f"{100.0 * (needed - value) / needed:.0f} % short"


def _budget(limit: float, dead: float, what: str,
            band: str = "") -> tuple[float | None, str]:
    """The time left to the poles after the dead time, and the words saying so."""
    notes = [band] if band else []
    if dead > 0.0:
        notes.append(f"less {_ms(dead)} dead time")
    words = f"{what} <= {_ms(limit)}" + (f" ({', '.join(notes)})" if notes else "")
    left = limit - dead
    return (left if left > 0 else None), words


def _used_up(dead: float, what: str, limit: float) -> str:
    return (f"the {_ms(dead)} dead time alone uses up the {what} limit {_ms(limit)}:"
            " no placement of the poles meets it")


def design_checks(model: ModelFit, region: DesignRegion) -> tuple[DesignCheck, ...]:
    """Each requirement of ``region`` on the model's poles, met or missed and by how much."""
    zeta, wn, dead = model.zeta, model.wn, max(model.dead_time, 0.0)
    real = zeta >= 1.0
    out = []
    if region.zeta_min is not None:
        need = region.zeta_min
        why = f"overshoot <= {region.overshoot_max:g} %"
        met = zeta >= need
        text = (f"damping ratio {zeta:.2f} meets >= {need:.2f} for {why}" if met else
                f"damping ratio {zeta:.2f}, needs >= {need:.2f} for {why}:"
                f" short by {need - zeta:.2f}")
        out.append(DesignCheck("damping ratio", zeta, need, met, text))
    if region.settling_max is not None:
        left, why = _budget(region.settling_max, dead, "settling",
                            f"{region.band_pct:g} % band")
        sigma = wn * (zeta - math.sqrt(zeta * zeta - 1.0)) if real else zeta * wn
        name = "slower pole (real poles)" if real else "decay rate zeta*wn"
        if left is None:
            out.append(DesignCheck("decay rate", sigma, None, False, _used_up(
                dead, "settling", region.settling_max)))
        else:
            need = so.settling_constant(region.band_pct) / left
            met = sigma >= need
            text = (f"{name} {sigma:.3g} 1/s meets >= {need:.3g} 1/s for {why}" if met else
                    f"{name} {sigma:.3g} 1/s, needs >= {need:.3g} 1/s for {why}:"
                    f" {_short(sigma, need)}")
            out.append(DesignCheck("decay rate", sigma, need, met, text))
    if region.peak_max is not None:
        left, why = _budget(region.peak_max, dead, "peak time")
        if real:
            out.append(DesignCheck("damped frequency", None, None, None,
                                   f"no damped frequency (real poles, damping ratio"
                                   f" {zeta:.2f}): no overshoot peak, so the peak-time limit"
                                   f" {_ms(region.peak_max)} does not apply to this model"))
        elif left is None:
            out.append(DesignCheck("damped frequency", None, None, False, _used_up(
                dead, "peak time", region.peak_max)))
        else:
            wd = wn * math.sqrt(1.0 - zeta * zeta)
            need = math.pi / left
            met = wd >= need
            text = (f"damped frequency {wd:.3g} rad/s meets >= {need:.3g} rad/s for {why}"
                    if met else f"damped frequency {wd:.3g} rad/s, needs >= {need:.3g} rad/s"
                    f" for {why}: {_short(wd, need)}")
            out.append(DesignCheck("damped frequency", wd, need, met, text))
    return tuple(out)


def assess(model: ModelFit, region: DesignRegion) -> tuple[str, ...]:
    """One sentence per requirement: the missed ones first, by how much; then those met."""
    checks = design_checks(model, region)
    return tuple(c.text for c in sorted(checks, key=lambda c: c.met is not False))
