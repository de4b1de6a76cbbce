"""The ``livestep`` command line.

Exit statuses: 0 success; 1 a judged step failed its profile (or no step was found to
judge), or an internal error (one line on stderr; a bug); 2 bad input or options (one
line on stderr); 130 interrupted.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Sequence
from pathlib import Path

from livestep import __version__
from livestep.decode.text import DELIMITERS, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.errors import EXIT_INTERRUPTED, EXIT_OK, InputError
from livestep.judge.profile import Profile, load_profile
from livestep.judge.verdict import gate_status, verdict_summary
from livestep.live.run import run_live, run_replay
from livestep.live.session import Decoder, make_decoder
from livestep.sources.recording import TIME_UNITS, ColumnMap, RecordingReader, read_ahead
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_chunks
from livestep.steps.detect import DetectorSettings
from livestep.steps.measure import MeasureSettings

__all__ = ["main"]


class _Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2, as for bad input
        raise InputError(f"{self.prog}: {message}")


def _levels(text: str) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected LO,HI in percent, got {text!r}") from None
    return lo, hi


def _positive(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not x > 0:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return x


def _add_analysis_options(p: argparse.ArgumentParser) -> None:
    m = p.add_argument_group("measurement")
    m.add_argument("--min-step", type=_positive, metavar="X",
                   help="smallest setpoint change that is a step, setpoint units (default:"
                   " 10 x the feedback noise before it)")
    m.add_argument("--rise-levels", type=_levels, metavar="LO,HI",
                   help="rise-time reference levels, %% of amplitude (default: the profile's,"
                   " else 10,90)")
    m.add_argument("--settling-band", type=_positive, metavar="PCT",
                   help="settling band, +-%% of amplitude (default: the profile's, else 2)")
    m.add_argument("--max-window", type=_positive, default=120.0, metavar="S",
                   help="longest step window, seconds (default 120)")
    m.add_argument("--no-fit", action="store_true", help="skip the second-order model fit")


def _measure_settings(profile: Profile | None, band: float | None = None,
                      levels: tuple[float, float] | None = None) -> MeasureSettings:
    """Options first, then the profile's settling band and rise levels, then defaults."""
    default = MeasureSettings()
    return MeasureSettings(
        rise_levels=levels or (profile and profile.rise_levels) or default.rise_levels,
        settling_band=band or (profile and profile.settling_band) or default.settling_band)


def _analysis_settings(args: argparse.Namespace,
                       profile: Profile | None = None) -> AnalysisSettings:
    try:
        return AnalysisSettings(
            detect=DetectorSettings(min_step=args.min_step, max_window=args.max_window),
            measure=_measure_settings(profile, args.settling_band, args.rise_levels),
            fit_model=not args.no_fit)
    except ValueError as exc:
        raise InputError(str(exc)) from None


def _add_stream_options(p: argparse.ArgumentParser) -> None:
    d = p.add_argument_group("stream decoding")
    d.add_argument("--format", choices=("auto", "text", "binary"), default="auto",
                   help="text lines or binary frames (default: detected)")
    d.add_argument("--delimiter", choices=sorted(DELIMITERS),
                   help="text field delimiter (default: detected)")
    d.add_argument("--pairs", action="store_true", help="text lines are name=value pairs")
    d.add_argument("--names", metavar="A,B,...",
                   help="column names of a text stream without a header")
    d.add_argument("--channels", default="setpoint,feedback", metavar="A,B,...",
                   help="roles of the binary frame channels (default setpoint,feedback)")
    d.add_argument("--time", default="t", metavar="COL", help="time column (default t)")
    d.add_argument("--setpoint", metavar="COL", help="setpoint column (default setpoint)")
    d.add_argument("--feedback", default="feedback", metavar="COL",
                   help="feedback column (default feedback)")
    d.add_argument("--time-unit", choices=("s", "ms", "us", "ticks"),
                   help="unit of the device time (default s for text, us for binary)")
    d.add_argument("--tick-rate", type=_positive, metavar="HZ", help="rate of the time ticks")
    d.add_argument("--wrap", type=int, choices=(16, 32),
                   help="the device time is a counter of this many bits that wraps"
                   " (binary frames: 32)")
    d.add_argument("--rate", type=_positive, metavar="HZ",
                   help="no device time: stamp samples on the host from their count at this rate")


