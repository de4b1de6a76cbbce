"""The ``livestep`` command line.

Exit statuses: 0 success; 1 a judged step failed its profile (or no step was found to
judge), or an internal error (one line on stderr; a bug); 2 bad input or options (one
line on stderr); 3 a file livestep writes could not be written (a recording on a full
disk: what was written is kept); 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from livestep import __version__
from livestep.cli import bench, live, offline, tuning
from livestep.cli.options import Parser, add_output_options
from livestep.errors import EXIT_INTERRUPTED, EXIT_OK, InputError, one_line
from livestep.sinks.terminal import set_color_mode

__all__ = ["build_parser", "main"]


def build_parser() -> argparse.ArgumentParser:
    p = Parser(prog="livestep", description="Find and measure setpoint step tests in "
                "closed-loop controller data.")
    p.add_argument("--version", action="version", version=f"livestep {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=Parser)

    offline.add_parsers(sub)
    live.add_parsers(sub)
    bench.add_parsers(sub)
    tuning.add_parsers(sub)
    for command in sub.choices.values():  # every command, the same output options
        add_output_options(command)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
        set_color_mode(args.color)
        return args.run(args)
    except InputError as exc:
        print(f"livestep: error: {exc}", file=sys.stderr)
        return exc.exit_status
    except KeyboardInterrupt:
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_OK
    except Exception as exc:  # a bug: still one line, never a traceback
        print(one_line(f"livestep: internal error: {type(exc).__name__}: {exc}"),
              file=sys.stderr)
        return 1
    finally:
        set_color_mode("auto")  # the next call (a test, a script) starts afresh
