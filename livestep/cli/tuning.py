"""``livestep suggest``: trends across gain sets and, with a declared controller, suggested
gains from an identified plant (:mod:`livestep.tuning`). Nothing is sent anywhere: the
suggestion is text, JSON, and optionally a plan file to review and send with
``livestep live PORT --plan FILE --send``."""

from __future__ import annotations

import argparse
import math
import sys
import tomllib
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from livestep.cli.options import add_recording_options, analysis_settings
from livestep.errors import EXIT_OK, InputError, WriteError, one_line
from livestep.judge.profile import load_profile
from livestep.tuning.controller import ControllerSpec, parse_controller

__all__ = ["add_parsers", "dump_toml", "run_suggest"]


def add_parsers(sub: argparse._SubParsersAction) -> None:
    s = sub.add_parser("suggest", help="how the limited figures move with the gains, and"
                       " (with a [controller] section) suggested gains; sends nothing")
    s.add_argument("file", help="recording: CSV with a header row, optionally gzip-compressed,"
                   " whose steps carry gain notes (kp, ki, kd)")
    s.add_argument("--profile", metavar="TOML", required=True,
                   help="tolerance profile: the limits to meet (may hold [controller])")
    s.add_argument("--controller", metavar="TOML",
                   help="a TOML file with the [controller] section (default: the profile's,"
                   " else the plan's)")
    s.add_argument("--plan", metavar="TOML",
                   help="the plan the session ran: a [controller] section, and the template"
                   " of --write-plan")
    s.add_argument("--write-plan", metavar="TOML",
                   help="write the plan with the suggested gains as its only gain set (needs"
                   " --plan; review it, then send it with live --plan FILE --send)")
    s.add_argument("--gain-notes", default="kp,ki,kd", metavar="P,I,D",
                   help="the note names of the proportional, integral and derivative gains"
                   " (default kp,ki,kd)")
    s.add_argument("--output-column", metavar="COL",
                   help="the controller output column, to leave out saturated steps (default:"
                   " 'force' when the recording has it)")
    s.add_argument("--json", action="store_true", help="one JSON document on stdout")
    add_recording_options(s)
    s.set_defaults(run=run_suggest)


def _toml_doc(path: str) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InputError("no such file", source=path) from None
    except OSError as exc:
        raise InputError(f"cannot read it: {exc.strerror}", source=path) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=path) from None


def _controller(args: argparse.Namespace) -> ControllerSpec | None:
    for path in (args.controller, args.profile, args.plan):
        if path:
            spec = parse_controller(_toml_doc(path), path)
            if spec is not None:
                return spec
            if path == args.controller:
                raise InputError("has no [controller] section", source=path)
    return None


def _output(args: argparse.Namespace) -> tuple[np.ndarray, np.ndarray] | None:
    """(times, values) of the output column, or ``None`` when there is none."""
    from livestep.sources.recording import ColumnMap, RecordingReader
    name = args.output_column or "force"
    try:
        reader = RecordingReader(args.file, ColumnMap(time=args.time, feedback=name,
                                                      time_unit=args.time_unit))
        chunks = list(reader)
    except InputError:
        if args.output_column:
            raise
        return None
    if not chunks:
        return None
    return (np.concatenate([c.t for c in chunks]), np.concatenate([c.feedback for c in chunks]))


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(float(v)) if isinstance(v, float) and math.isfinite(v) else str(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def dump_toml(doc: dict[str, Any]) -> str:
    """A plan document as TOML text: top-level values, tables, arrays of tables."""
    lines = [f"{k} = {_value(v)}" for k, v in doc.items()
             if not isinstance(v, dict) and not (isinstance(v, list) and v
                                                 and isinstance(v[0], dict))]
    for k, v in doc.items():
        if isinstance(v, dict):
            lines += ["", f"[{k}]"] + [f"{kk} = {_value(x)}" for kk, x in v.items()]
        elif isinstance(v, list) and v and isinstance(v[0], dict):
            for item in v:
                lines += ["", f"[[{k}]]"] + [f"{kk} = {_value(x)}" for kk, x in item.items()]
    return "\n".join(lines) + "\n"


def _write_plan(args: argparse.Namespace, gains: dict[str, float], names: list[str]) -> None:
    from livestep.live.plan import load_plan_file, parse_plan
    doc = dict(load_plan_file(args.plan))
    doc["gains"] = [{"name": "suggested", **dict(zip(names, gains.values(), strict=True))}]
    parse_plan(doc, source=args.write_plan)  # the plan written is a valid plan
    text = ("# gains suggested by livestep suggest from " + one_line(str(args.file)) + ":\n"
            "# review before sending; nothing has been sent. Send it with\n"
            "#   livestep live PORT --plan THIS_FILE --send   (asks for confirmation)\n"
            + dump_toml(doc))
    try:
        Path(args.write_plan).write_text(text, encoding="utf-8")
    except OSError as exc:
        raise WriteError(f"cannot write the plan: {exc.strerror}",
                         source=args.write_plan) from None


def run_suggest(args: argparse.Namespace) -> int:
    profile = load_profile(args.profile)
    names = [n.strip() for n in args.gain_notes.split(",")]
    if len(names) != 3 or not all(names):
        raise InputError(f"--gain-notes: expected three note names P,I,D, got"
                         f" {args.gain_notes!r}")
    if args.write_plan and not args.plan:
        raise InputError("--write-plan needs --plan (the plan the suggestion goes into)")
    spec = _controller(args)
    settings = replace(analysis_settings(args, profile), keep_windows=True)
    from livestep.cli.offline import _read_results
    results, reader = _read_results(args.file, args, settings)
    if reader.damage is not None:
        raise InputError(reader.damage)
    output = _output(args) if spec is not None else None
    if spec is not None and not args.json:
        print("livestep: identifying the plant and searching gains (a few seconds)...",
              file=sys.stderr, flush=True)
    from livestep.tuning.suggest import suggest
    s = suggest(results, profile, spec, names, output=output)
    if args.write_plan:
        if s.suggested is None:
            raise InputError("no suggested gains: no plan written")
        _write_plan(args, s.suggested.gains, names)
    if args.json:
        from livestep.reports.suggestion import suggestion_document
        from livestep.reports.tables import write_json
        write_json(suggestion_document(s, source=one_line(str(args.file)),
                                       profile=profile.name), sys.stdout)
    else:
        from livestep.reports.suggestion import render_suggestion
        from livestep.sinks.terminal import make_console
        render_suggestion(s, make_console())
    if args.write_plan:
        print(f"livestep: wrote {one_line(args.write_plan)} (review it; nothing was sent)",
              file=sys.stderr)
    return EXIT_OK