def _decoder(args: argparse.Namespace) -> Decoder:
    try:
        clock = ClockSettings(unit=args.time_unit or "s", tick_rate=args.tick_rate,
                              wrap_bits=args.wrap, host_rate=args.rate)
        binary_clock = ClockSettings(unit=args.time_unit or "us", tick_rate=args.tick_rate,
                                     wrap_bits=args.wrap or 32)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    text = TextFormat(
        delimiter=DELIMITERS[args.delimiter] if args.delimiter else None,
        pairs=True if args.pairs else None,
        names=tuple(args.names.split(",")) if args.names else None,
        time=None if args.rate else args.time, setpoint=args.setpoint, feedback=args.feedback)
    return make_decoder(args.format, text=text, clock=clock, binary_clock=binary_clock,
                        channels=tuple(args.channels.split(",")))


def _add_port_options(p: argparse.ArgumentParser) -> None:
    sp = p.add_argument_group("serial port")
    sp.add_argument("--baud", type=int, default=115200, help="baud rate (default 115200)")
    sp.add_argument("--parity", choices=("N", "E", "O"), default="N", help="parity (default N)")
    sp.add_argument("--shared", action="store_true",
                    help="do not lock the port against other programs")
    sp.add_argument("--dtr", choices=("on", "off"), help="drive DTR on open (may reset boards)")
    sp.add_argument("--rts", choices=("on", "off"), help="drive RTS on open")


def _add_record_options(p: argparse.ArgumentParser, replay_note: bool = False) -> None:
    rec = p.add_argument_group("recording")
    rec.add_argument("--record", metavar="FILE",
                     help="recording file (default livestep-YYYYmmdd-HHMMSS.csv; never"
                     " overwritten)" + ("; a replay records only when given" if replay_note
                                         else ""))
    rec.add_argument("--no-record", action="store_true", help="do not record the samples")
    rec.add_argument("--raw", metavar="FILE", help="also capture the raw bytes to FILE")


