"""The ``livestep`` command line.

Exit statuses: 0 success; 2 bad input or options (one line on stderr);
1 internal error (one line on stderr; a bug); 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from livestep import __version__
from livestep.analysis import AnalysisSettings, analyze_chunks
from livestep.detect import DetectorSettings
from livestep.errors import EXIT_INTERRUPTED, EXIT_OK, InputError
from livestep.measure import MeasureSettings
from livestep.recording import TIME_UNITS, ColumnMap, RecordingReader

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
    cols = a.add_argument_group("columns")
    cols.add_argument("--time", default="t", metavar="COL", help="time column (default t)")
    cols.add_argument("--setpoint", metavar="COL",
                      help="setpoint column (default: 'setpoint' if present, else steps are"
                      " found from the feedback alone)")
    cols.add_argument("--feedback", default="feedback", metavar="COL",
                      help="feedback column (default feedback)")
    cols.add_argument("--time-unit", default="s", choices=sorted(TIME_UNITS),
                      help="unit of the time column (default s)")
    m = a.add_argument_group("measurement")
    m.add_argument("--min-step", type=_positive, metavar="X",
                   help="smallest setpoint change that is a step, setpoint units (default:"
                   " 10 x the feedback noise before it)")
    m.add_argument("--rise-levels", type=_levels, default=(10.0, 90.0), metavar="LO,HI",
                   help="rise-time reference levels, %% of amplitude (default 10,90)")
    m.add_argument("--settling-band", type=_positive, default=2.0, metavar="PCT",
                   help="settling band, +-%% of amplitude (default 2)")
    m.add_argument("--max-window", type=_positive, default=120.0, metavar="S",
                   help="longest step window, seconds (default 120)")
    m.add_argument("--no-fit", action="store_true", help="skip the second-order model fit")
    return p


def _analyze(args: argparse.Namespace) -> int:
    try:
        settings = AnalysisSettings(
            detect=DetectorSettings(min_step=args.min_step, max_window=args.max_window),
            measure=MeasureSettings(rise_levels=args.rise_levels,
                                    settling_band=args.settling_band),
            fit_model=not args.no_fit)
    except ValueError as exc:
        raise InputError(str(exc)) from None
    reader = RecordingReader(args.file, ColumnMap(
        time=args.time, setpoint=args.setpoint, feedback=args.feedback,
        time_unit=args.time_unit))
    results = list(analyze_chunks(reader, settings, has_setpoint=reader.has_setpoint))
    st = reader.stats
    notes = []
    if st.bad:
        notes.append(f"skipped {st.bad} bad data rows (first at line {st.first_bad_line})")
    if st.repeated_time:
        notes.append(f"dropped {st.repeated_time} rows repeating the previous timestamp")
    if not reader.has_setpoint:
        notes.append("no setpoint column: steps found from the feedback alone")
    for n in notes:
        print(f"livestep: {n}", file=sys.stderr)
    if args.json:
        from livestep.report import analysis_document, write_json
        write_json(analysis_document(str(args.file), st.good, results, notes), sys.stdout)
    elif args.csv:
        from livestep.report import write_csv
        write_csv(results, sys.stdout)
    else:
        from rich.console import Console

        from livestep.report import render_table
        render_table(results, Console(), title=f"{args.file}: {len(results)} steps,"
                     f" {st.good} samples")
    return EXIT_OK


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
        if args.command == "analyze":
            return _analyze(args)
        raise InputError(f"unknown command {args.command!r}")
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
