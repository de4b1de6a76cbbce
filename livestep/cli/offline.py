"""Commands on recordings: ``analyze``, ``compare``, ``report``."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from livestep.cli.options import (
    add_recording_options,
    analysis_settings,
    parse_tag,
)
from livestep.errors import EXIT_BAD_INPUT, EXIT_OK, InputError, one_line
from livestep.judge.profile import load_profile
from livestep.judge.verdict import gate_status, verdict_summary
from livestep.sources.read_process import read_in_process
from livestep.sources.recording import ColumnMap, RecordingReader
from livestep.steps.analysis import AnalysisSettings, StepResult, analyze_chunks


def add_parsers(sub: argparse._SubParsersAction) -> None:
    """The offline commands' parsers."""
    a = sub.add_parser("analyze", help="measure every step in a recording (CSV or .csv.gz)")
    a.add_argument("file", help="recording: CSV with a header row, optionally gzip-compressed")
    out = a.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true", help="one JSON document on stdout")
    out.add_argument("--csv", action="store_true", help="one CSV row per step on stdout")
    a.add_argument("--profile", metavar="TOML",
                   help="tolerance profile: judge every step; exit status 1 when any step"
                   " fails (or none is found)")
    add_recording_options(a)

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
    add_recording_options(c)

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
    add_recording_options(rep)

    a.set_defaults(run=run_analyze)
    c.set_defaults(run=run_compare)
    rep.set_defaults(run=run_report)


def _read_results(path: str, args: argparse.Namespace,
                  settings: AnalysisSettings) -> tuple[list[StepResult], RecordingReader]:
    """Every step of a recording, tagged with the recording's notes."""
    reader = RecordingReader(path, ColumnMap(
        time=args.time, setpoint=args.setpoint, feedback=args.feedback,
        time_unit=args.time_unit))
    results = list(analyze_chunks(read_in_process(reader), settings,
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
    if reader.damage is not None:
        notes.append(f"only the lines before the damage were read ({reader.damage})")
    return notes


def _damaged(reader: RecordingReader) -> int | None:
    """Exit status 2 with one line when the recording was damaged part way (its steps
    before the damage have been shown), else ``None``."""
    if reader.damage is None:
        return None
    print(f"livestep: error: {reader.damage}", file=sys.stderr)
    return EXIT_BAD_INPUT


def run_analyze(args: argparse.Namespace) -> int:
    profile = load_profile(args.profile) if args.profile else None
    settings = analysis_settings(args, profile)
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
        from livestep.reports.csv_rows import write_csv
        write_csv(results, sys.stdout, verdicts)
    else:
        from livestep.reports.tables import render_guidance, render_statistics, render_table
        from livestep.sinks.terminal import make_console
        console = make_console()
        from rich.markup import escape

        render_table(results, console, title=escape(f"{one_line(args.file)}: {len(results)}"
                                                    f" steps, {st.good} samples"),
                     verdicts=verdicts)
        if len(results) >= 2:
            render_statistics(stats, console)
        if profile is not None:
            render_guidance(results, profile, band, console)
    damaged = _damaged(reader)
    if damaged is not None:
        return damaged
    return EXIT_OK if verdicts is None else gate_status(verdicts)


def run_compare(args: argparse.Namespace) -> int:
    if len(args.files) > 2 or (len(args.files) == 1 and not args.tags):
        raise InputError("compare: give two recordings, or one recording and --tags A B")
    profile = load_profile(args.profile) if args.profile else None
    settings = analysis_settings(args, profile)
    sides = []
    loaded: dict[str, list[StepResult]] = {}
    for k in range(2):
        path = args.files[min(k, len(args.files) - 1)]
        if path not in loaded:
            found, reader = _read_results(path, args, settings)
            if reader.damage is not None:  # a comparison of part of a file would mislead
                raise InputError(reader.damage)
            loaded[path] = found
        results, label = loaded[path], path
        if args.tags:
            tag = parse_tag(args.tags[k])
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
        from livestep.reports.tables import render_comparison
        from livestep.sinks.terminal import make_console
        render_comparison(cmp, make_console())
    return EXIT_OK


def run_report(args: argparse.Namespace) -> int:
    from dataclasses import replace

    profile = load_profile(args.profile) if args.profile else None
    settings = replace(analysis_settings(args, profile), keep_windows=True)
    results, reader = _read_results(args.file, args, settings)
    st = reader.stats
    notes = _reader_notes(reader)

    from livestep.reports import read_session_info, write_report

    info = read_session_info(args.file, metadata=reader.metadata, samples=st.good,
                             first_t=st.first_time, last_t=st.last_time, notes=tuple(notes))
    info = replace(info, source=one_line(info.source))  # a non-UTF-8 file name, shown
    name = Path(args.file).name.removesuffix(".gz").removesuffix(".csv")
    out = Path(args.output or f"{name}-report.html")
    write_report(out, results, info, profile, args.png, measure=settings.measure)
    summary = f"{len(results)} steps"
    if profile is not None:
        from livestep.judge.verdict import judge
        summary = verdict_summary([judge(r, profile).verdict for r in results], profile.name)
    print(f"livestep: wrote {one_line(str(out))} ({summary})", file=sys.stderr)
    damaged = _damaged(reader)
    return EXIT_OK if damaged is None else damaged