def _port_settings(args: argparse.Namespace, url: str):
    from livestep.sources.serial_port import PortSettings

    return PortSettings(url=url, baudrate=args.baud, parity=args.parity,
                        exclusive=not args.shared,
                        dtr=None if args.dtr is None else args.dtr == "on",
                        rts=None if args.rts is None else args.rts == "on")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="livestep", description="Find and measure setpoint step tests in "
                "closed-loop controller data.")
    p.add_argument("--version", action="version", version=f"livestep {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)

    a = sub.add_parser("analyze", help="measure every step in a recording (CSV or .csv.gz)")
    a.add_argument("file", help="recording: CSV with a header row, optionally gzip-compressed")
    out = a.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="one JSON document on stdout")
    out.add_argument("--csv", action="store_true", help="one CSV row per step on stdout")
    a.add_argument("--profile", metavar="TOML",
                   help="tolerance profile: judge every step; exit status 1 when any step"
                   " fails (or none is found)")
    _add_recording_options(a)

    c = sub.add_parser("compare", help="compare the steps of two recordings, or of two tags"
                       " of one, quantity by quantity")
    c.add_argument("files", nargs="+", metavar="FILE",
                   help="two recordings, A then B; or one, with --tags")
    c.add_argument("--tags", nargs=2, metavar=("A", "B"),
                   help="compare the steps carrying note A (name=value) with those carrying"
                   " note B")
    c.add_argument("--json", action="store_true", help="one JSON document on stdout")
    c.add_argument("--profile", metavar="TOML",
                   help="tolerance profile: its settling band and rise levels")
    _add_recording_options(c)

    rep = sub.add_parser("report", help="a self-contained HTML report of a recording, with"
                         " plots")
    rep.add_argument("file", help="recording: CSV with a header row, optionally gzip-compressed")
    rep.add_argument("-o", "--output", metavar="HTML",
                     help="report file (default: the recording's name with -report.html, in"
                     " the current folder; replaced if it exists)")
    rep.add_argument("--profile", metavar="TOML",
                     help="tolerance profile: judge every step and show its limits")
    rep.add_argument("--png", metavar="DIR",
                     help="also write every plot as a PNG file into DIR (made if needed)")
    _add_recording_options(rep)

    live = sub.add_parser("live", help="measure steps live from a serial port or URL,"
                          " recording everything")
    live.add_argument("port", help="device path (/dev/ttyUSB0, /dev/serial/by-id/...) or"
                      " pyserial URL (socket://host:port, rfc2217://host:port, loop://)")
    _add_port_options(live)
    _add_record_options(live)
    live.add_argument("--profile", metavar="TOML",
                      help="tolerance profile: print each step's verdict (to gate a run on the"
                      " verdicts, use watch --headless)")
    live.add_argument("--duration", type=_positive, metavar="S",
                      help="stop after S seconds (default: run until Ctrl-C)")
    live.add_argument("--json-lines", action="store_true",
                      help="print each step as one JSON object per line")
    _add_plan_options(live)
    _add_stream_options(live)
    _add_analysis_options(live)

    rp = sub.add_parser("replay", help="play a recording or raw capture through the live path")
    rp.add_argument("file", help="recording (CSV) or raw byte capture")
    pace = rp.add_mutually_exclusive_group()
    pace.add_argument("--speed", type=_positive, default=1.0,
                      help="speed factor against real time (default 1)")
    pace.add_argument("--fast", action="store_true", help="as fast as possible")
    rp.add_argument("--json", action="store_true",
                    help="at the end, one JSON document as from analyze --json")
    rp.add_argument("--json-lines", action="store_true",
                    help="print each step as one JSON object per line")
    _add_stream_options(rp)
    _add_analysis_options(rp)

    w = sub.add_parser("watch", help="the live view: steps and verdicts as they happen, from a"
                       " serial port or a recording (terminal UI, or --headless)")
    w.add_argument("source", help="an existing file is replayed (recording or raw capture);"
                   " anything else is a serial port path or pyserial URL")
    w.add_argument("--headless", action="store_true",
                   help="no UI: one JSON line per finished step on stdout, then a summary")
    w.add_argument("--profile", metavar="FILE", help="tolerance profile (TOML): a verdict per"
                   " step")
    w.add_argument("--duration", type=_positive, metavar="S", help="stop after S seconds")
    w.add_argument("--steps", type=int, metavar="N", help="stop after N steps")
    rpace = w.add_argument_group("replay").add_mutually_exclusive_group()
    rpace.add_argument("--speed", type=_positive, default=1.0,
                       help="replay speed factor against real time (default 1)")
    rpace.add_argument("--fast", action="store_true", help="replay as fast as possible")
    _add_port_options(w)
    _add_record_options(w, replay_note=True)
    _add_stream_options(w)
    _add_analysis_options(w)

    sub.add_parser("ports", help="list the serial ports present")

    demo = sub.add_parser("demo", help="the whole tool on a virtual bench (no hardware):"
                          " a built-in step plan with gain changes, measured live")
    demo.add_argument("--quick", action="store_true", help="a short plan (about 4 s)")
    demo_rec = demo.add_mutually_exclusive_group()
    demo_rec.add_argument("--record", metavar="FILE", help="recording file (default"
                          " livestep-demo-YYYYmmdd-HHMMSS.csv; never overwritten)")
    demo_rec.add_argument("--no-record", action="store_true", help="do not record")
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
    return p


def _add_plan_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("step plan (sends commands to the controller only with --send)")
    g.add_argument("--plan", metavar="FILE", help="step plan (TOML); the options below"
                   " override its keys")
    g.add_argument("--levels", metavar="A,B,...", help="setpoint levels, in order")
    g.add_argument("--dwell", type=_positive, metavar="S", help="seconds at each level")
    g.add_argument("--repeats", type=int, metavar="N", help="passes through the levels")
    g.add_argument("--rest", type=float, metavar="X", help="setpoint before the plan")
    g.add_argument("--min", type=float, metavar="X", help="lowest setpoint allowed")
    g.add_argument("--max", type=float, metavar="X", help="highest setpoint allowed")
    g.add_argument("--max-step", type=_positive, metavar="X",
                   help="largest setpoint change allowed")
    g.add_argument("--setpoint-command", metavar="TEMPLATE",
                   help="the controller's setpoint command, e.g. 'sp {value}'")
    g.add_argument("--safe-command", metavar="TEXT", help="sent once at the end, on error,"
                   " link loss and Ctrl-C (default: the setpoint command at --rest)")
    g.add_argument("--send", action="store_true",
                   help="really send the plan to the controller (without it, the plan is"
                   " only shown)")
    g.add_argument("--no-confirm", action="store_true",
                   help="do not ask before sending (unattended rigs only)")


