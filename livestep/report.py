"""Step results as JSON documents, CSV rows and rich tables."""

from __future__ import annotations

import csv
import json
import math
from collections.abc import Sequence
from typing import IO, Any

from rich import box
from rich.console import Console
from rich.table import Table

from livestep.analysis import StepResult
from livestep.profile import Profile
from livestep.verdict import SYMBOLS, StepVerdict, describe_check

__all__ = ["STEP_FIELDS", "analysis_document", "render_table", "step_record", "write_csv",
           "write_json"]

#: Keys of each step in the JSON document, in order (a stable contract).
STEP_FIELDS = (
    "index", "t_step", "direction", "setpoint_before", "setpoint_after", "initial", "final",
    "amplitude", "rise_time", "delay_time", "peak_time", "peak", "overshoot_pct",
    "undershoot_pct", "settling_time", "settled", "steady_state_error",
    "steady_state_error_pct", "iae", "ise", "itae", "noise_sigma",
)
MODEL_FIELDS = ("zeta", "wn", "gain", "dead_time", "fit_r2", "fit_nrmse", "bandwidth",
                "phase_margin_deg", "settling_time_estimate")
ESTIMATE_FIELDS = ("zeta", "wn", "settling_time")


def _clean(x: Any) -> Any:
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def check_records(v: StepVerdict) -> list[dict[str, Any]]:
    """A verdict's checks as JSON-ready dicts, one per limit."""
    return [{"quantity": c.quantity, "value": _clean(c.value), "min": c.low, "max": c.high,
             "limit": c.limit, "margin": _clean(c.margin), "verdict": c.verdict,
             "reason": c.reason, "rule": c.rule} for c in v.checks]


def step_record(r: StepResult, verdict: StepVerdict | None = None) -> dict[str, Any]:
    """One step as the JSON contract's dict (``None`` where undefined); with a verdict,
    ``verdict`` and ``checks`` too."""
    m = r.metrics
    rec: dict[str, Any] = {"index": r.index}
    rec.update({k: _clean(getattr(m, k)) for k in STEP_FIELDS[1:]})
    rec["model"] = (None if r.model is None else
                    {k: _clean(getattr(r.model, k)) for k in MODEL_FIELDS})
    rec["closed_form"] = {k: _clean(getattr(r.estimate, k)) for k in ESTIMATE_FIELDS}
    rec["sample_period"] = m.sample_period
    rec["window_end"] = r.end_reason
    rec["warnings"] = list(r.warnings)
    rec["tags"] = dict(r.tags)
    if verdict is not None:
        rec["verdict"] = verdict.verdict
        rec["checks"] = check_records(verdict)
    return rec


def analysis_document(source: str, samples: int, results: Sequence[StepResult],
                      warnings: Sequence[str] = (), *,
                      verdicts: Sequence[StepVerdict] | None = None,
                      profile: Profile | None = None) -> dict[str, Any]:
    """The whole analysis as one JSON-ready dict; with a profile, its name and source
    and each step's verdict and checks."""
    doc: dict[str, Any] = {"source": source, "samples": samples}
    if profile is not None:
        doc["profile"] = {"name": profile.name, "source": profile.source}
    vs: Sequence[StepVerdict | None] = verdicts if verdicts is not None else [None] * len(results)
    doc["steps"] = [step_record(r, v) for r, v in zip(results, vs, strict=True)]
    doc["warnings"] = list(warnings)
    return doc


def write_json(doc: dict[str, Any], out: IO[str]) -> None:
    json.dump(doc, out, indent=2, allow_nan=False)
    out.write("\n")


def write_csv(results: Sequence[StepResult], out: IO[str],
              verdicts: Sequence[StepVerdict] | None = None) -> None:
    """One row per step; model values as ``model_<name>``, warnings joined by ``; ``;
    with verdicts, a ``verdict`` column and ``failed`` (the quantities that failed)."""
    w = csv.writer(out, lineterminator="\n")
    extra = ["verdict", "failed"] if verdicts is not None else []
    w.writerow([*STEP_FIELDS, *(f"model_{k}" for k in MODEL_FIELDS), "warnings", *extra])
    for i, r in enumerate(results):
        rec = step_record(r)
        model = rec["model"] or {}
        row = [*("" if rec[k] is None else rec[k] for k in STEP_FIELDS),
               *("" if model.get(k) is None else model[k] for k in MODEL_FIELDS),
               "; ".join(rec["warnings"])]
        if verdicts is not None:
            row += [verdicts[i].verdict, " ".join(c.quantity for c in verdicts[i].failed())]
        w.writerow(row)


def _ms(x: float | None, fmt: str = ".1f") -> str:
    return "-" if x is None else format(1e3 * x, fmt)


def _num(x: float | None, fmt: str = ".4g") -> str:
    return "-" if x is None else format(x, fmt)


#: Verdict styles; the symbol and word always go with the colour.
VERDICT_STYLES = {"pass": "green", "warn": "yellow", "fail": "bold red",
                  "not measured": "dim"}


def verdict_text(verdict: str) -> str:
    """Rich markup: symbol and word, coloured ("✘ fail")."""
    return f"[{VERDICT_STYLES[verdict]}]{SYMBOLS[verdict]} {verdict}[/]"


def render_table(results: Sequence[StepResult], console: Console, title: str,
                 verdicts: Sequence[StepVerdict] | None = None) -> None:
    """A rich table, one row per step, times in milliseconds (all figures: ``--json``);
    with verdicts, a verdict column and one line per check that did not pass."""
    table = Table(title=title, box=box.SIMPLE_HEAD, pad_edge=False, header_style="bold",
                  padding=(0, 1), collapse_padding=True, show_edge=False,
                  caption="t_step in s; rise, settle, dead (time) in ms; OS (overshoot) and SSE"
                  " (steady-state error) in %; wn in rad/s")
    names = ["#", "t_step", "dir", "amp", "rise", "OS", "settle", "SSE", "zeta", "wn", "dead"]
    # The verdict takes the place of R^2 (still in --json), so 80 columns hold the table.
    for name in names + (["R^2"] if verdicts is None else []):
        table.add_column(name, justify="right", no_wrap=True)
    if verdicts is not None:
        table.add_column("verdict", no_wrap=True)
    for i, r in enumerate(results):
        m, f = r.metrics, r.model
        cells = (
            str(r.index), f"{m.t_step:.3f}", m.direction, _num(m.amplitude, "+.4g"),
            _ms(m.rise_time), f"{m.overshoot_pct:.1f}",
            _ms(m.settling_time, ".0f") if m.settled else "no",
            _num(m.steady_state_error_pct, ".2f"), _num(f.zeta if f else None, ".3f"),
            _num(f.wn if f else None, ".1f"), _ms(f.dead_time if f else None),
            _num(f.fit_r2 if f else None, ".3f"))
        if verdicts is not None:
            cells = (*cells[:-1], verdict_text(verdicts[i].verdict))
        table.add_row(*cells)
    console.print(table)
    for i, r in enumerate(results):
        if verdicts is not None:
            for c in verdicts[i].checks:
                if c.verdict != "pass":
                    console.print(f"step {r.index}: {verdict_text(c.verdict)}"
                                  f" {describe_check(c)}", highlight=False)
        for w in r.warnings:
            console.print(f"[yellow]step {r.index}:[/] {w}")
