"""Command line: argument parsing only. Each command lives in its own module.

A command module exposes ``register(subparsers)`` which adds its parser and sets
``func`` (a callable taking the parsed namespace and returning an exit status). This
module wires them, catches :class:`~iqscope.errors.IqscopeError` and prints one line.
"""

from __future__ import annotations

import argparse
import importlib
import sys
from collections.abc import Sequence
from typing import NoReturn

from .. import __version__
from ..errors import EXIT_ERROR, EXIT_INTERRUPTED, EXIT_USAGE, IqscopeError

__all__ = ["main", "build_parser", "EXIT_STATUS_HELP"]

#: Command modules, in the order ``--help`` lists them. A module that is not present
#: (a feature not built yet) is skipped.
COMMAND_MODULES = (
    "grade",
    "inspect",
    "drift",
    "watch",
    "synth",
    "limits",
    "harmonics",
    "sweep",
    "capture",
    "calibrate",
)

EXIT_STATUS_HELP = """\
exit status:
  0  success (grade: every verdict passed)
  1  grade: worst verdict is warn (harmonics: warn, inconclusive or no limit)
  2  grade: worst verdict is fail (harmonics: a harmonic exceeds its limit)
  3  unusable input (missing, malformed, truncated file, absurd metadata)
  4  usage error (bad or conflicting options, unusable limits profile)
  5  other error (output exists, capture device, internal failure)
  130 interrupted
"""

SAFETY_LINE = (
    "Safety: transmit only into a dummy load or an antenna you are licensed to use; put enough "
    "attenuation before the receiver (a 5 W transmitter is +37 dBm); RF burns happen even at a "
    "few watts, and RF exposure limits apply; local regulations decide."
)

#: The caution ``synth audio`` prints: its WAV is meant for a transmitter's audio input.
AUDIO_CAUTION = (
    "Caution: this audio is for a transmitter's input. Feed it only into a transmitter that "
    "works into a dummy load (or an antenna you are licensed to use), sample the output through "
    "enough attenuation (5 W is +37 dBm), and mind RF burns and exposure."
)


class _Parser(argparse.ArgumentParser):
    """argparse with our usage-error exit status (4) instead of argparse's 2."""

    def error(self, message: str) -> NoReturn:
        self.print_usage(sys.stderr)
        self.exit(EXIT_USAGE, f"{self.prog}: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="iqscope",
        description="Measure and grade a transmitter's signal from I/Q recordings of a "
        "software-defined receiver.",
        epilog=EXIT_STATUS_HELP + "\n" + SAFETY_LINE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"iqscope {__version__}")
    parser.add_argument("--debug", action="store_true", help="show the full traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"{__name__}._{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"{__name__}._{name}":
                continue
            raise
        module.register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (also used by the console script)."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    try:
        status = args.func(args)
        return int(status or 0)
    except IqscopeError as exc:
        if args.debug:
            raise
        print(f"iqscope: error: {exc}", file=sys.stderr)
        return exc.exit_status
    except KeyboardInterrupt:
        print("iqscope: interrupted", file=sys.stderr)
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return EXIT_ERROR
    except Exception as exc:  # a bug: still one line and a documented status, never a traceback
        if args.debug:
            raise
        print(
            f"iqscope: internal error: {type(exc).__name__}: {exc} "
            "(run with --debug for the traceback, and please report it)",
            file=sys.stderr,
        )
        return EXIT_ERROR


def run() -> None:  # pragma: no cover - console-script shim
    sys.exit(main())