def _add_sim_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--plant", choices=("axis", "second-order"), default="axis",
                   help="axis: the PID-controlled transfer axis (gains matter); second-order:"
                   " the exact response given by --zeta, --wn, --gain, --dead-time")
    p.add_argument("--rate", type=_positive, default=2000.0, metavar="HZ",
                   help="samples per second (default 2000)")
    p.add_argument("--format", choices=("text", "binary"), default="text",
                   help="text lines (t in us, setpoint, feedback) or binary frames")
    p.add_argument("--seed", type=int, default=1, help="noise seed (default 1)")
    p.add_argument("--wrap-after", type=_positive, metavar="S",
                   help="start the 32-bit microsecond clock so it wraps after S seconds")
    p.add_argument("--link", metavar="PATH", help="also make a symlink PATH to the device")
    p.add_argument("--duration", type=_positive, metavar="S", help="stop after S seconds")
    so = p.add_argument_group("second-order plant")
    so.add_argument("--zeta", type=_positive, default=0.5, help="damping ratio (default 0.5)")
    so.add_argument("--wn", type=_positive, default=40.0,
                    help="natural frequency, rad/s (default 40)")
    so.add_argument("--gain", type=float, default=1.0, help="static gain (default 1)")
    so.add_argument("--dead-time", type=float, default=0.0, metavar="S",
                    help="dead time, seconds (default 0)")
    so.add_argument("--noise", type=float, default=0.0,
                    help="measurement noise sigma, feedback units (default 0)")


def _add_recording_options(p: argparse.ArgumentParser) -> None:
    cols = p.add_argument_group("columns")
    cols.add_argument("--time", default="t", metavar="COL", help="time column (default t)")
    cols.add_argument("--setpoint", metavar="COL",
                      help="setpoint column (default: 'setpoint' if present, else steps are"
                      " found from the feedback alone)")
    cols.add_argument("--feedback", default="feedback", metavar="COL",
                      help="feedback column (default feedback)")
    cols.add_argument("--time-unit", default="s", choices=sorted(TIME_UNITS),
                      help="unit of the time column (default s)")
    _add_analysis_options(p)
    p.add_argument("--jobs", type=int, default=min(os.cpu_count() or 1, 4), metavar="N",
                   help="worker processes measuring steps (default: the CPU count, at most 4)")


def _read_results(path: str, args: argparse.Namespace,
                  settings: AnalysisSettings) -> tuple[list[StepResult], RecordingReader]:
    """Every step of a recording, tagged with the recording's notes."""
    reader = RecordingReader(path, ColumnMap(
        time=args.time, setpoint=args.setpoint, feedback=args.feedback,
        time_unit=args.time_unit))
    results = list(analyze_chunks(read_ahead(reader), settings,
                                  has_setpoint=reader.has_setpoint, workers=args.jobs))
    if reader.notes:
        from livestep.steps.tags import NoteTimeline, tag_results
        results = tag_results(results, NoteTimeline(reader.notes))
    return results, reader


def _reader_notes(reader: RecordingReader) -> list[str]:
    """What the reader skipped or dropped, one sentence each."""
    st = reader.stats
    notes = []
    if st.bad:
        notes.append(f"skipped {st.bad} bad data rows (first at line {st.first_bad_line})")
    if st.repeated_time:
        notes.append(f"dropped {st.repeated_time} rows repeating the previous timestamp")
    if not reader.has_setpoint:
        notes.append("no setpoint column: steps found from the feedback alone")
    return notes


