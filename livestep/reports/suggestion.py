"""A gain suggestion (:class:`livestep.tuning.suggest.Suggestion`) as a JSON document (the
``suggest --json`` contract, README "Gain suggestions"), as rich tables and as plain lines.
"""

from __future__ import annotations

import math
from typing import Any

from rich import box
from rich.console import Console, Group, RenderableType
from rich.markup import escape
from rich.table import Table
from rich.text import Text

from livestep.judge.quantities import QUANTITIES, display_unit
from livestep.tuning.search import Prediction
from livestep.tuning.suggest import COMPARED, Suggestion

__all__ = ["SHOWN", "model_lines", "render_suggestion", "suggestion_document",
           "suggestion_renderable"]

#: The predicted figures shown in tables, in order.
SHOWN = ("rise_time", "overshoot_pct", "settling_time", "zeta", "wn")


def _f(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def _limit(lim: Any) -> dict[str, Any]:
    return {"min": lim.low, "max": lim.high, "warn": lim.warn}


def _prediction(p: Prediction, amplitude: float | None) -> dict[str, Any]:
    return {"gains": p.gains,
            "predicted": {q: _f(v) for q, v in p.figures.items()},
            "range": {q: [_f(p.low[q]), _f(p.high[q])] for q in p.figures},
            "output_peak": _f(p.output_peak), "amplitude": amplitude,
            "meets_profile_with_margin": p.meets}


def suggestion_document(s: Suggestion, *, source: str, profile: str) -> dict[str, Any]:
    """The JSON document (a stable contract: keys as documented in README)."""
    ident = s.identification
    model = None
    if ident is not None:
        m = ident.model
        names = {"position": ("inertia", "viscous", "coulomb"), "process": ("gain", "tau"),
                 "second": ("gain", "tau", "tau2")}[m.form]
        model = {"form": m.form,
                 "parameters": {n: {"value": float(getattr(m, n)), "sigma": ident.sigma[n]}
                                for n in names},
                 "dead_time": m.dead_ticks / s.controller.rate if s.controller else None,
                 "r2": ident.r2, "rms": ident.rms, "steps": list(ident.steps),
                 "gain_sets": ident.gain_sets,
                 "forms_tried": [{"form": f, "r2": r2, "aic": aic}
                                 for f, r2, aic in ident.forms]}
    c = s.controller
    return {
        "source": source, "profile": profile, "gain_names": list(s.names),
        "gain_sets": [{"gains": dict(zip(s.names, g, strict=True)), "steps": n}
                      for g, n in s.gain_sets],
        "trends": [{"gain": t.gain, "quantity": t.quantity, "others": dict(t.others),
                    "status": t.status, "limit": _limit(t.limit),
                    "points": [{"gain": p.gain, "steps": p.n, "mean": p.mean, "std": p.std}
                               for p in t.points],
                    "coefficients": list(t.coeffs), "change": t.change,
                    "scatter": t.scatter, "meets_at": t.meets_at, "margin_at": t.margin_at,
                    "met_above": t.met_above, "extrapolated": t.extrapolated,
                    "text": t.text} for t in s.trends],
        "controller": None if c is None else {
            "law": "pid", "rate": c.rate, "derivative": c.derivative,
            "derivative_filter": c.derivative_filter,
            "output_limit": _f(c.output_limit), "delay": c.delay, "plant": c.plant,
            "output_unit": c.output_unit,
            "limits": {k: {"min": lo, "max": hi} for k, (lo, hi) in c.limits.items()}},
        "model": model,
        "excluded": [{"step": i, "reason": why} for i, why in s.excluded],
        "checks": [{"gains": p.gains,
                    "figures": {q: {"measured": _f(mv), "predicted": _f(pv)}
                                for q, (mv, pv) in cmp.items()}} for p, cmp in s.checks],
        "suggestion": None if s.suggested is None else _prediction(s.suggested, s.amplitude),
        "notes": list(s.notes), "cautions": list(s.cautions),
    }


def _shown(q: str, x: float | None) -> str:
    if x is None:
        return "—"
    f, unit = display_unit(q)
    return f"{x * f:.3g}" + ("" if unit in ("", "%") else "")


def _head(q: str) -> str:
    f, unit = display_unit(q)
    label = QUANTITIES[q].short or q
    return f"{label} ({unit})" if unit else label


def model_lines(s: Suggestion) -> list[str]:
    """The identified model in words, one line per parameter (empty without a model)."""
    ident = s.identification
    if ident is None:
        return []
    m = ident.model
    unit = s.controller.output_unit if s.controller and s.controller.output_unit else \
        "output units"
    fb = "feedback unit"
    if m.form == "position":
        rows = [("inertia", m.inertia, f"{unit} s² per {fb}"),
                ("viscous", m.viscous, f"{unit} s per {fb}"), ("coulomb", m.coulomb, unit)]
        form = "a mass with viscous and Coulomb friction, J y'' = u - B y' - Fc sign(y')"
    elif m.form == "second":
        rows = [("gain", m.gain, f"{fb}s per {unit}"), ("tau", m.tau, "s"),
                ("tau2", m.tau2, "s")]
        form = "second order, K/((tau s + 1)(tau2 s + 1))"
    else:
        rows = [("gain", m.gain, f"{fb}s per {unit}"), ("tau", m.tau, "s")]
        form = "first order, K/(tau s + 1)"
    dead = m.dead_ticks / s.controller.rate if s.controller else 0.0
    lines = [f"model: {form}; dead time {dead * 1e3:.2g} ms beyond the declared delay;"
             f" R² {ident.r2:.4f}, residual {ident.rms:.3g} {fb}s rms, from {len(ident.steps)}"
             f" steps under {ident.gain_sets} gain sets"]
    for name, v, u in rows:
        rel = ident.relative(name)
        lines.append(f"  {name} = {v:.4g} {u} ± {ident.sigma[name]:.2g}"
                     f" ({100 * rel:.2g} %, 1 sd)")
    return lines


def _gains_text(g: dict[str, float]) -> str:
    return " ".join(f"{k}={v:.4g}" for k, v in g.items())


def suggestion_renderable(s: Suggestion, *, trends: bool = True) -> RenderableType:
    """The suggestion as rich renderables: trend lines, the model, the checks against the
    measured gain sets, the suggested gains with predicted figures, notes and cautions."""
    parts: list[RenderableType] = []
    if trends:
        for t in s.trends:
            style = {"noisy": "yellow", "flat": "dim", "too few": "dim"}.get(t.status, "")
            parts.append(Text("• " + t.text, style=style))
    for line in model_lines(s):
        parts.append(Text(line))
    for i, why in s.excluded:
        parts.append(Text(f"warning: step {i} {why}", style="yellow"))
    if s.checks:
        tab = Table(title="model against the measured gain sets (measured / predicted)",
                    box=box.SIMPLE, title_justify="left")
        tab.add_column("gains")
        for q in COMPARED:
            tab.add_column(_head(q), justify="right")
        for p, cmp in s.checks:
            tab.add_row(escape(_gains_text(p.gains)),
                        *[f"{_shown(q, cmp[q][0])} / {_shown(q, cmp[q][1])}" for q in COMPARED])
        parts.append(tab)
    if s.suggested is not None:
        p = s.suggested
        tab = Table(title=f"suggested gains: {escape(_gains_text(p.gains))}", box=box.SIMPLE,
                    title_justify="left", title_style="bold green")
        tab.add_column("predicted")
        for q in SHOWN:
            tab.add_column(_head(q), justify="right")
        tab.add_row("nominal", *[_shown(q, p.figures.get(q)) for q in SHOWN])
        tab.add_row("range", *[f"{_shown(q, p.low.get(q))}–{_shown(q, p.high.get(q))}"
                               for q in SHOWN])
        parts.append(tab)
        unit = s.controller.output_unit if s.controller else ""
        parts.append(Text(f"predicted for a step of {s.amplitude:g} (feedback units); peak"
                          f" output {p.output_peak:.4g} {unit}; range: the model moved by 2 sd"
                          " of its parameters (at least 5 %) and starting stuck either way"))
    for n in s.notes:
        parts.append(Text(f"note: {n}", style="yellow"))
    for c in s.cautions:
        parts.append(Text(f"⚠ {c}", style="bold"))
    return Group(*parts)


def render_suggestion(s: Suggestion, console: Console) -> None:
    """Print the suggestion (:func:`suggestion_renderable`)."""
    console.print(suggestion_renderable(s))
