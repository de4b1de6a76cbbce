"""The ``livestep`` command line.

Exit statuses: 0 success; 1 a judged step failed its profile (or no step was found to
judge), or an internal error (one line on stderr; a bug); 2 bad input or options (one
line on stderr); 130 interrupted.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence

from livestep import __version__
from livestep.cli import bench, live, offline
from livestep.cli.options import Parser
from livestep.errors import EXIT_INTERRUPTED, EXIT_OK, InputError

__all__ = ["build_parser", "main"]


def build_parser() -> argparse.ArgumentParser:
    p = Parser(prog="livestep", description="Find and measure setpoint step tests in "
                "closed-loop controller data.")
    p.add_argument("--version", action="version", version=f"livestep {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=Parser)

    offline.add_parsers(sub)
    live.add_parsers(sub)
    bench.add_parsers(sub)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    try:
        args = build_parser().parse_args(argv)
        return args.run(args)
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