def _analyze(args: argparse.Namespace) -> int:
    profile = load_profile(args.profile) if args.profile else None
    settings = _analysis_settings(args, profile)
    results, reader = _read_results(args.file, args, settings)
    st = reader.stats
    notes = _reader_notes(reader)
    verdicts = None
    if profile is not None:
        from livestep.judge.verdict import judge
        verdicts = [judge(r, profile) for r in results]
        notes.append(verdict_summary([v.verdict for v in verdicts], profile.name))
    for n in notes:
        print(f"livestep: {n}", file=sys.stderr)
    from livestep.judge.statistics import session_statistics
    stats = session_statistics(results, profile)
    band = settings.measure.settling_band
    if args.json:
        from livestep.reports.tables import (
            add_guidance,
            analysis_document,
            statistics_records,
            write_json,
        )
        doc = analysis_document(str(args.file), st.good, results, notes, verdicts=verdicts,
                                profile=profile)
        doc["statistics"] = statistics_records(stats)
        if profile is not None:
            add_guidance(doc, results, profile, band)
        write_json(doc, sys.stdout)
    elif args.csv:
        from livestep.reports.tables import write_csv
        write_csv(results, sys.stdout, verdicts)
    else:
        from rich.console import Console

        from livestep.reports.tables import render_guidance, render_statistics, render_table
        console = Console()
        render_table(results, console, title=f"{args.file}: {len(results)} steps,"
                     f" {st.good} samples", verdicts=verdicts)
        if len(results) >= 2:
            render_statistics(stats, console)
        if profile is not None:
            render_guidance(results, profile, band, console)
    return EXIT_OK if verdicts is None else gate_status(verdicts)


def _tag(text: str) -> tuple[str, str]:
    from livestep.steps.tags import parse_note

    pair = parse_note(text)
    if pair is None or not pair[1]:
        raise InputError(f"--tags: expected name=value, got {text!r}")
    return pair


def _compare(args: argparse.Namespace) -> int:
    if len(args.files) > 2 or (len(args.files) == 1 and not args.tags):
        raise InputError("compare: give two recordings, or one recording and --tags A B")
    profile = load_profile(args.profile) if args.profile else None
    settings = _analysis_settings(args, profile)
    sides = []
    loaded: dict[str, list[StepResult]] = {}
    for k in range(2):
        path = args.files[min(k, len(args.files) - 1)]
        if path not in loaded:
            loaded[path] = _read_results(path, args, settings)[0]
        results, label = loaded[path], path
        if args.tags:
            tag = _tag(args.tags[k])
            present = sorted({f"{n}={v}" for r in results for n, v in r.tags})
            results = [r for r in results if tag in r.tags]
            label = f"{path} [{args.tags[k]}]"
            if not results:
                raise InputError(f"{path}: no step carries the note {args.tags[k]!r} (notes"
                                 f" present: {', '.join(present) or 'none'})")
        if not results:
            raise InputError(f"{path}: no steps found, nothing to compare")
        sides.append((results, label))
    from livestep.judge.compare import compare

    cmp = compare(sides[0][0], sides[1][0], sides[0][1], sides[1][1])
    if args.json:
        from livestep.reports.tables import comparison_document, write_json
        write_json(comparison_document(cmp), sys.stdout)
    else:
        from rich.console import Console

        from livestep.reports.tables import render_comparison
        render_comparison(cmp, Console())
    return EXIT_OK


def _report(args: argparse.Namespace) -> int:
    from dataclasses import replace

    profile = load_profile(args.profile) if args.profile else None
    settings = replace(_analysis_settings(args, profile), keep_windows=True)
    results, reader = _read_results(args.file, args, settings)
    st = reader.stats
    notes = _reader_notes(reader)

    from livestep.reports import read_session_info, write_report

    info = read_session_info(args.file, metadata=reader.metadata, samples=st.good,
                             first_t=st.first_time, last_t=st.last_time, notes=tuple(notes))
    name = Path(args.file).name.removesuffix(".gz").removesuffix(".csv")
    out = Path(args.output or f"{name}-report.html")
    write_report(out, results, info, profile, args.png, measure=settings.measure)
    summary = f"{len(results)} steps"
    if profile is not None:
        from livestep.judge.verdict import judge
        summary = verdict_summary([judge(r, profile).verdict for r in results], profile.name)
    print(f"livestep: wrote {out} ({summary})", file=sys.stderr)
    return EXIT_OK


