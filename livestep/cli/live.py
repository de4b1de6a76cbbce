"""Commands on a serial link or a replayed stream: ``live``, ``replay``, ``watch``,
``ports``."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from livestep.cli.options import (
    add_analysis_options,
    add_port_options,
    add_record_options,
    add_stream_options,
    analysis_settings,
    decoder_from_args,
    port_settings,
    positive,
)
from livestep.errors import EXIT_BAD_INPUT, EXIT_OK, InputError
from livestep.judge.profile import load_profile
from livestep.live.run import run_live, run_replay


def add_parsers(sub: argparse._SubParsersAction) -> None:
    """The link commands' parsers."""
    live = sub.add_parser("live", help="measure steps live from a serial port or URL,"
                          " recording everything")
    live.add_argument("port", help="device path (/dev/ttyUSB0, /dev/serial/by-id/...) or"
                      " pyserial URL (socket://host:port, rfc2217://host:port, loop://)")
    add_port_options(live)
    add_record_options(live)
    live.add_argument("--profile", metavar="TOML",
                      help="tolerance profile: print each step's verdict (to gate a run on the"
                      " verdicts, use watch --headless)")
    live.add_argument("--duration", type=positive, metavar="S",
                      help="stop after S seconds (default: run until Ctrl-C)")
    live.add_argument("--json-lines", action="store_true",
                      help="print each step as one JSON object per line")
    _add_plan_options(live)
    add_stream_options(live)
    add_analysis_options(live)

    rp = sub.add_parser("replay", help="play a recording or raw capture through the live path")
    rp.add_argument("file", help="recording (CSV) or raw byte capture")
    pace = rp.add_mutually_exclusive_group()
    pace.add_argument("--speed", type=positive, default=1.0,
                      help="speed factor against real time (default 1)")
    pace.add_argument("--fast", action="store_true", help="as fast as possible")
    rp.add_argument("--json", action="store_true",
                    help="at the end, one JSON document as from analyze --json")
    rp.add_argument("--json-lines", action="store_true",
                    help="print each step as one JSON object per line")
    add_stream_options(rp)
    add_analysis_options(rp)

    w = sub.add_parser("watch", help="the live view: steps and verdicts as they happen, from a"
                       " serial port or a recording (terminal UI, or --headless)")
    w.add_argument("source", help="an existing file is replayed (recording or raw capture);"
                   " anything else is a serial port path or pyserial URL")
    w.add_argument("--headless", action="store_true",
                   help="no UI: one JSON line per finished step on stdout, then a summary")
    w.add_argument("--progress", action="store_true",
                   help="with --headless: also a {\"progress\": ...} line whenever more is"
                   " known of the step under way (instant, rise, peak, settling)")
    w.add_argument("--profile", metavar="TOML", help="tolerance profile: a verdict per step")
    w.add_argument("--duration", type=positive, metavar="S", help="stop after S seconds")
    w.add_argument("--steps", type=int, metavar="N", help="stop after N steps")
    rpace = w.add_argument_group("replay").add_mutually_exclusive_group()
    rpace.add_argument("--speed", type=positive, default=1.0,
                       help="replay speed factor against real time (default 1)")
    rpace.add_argument("--fast", action="store_true", help="replay as fast as possible")
    add_port_options(w)
    add_record_options(w, replay_note=True)
    add_stream_options(w)
    add_analysis_options(w)

    sub.add_parser("ports", help="list the serial ports present").set_defaults(run=run_ports)

    live.set_defaults(run=run_live_command)
    rp.set_defaults(run=run_replay_command)
    w.set_defaults(run=run_watch)


def run_live_command(args: argparse.Namespace) -> int:
    port = port_settings(args, args.port)
    if args.rate:
        print(f"livestep: no device time: samples stamped from their count at {args.rate:g} Hz"
              " (host arrival times come in bursts and are not used)", file=sys.stderr)
    profile = load_profile(args.profile) if args.profile else None
    # bad options first
    settings, decoder = analysis_settings(args, profile), decoder_from_args(args)
    plan = _plan(args)
    driver = None
    if plan is not None:
        from livestep.live.plan import check_sendable, describe_plan
        from livestep.live.plan_run import PlanRunner, confirm_plan

        if not args.send:
            for line in describe_plan(plan):
                print(line)
            print("dry run: nothing was sent (add --send to send this plan)")
            try:
                check_sendable(plan)
            except InputError as exc:
                print(f"livestep: --send would refuse this plan: {exc}", file=sys.stderr)
                return EXIT_BAD_INPUT
            return EXIT_OK
        check_sendable(plan)
        if not args.no_confirm:
            confirm_plan(plan, args.port)
        driver = PlanRunner(plan)
    elif args.send:
        raise InputError("--send needs a plan (--plan FILE or --levels)")
    record = None
    if not args.no_record:
        record = Path(args.record or time.strftime("livestep-%Y%m%d-%H%M%S.csv"))
    return run_live(port, decoder, settings, record=record,
                    raw=Path(args.raw) if args.raw else None, duration=args.duration,
                    json_lines=args.json_lines, driver=driver, profile=profile)


