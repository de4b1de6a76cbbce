"""Commands of the virtual bench: ``demo`` and ``sim``."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from livestep.cli.options import (
    measure_settings,
    positive,
)
from livestep.errors import EXIT_OK, InputError
from livestep.judge.profile import load_profile
from livestep.steps.analysis import AnalysisSettings

#: Where ``livestep demo`` puts its recording and reports unless told otherwise.
DEMO_FOLDER = "livestep-demo"


def add_parsers(sub: argparse._SubParsersAction) -> None:
    """The virtual bench commands' parsers."""
    demo = sub.add_parser("demo", help="the whole tool on a virtual bench (no hardware):"
                          " a built-in step plan with gain changes, measured live")
    demo.add_argument("--quick", action="store_true", help="a short plan (about 4 s)")
    demo_rec = demo.add_mutually_exclusive_group()
    demo_rec.add_argument("--record", metavar="FILE", help="recording file (default"
                          " DEMO_FOLDER/livestep-demo-YYYYmmdd-HHMMSS.csv; never"
                          " overwritten)")
    demo_rec.add_argument("--no-record", action="store_true", help="do not record")
    demo.add_argument("--folder", metavar="DIR", default=DEMO_FOLDER,
                      help=f"where the demo's recording and saved reports go (default"
                      f" {DEMO_FOLDER}/, made if missing; the project's .gitignore covers it)")
    demo.add_argument("--format", choices=("text", "binary"), default="text",
                      help="what the virtual bench streams (default text)")
    demo.add_argument("--seed", type=int, default=1, help="noise seed (default 1)")
    demo.add_argument("--profile", metavar="TOML",
                      help="judge the steps against this profile (default: the built-in demo"
                      " spec)")
    demo.add_argument("--json-lines", action="store_true",
                      help="print each step as one JSON object per line")
    demo.add_argument("--console", action="store_true",
                      help="print to the console instead of opening the terminal UI (the"
                      " default when the output is not a terminal)")

    sim = sub.add_parser("sim", help="run a virtual bench (a simulated controller) on a"
                         " pseudo-terminal and print the path to connect to")
    _add_sim_options(sim)
    demo.set_defaults(run=run_demo_command)
    sim.set_defaults(run=run_sim)


def run_demo_command(args: argparse.Namespace) -> int:
    from livestep.bench.demo import demo_profile, run_demo

    profile = load_profile(args.profile) if args.profile else demo_profile()
    settings = AnalysisSettings(measure=measure_settings(profile))

    folder = Path(args.folder)
    if not args.record and not (args.no_record and (args.console or args.json_lines)):
        try:  # the demo's files go into their own folder, not loose where it runs
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise InputError(f"{folder}: cannot make the demo's folder"
                             f" ({exc.strerror or exc})") from None
    record = None
    if not args.no_record:
        record = Path(args.record) if args.record else folder / time.strftime(
            "livestep-demo-%Y%m%d-%H%M%S.csv")
    if not (args.console or args.json_lines) and sys.stdout.isatty():
        from livestep.sinks.terminal import textual_color
        from livestep.tui.app import run_demo_app

        with textual_color():  # --color and NO_COLOR, as textual reads them
            return run_demo_app(quick=args.quick, record=record, fmt=args.format,
                                seed=args.seed, profile=profile, settings=settings,
                                folder=Path(args.record).parent if args.record else folder)
    return run_demo(quick=args.quick, record=record, fmt=args.format, seed=args.seed,
                    json_lines=args.json_lines, profile=profile, settings=settings)


def run_sim(args: argparse.Namespace) -> int:
    from livestep.bench.device import BenchSettings, VirtualBench, clock_start_for
    from livestep.bench.plants import AxisPlant, SecondOrderPlant

    try:
        if args.plant == "axis":
            plant = AxisPlant(seed=args.seed)
        else:
            plant = SecondOrderPlant(args.zeta, args.wn, gain=args.gain,
                                     dead_time=args.dead_time, noise=args.noise,
                                     seed=args.seed)
        bench = VirtualBench(plant, BenchSettings(
            rate=args.rate, fmt=args.format, link=Path(args.link) if args.link else None,
            clock_start=clock_start_for(args.wrap_after) if args.wrap_after else 0))
    except ValueError as exc:
        raise InputError(str(exc)) from None
    path = bench.start()
    print(path, flush=True)
    print(f"livestep sim: {args.plant} plant streaming {args.format} at {args.rate:g} Hz on"
          f" {path}; commands: sp VALUE, gains kp=X ki=Y kd=Z, stream on|off, status;"
          " Ctrl-C ends", file=sys.stderr, flush=True)
    import threading

    from livestep.live.run import stop_on_sigterm

    done = threading.Event()
    try:
        with stop_on_sigterm(done):
            done.wait(args.duration)
    except KeyboardInterrupt:
        pass
    finally:
        bench.stop()
    return EXIT_OK


def _add_sim_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--plant", choices=("axis", "second-order"), default="axis",
                   help="axis: the PID-controlled transfer axis (gains matter); second-order:"
                   " the exact response given by --zeta, --wn, --gain, --dead-time")
    p.add_argument("--rate", type=positive, default=2000.0, metavar="HZ",
                   help="samples per second (default 2000)")
    p.add_argument("--format", choices=("text", "binary"), default="text",
                   help="text lines (t in us, setpoint, feedback) or binary frames")
    p.add_argument("--seed", type=int, default=1, help="noise seed (default 1)")
    p.add_argument("--wrap-after", type=positive, metavar="S",
                   help="start the 32-bit microsecond clock so it wraps after S seconds")
    p.add_argument("--link", metavar="PATH", help="also make a symlink PATH to the device")
    p.add_argument("--duration", type=positive, metavar="S", help="stop after S seconds")
    so = p.add_argument_group("second-order plant")
    so.add_argument("--zeta", type=positive, default=0.5, help="damping ratio (default 0.5)")
    so.add_argument("--wn", type=positive, default=40.0,
                    help="natural frequency, rad/s (default 40)")
    so.add_argument("--gain", type=float, default=1.0, help="static gain (default 1)")
    so.add_argument("--dead-time", type=float, default=0.0, metavar="S",
                    help="dead time, seconds (default 0)")
    so.add_argument("--noise", type=float, default=0.0,
                    help="measurement noise sigma, feedback units (default 0)")
