"""Options and helpers the command groups share: parsing of values, measurement and
analysis settings, decoder and port settings from options."""

from __future__ import annotations

import argparse
import os

from livestep.decode.text import DELIMITERS, TextFormat
from livestep.decode.timebase import ClockSettings
from livestep.errors import InputError
from livestep.judge.profile import Profile
from livestep.live.session import Decoder, make_decoder
from livestep.sources.recording import TIME_UNITS
from livestep.steps.analysis import AnalysisSettings
from livestep.steps.detect import DetectorSettings
from livestep.steps.measure import MeasureSettings


class Parser(argparse.ArgumentParser):
    def error(self, message: str) -> None:  # one line, exit 2, as for bad input
        raise InputError(f"{self.prog}: {message}")


def levels(text: str) -> tuple[float, float]:
    try:
        lo, hi = (float(x) for x in text.split(","))
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected LO,HI in percent, got {text!r}") from None
    return lo, hi


def positive(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not x > 0:
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return x


def add_output_options(p: argparse.ArgumentParser) -> None:
    """``--color``, which every command takes (see :mod:`livestep.sinks.terminal`)."""
    from livestep.sinks.terminal import COLOR_MODES

    p.add_argument("--color", choices=COLOR_MODES, default="auto",
                   help="colour the output: auto (on a terminal, unless NO_COLOR is set),"
                   " always, never (default auto)")


def add_analysis_options(p: argparse.ArgumentParser) -> None:
    m = p.add_argument_group("measurement")
    m.add_argument("--min-step", type=positive, metavar="X",
                   help="smallest setpoint change that is a step, setpoint units (default:"
                   " 10 x the feedback noise before it)")
    m.add_argument("--rise-levels", type=levels, metavar="LO,HI",
                   help="rise-time reference levels, %% of amplitude (default: the profile's,"
                   " else 10,90)")
    m.add_argument("--settling-band", type=positive, metavar="PCT",
                   help="settling band, +-%% of amplitude (default: the profile's, else 2)")
    m.add_argument("--max-window", type=positive, default=120.0, metavar="S",
                   help="longest step window, seconds (default 120)")
    m.add_argument("--no-fit", action="store_true", help="skip the second-order model fit")


def measure_settings(profile: Profile | None, band: float | None = None,
                      levels: tuple[float, float] | None = None) -> MeasureSettings:
    """Options first, then the profile's settling band and rise levels, then defaults."""
    default = MeasureSettings()
    return MeasureSettings(
        rise_levels=levels or (profile and profile.rise_levels) or default.rise_levels,
        settling_band=band or (profile and profile.settling_band) or default.settling_band)


def analysis_settings(args: argparse.Namespace,
                       profile: Profile | None = None) -> AnalysisSettings:
    try:
        return AnalysisSettings(
            detect=DetectorSettings(min_step=args.min_step, max_window=args.max_window),
            measure=measure_settings(profile, args.settling_band, args.rise_levels),
            fit_model=not args.no_fit)
    except ValueError as exc:
        raise InputError(str(exc)) from None


def add_stream_options(p: argparse.ArgumentParser) -> None:
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
    d.add_argument("--tick-rate", type=positive, metavar="HZ", help="rate of the time ticks")
    d.add_argument("--wrap", type=int, choices=(16, 32),
                   help="the device time is a counter of this many bits that wraps"
                   " (binary frames: 32)")
    d.add_argument("--rate", type=positive, metavar="HZ",
                   help="no device time: stamp samples on the host from their count at this rate")


def decoder_from_args(args: argparse.Namespace) -> Decoder:
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


def add_port_options(p: argparse.ArgumentParser) -> None:
    sp = p.add_argument_group("serial port")
    sp.add_argument("--baud", type=int, default=115200, help="baud rate (default 115200)")
    sp.add_argument("--parity", choices=("N", "E", "O"), default="N", help="parity (default N)")
    sp.add_argument("--shared", action="store_true",
                    help="do not lock the port against other programs")
    sp.add_argument("--dtr", choices=("on", "off"), help="drive DTR on open (may reset boards)")
    sp.add_argument("--rts", choices=("on", "off"), help="drive RTS on open")


def add_record_options(p: argparse.ArgumentParser, replay_note: bool = False) -> None:
    rec = p.add_argument_group("recording")
    rec.add_argument("--record", metavar="FILE",
                     help="recording file (default livestep-YYYYmmdd-HHMMSS.csv; never"
                     " overwritten)" + ("; a replay records only when given" if replay_note
                                         else ""))
    rec.add_argument("--no-record", action="store_true", help="do not record the samples")
    rec.add_argument("--raw", metavar="FILE", help="also capture the raw bytes to FILE")


def port_settings(args: argparse.Namespace, url: str):
    from livestep.sources.serial_port import PortSettings

    return PortSettings(url=url, baudrate=args.baud, parity=args.parity,
                        exclusive=not args.shared,
                        dtr=None if args.dtr is None else args.dtr == "on",
                        rts=None if args.rts is None else args.rts == "on")


def add_recording_options(p: argparse.ArgumentParser) -> None:
    cols = p.add_argument_group("columns")
    cols.add_argument("--time", default="t", metavar="COL", help="time column (default t)")
    cols.add_argument("--setpoint", metavar="COL",
                      help="setpoint column (default: 'setpoint' if present, else steps are"
                      " found from the feedback alone)")
    cols.add_argument("--feedback", default="feedback", metavar="COL",
                      help="feedback column (default feedback)")
    cols.add_argument("--time-unit", default="s", choices=sorted(TIME_UNITS),
                      help="unit of the time column (default s)")
    add_analysis_options(p)
    p.add_argument("--jobs", type=int, default=default_jobs(), metavar="N",
                   help="processes analysing the steps: this one detects them and, from 2 on,"
                   " N - 1 more measure and fit them; 1: all in this one (default:"
                   f" {default_jobs()} on this machine, see the README's performance notes)")


def default_jobs() -> int:
    """Processes analysing a recording (:func:`~livestep.steps.analysis.analyze_chunks`),
    besides the one reading it: 1 (all in this process) with 2 cores or fewer, where a
    worker measured no faster (``tools/bench_analyze.py``); else one per core beyond the
    reader's, at most 4 (not measured)."""
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        cores = os.cpu_count() or 1
    return 1 if cores <= 2 else min(cores - 1, 4)


def parse_tag(text: str) -> tuple[str, str]:
    from livestep.steps.tags import parse_note

    pair = parse_note(text)
    if pair is None or not pair[1]:
        raise InputError(f"--tags: expected name=value, got {text!r}")
    return pair