def _plan(args: argparse.Namespace):  # noqa: ANN202 - a Plan or None
    from livestep.live.plan import load_plan_file, parse_plan

    doc = load_plan_file(args.plan) if args.plan else {}
    if args.levels is not None:
        try:
            doc["levels"] = [float(x) for x in args.levels.split(",")]
        except ValueError:
            raise InputError(f"--levels: expected numbers separated by commas, got"
                             f" {args.levels!r}") from None
    for key in ("dwell", "repeats", "rest"):
        if getattr(args, key) is not None:
            doc[key] = getattr(args, key)
    limits = {k: getattr(args, a) for k, a in (("min", "min"), ("max", "max"),
                                                ("max_step", "max_step"))
              if getattr(args, a) is not None}
    if limits:
        doc["limits"] = {**doc.get("limits", {}), **limits}
    cmds = {k: getattr(args, a) for k, a in (("setpoint", "setpoint_command"),
                                              ("safe", "safe_command"))
            if getattr(args, a) is not None}
    if args.safe_unchecked:
        cmds["safe_unchecked"] = True
    if cmds:
        doc["commands"] = {**doc.get("commands", {}), **cmds}
    if not doc:
        return None
    if not isinstance(doc.get("limits", {}), dict) or not isinstance(doc.get("commands", {}),
                                                                      dict):
        raise InputError("limits and commands must be tables", source=args.plan or "plan")
    return parse_plan(doc, source=args.plan or "plan options")


def run_replay_command(args: argparse.Namespace) -> int:
    return run_replay(Path(args.file), decoder_from_args(args), analysis_settings(args),
                      speed=None if args.fast else args.speed, json_doc=args.json,
                      json_lines=args.json_lines)


def run_watch(args: argparse.Namespace) -> int:
    from livestep.live.run import metadata_for, run_headless
    from livestep.live.watch import Watch
    from livestep.sources.replay import ReplaySource

    if args.steps is not None and args.steps < 1:
        raise InputError("--steps: expected a positive whole number")
    profile = load_profile(args.profile) if args.profile else None
    settings = analysis_settings(args, profile)
    decoder = decoder_from_args(args)
    # An existing path is a file to replay unless it is a character device (a serial port);
    # a FIFO, a folder or a socket is refused there, with one line.
    path = Path(args.source)
    replay = path.exists() and not path.is_char_device()
    if replay:
        source = ReplaySource(Path(args.source), speed=None if args.fast else args.speed)
    else:
        from livestep.sources.serial_port import SerialReader

        source = SerialReader(port_settings(args, args.source))
    record = None
    if not args.no_record and (args.record or not replay):
        record = Path(args.record or time.strftime("livestep-%Y%m%d-%H%M%S.csv"))
    watch = Watch(source, decoder, settings, source_name=args.source, record=record,
                  raw=Path(args.raw) if args.raw else None,
                  metadata=metadata_for(args.source, decoder), profile=profile,
                  duration=args.duration, max_steps=args.steps)
    if args.headless:
        return run_headless(watch, sys.stdout, progress=args.progress)
    from livestep.sinks.terminal import textual_color
    from livestep.tui.app import run_app

    with textual_color():  # --color and NO_COLOR, as textual reads them
        status = run_app(watch)
    if status == EXIT_OK and profile is not None:  # the same gate as --headless
        from livestep.judge.verdict import gate_status

        status = gate_status([e.verdict for e in watch.snapshot().steps])
    return status


def run_ports(args: argparse.Namespace) -> int:
    from rich.table import Table

    from livestep.sinks.terminal import make_console
    from livestep.sources.ports import list_serial_ports

    ports = list_serial_ports()
    console = make_console()
    if not ports:
        console.print("no serial ports found (pseudo-terminals are not listed)")
        return EXIT_OK
    table = Table("device", "stable path", "description", "hardware id")
    for p in ports:
        table.add_row(p.device, p.stable, p.description, p.hwid)
    console.print(table)
    return EXIT_OK


def _add_plan_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("step plan (sends commands to the controller only with --send)")
    g.add_argument("--plan", metavar="FILE", help="step plan (TOML); the options below"
                   " override its keys")
    g.add_argument("--levels", metavar="A,B,...", help="setpoint levels, in order")
    g.add_argument("--dwell", type=positive, metavar="S", help="seconds at each level")
    g.add_argument("--repeats", type=int, metavar="N", help="passes through the levels")
    g.add_argument("--rest", type=float, metavar="X", help="setpoint before the plan")
    g.add_argument("--min", type=float, metavar="X", help="lowest setpoint allowed")
    g.add_argument("--max", type=float, metavar="X", help="highest setpoint allowed")
    g.add_argument("--max-step", type=positive, metavar="X",
                   help="largest setpoint change allowed")
    g.add_argument("--setpoint-command", metavar="TEMPLATE",
                   help="the controller's setpoint command, e.g. 'sp {value}'")
    g.add_argument("--safe-command", metavar="TEXT", help="sent once at the end, on error,"
                   " link loss and Ctrl-C (default: the setpoint command at --rest)")
    g.add_argument("--safe-unchecked", action="store_true",
                   help="allow a safe command that is not a setpoint command (livestep cannot"
                   " check it against the limits)")
    g.add_argument("--send", action="store_true",
                   help="really send the plan to the controller (without it, the plan is"
                   " only shown)")
    g.add_argument("--no-confirm", action="store_true",
                   help="do not ask before sending (unattended rigs only)")