def _live(args: argparse.Namespace) -> int:
    port = _port_settings(args, args.port)
    if args.rate:
        print(f"livestep: no device time: samples stamped from their count at {args.rate:g} Hz"
              " (host arrival times come in bursts and are not used)", file=sys.stderr)
    profile = load_profile(args.profile) if args.profile else None
    settings, decoder = _analysis_settings(args, profile), _decoder(args)  # bad options first
    plan = _plan(args)
    driver = None
    if plan is not None:
        from livestep.live.plan import check_sendable, describe_plan
        from livestep.live.plan_run import PlanRunner, confirm_plan

        if not args.send:
            for line in describe_plan(plan):
                print(line)
            print("dry run: nothing was sent (add --send to send this plan)")
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
    if cmds:
        doc["commands"] = {**doc.get("commands", {}), **cmds}
    if not doc:
        return None
    if not isinstance(doc.get("limits", {}), dict) or not isinstance(doc.get("commands", {}),
                                                                      dict):
        raise InputError("limits and commands must be tables", source=args.plan or "plan")
    return parse_plan(doc, source=args.plan or "plan options")


def _replay(args: argparse.Namespace) -> int:
    return run_replay(Path(args.file), _decoder(args), _analysis_settings(args),
                      speed=None if args.fast else args.speed, json_doc=args.json,
                      json_lines=args.json_lines)


def _watch(args: argparse.Namespace) -> int:
    from livestep.live.run import metadata_for, run_headless
    from livestep.live.watch import Watch
    from livestep.sources.replay import ReplaySource

    if args.steps is not None and args.steps < 1:
        raise InputError("--steps: expected a positive whole number")
    profile = load_profile(args.profile) if args.profile else None
    settings = _analysis_settings(args, profile)
    decoder = _decoder(args)
    replay = Path(args.source).is_file()
    if replay:
        source = ReplaySource(Path(args.source), speed=None if args.fast else args.speed)
    else:
        from livestep.sources.serial_port import SerialReader

        source = SerialReader(_port_settings(args, args.source))
    record = None
    if not args.no_record and (args.record or not replay):
        record = Path(args.record or time.strftime("livestep-%Y%m%d-%H%M%S.csv"))
    watch = Watch(source, decoder, settings, source_name=args.source, record=record,
                  raw=Path(args.raw) if args.raw else None,
                  metadata=metadata_for(args.source, decoder), profile=profile,
                  duration=args.duration, max_steps=args.steps)
    if args.headless:
        return run_headless(watch, sys.stdout)
    from livestep.tui.app import run_app

    return run_app(watch)


def _demo(args: argparse.Namespace) -> int:
    from livestep.bench.demo import demo_profile, run_demo

    profile = load_profile(args.profile) if args.profile else demo_profile()
    settings = AnalysisSettings(measure=_measure_settings(profile))

    record = None
    if not args.no_record:
        record = Path(args.record or time.strftime("livestep-demo-%Y%m%d-%H%M%S.csv"))
    if not (args.console or args.json_lines) and sys.stdout.isatty():
        from livestep.tui.app import run_demo_app

        return run_demo_app(quick=args.quick, record=record, fmt=args.format, seed=args.seed,
                            profile=profile, settings=settings)
    return run_demo(quick=args.quick, record=record, fmt=args.format, seed=args.seed,
                    json_lines=args.json_lines, profile=profile, settings=settings)


def _sim(args: argparse.Namespace) -> int:
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


def _ports(args: argparse.Namespace) -> int:
    from rich.console import Console
    from rich.table import Table

    from livestep.sources.ports import list_serial_ports

    ports = list_serial_ports()
    console = Console()
    if not ports:
        console.print("no serial ports found (pseudo-terminals are not listed)")
        return EXIT_OK
    table = Table("device", "stable path", "description", "hardware id")
    for p in ports:
        table.add_row(p.device, p.stable, p.description, p.hwid)
    console.print(table)
    return EXIT_OK


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
        command = {"analyze": _analyze, "compare": _compare, "report": _report, "live": _live,
                   "replay": _replay, "watch": _watch, "ports": _ports, "demo": _demo,
                   "sim": _sim}
        return command[args.command](args)
    except InputError as exc:
        print(f"livestep: error: {exc}", file=sys.stderr)
        return exc.exit_status
    except KeyboardInterrupt:
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # a bug: still one line, never a traceback
        print(f"livestep: internal error: {type(exc).__name__}: {exc}", file=sys.stderr)
        return 1
