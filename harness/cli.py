"""The ``lineproof`` command."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path

from lineproof import __version__
from lineproof.errors import InputError, LineproofError, RunHalted

#: Exit codes: 0 all devices passed / command done, 1 a device failed or was indeterminate,
#: 2 the run could not complete, 3 invalid input.
EXIT_OK, EXIT_DEVICE_FAILED, EXIT_INCOMPLETE, EXIT_INPUT = 0, 1, 2, 3


def _demo(arguments: argparse.Namespace) -> int:
    from lineproof.demo import run_demo

    termination = "poor-termination" if arguments.worn_termination else "good-termination"
    run_demo(Path(arguments.out), termination=termination)
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lineproof",
        description="Calibrate, qualify, verify and measure inline coaxial devices on VISA or serial "
        "analyzers, judge them against limits with the uncertainty in view, and keep a traceable record.",
    )
    parser.add_argument("--version", action="version", version=f"lineproof {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")

    demo = commands.add_parser(
        "demo", help="run the whole job once on a simulated bench (no hardware needed)",
        description="Start a simulated analyzer on 127.0.0.1, calibrate it, qualify the termination, "
        "measure a batch of invented meter heads and write Touchstone files and a results database.",
    )
    demo.add_argument("--out", default="lineproof-demo", metavar="DIR",
                      help="folder for the results database and Touchstone files (default: ./lineproof-demo)")
    demo.add_argument("--worn-termination", action="store_true",
                      help="use the bench's worn termination, to see the run refuse it")
    demo.set_defaults(handler=_demo)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    arguments = parser.parse_args(argv)
    if not getattr(arguments, "handler", None):
        parser.print_help()
        return EXIT_INPUT
    try:
        return arguments.handler(arguments)
    except InputError as exc:
        print(f"lineproof: invalid input: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except RunHalted as exc:
        print(f"lineproof: run stopped: {exc}", file=sys.stderr)
        return EXIT_INCOMPLETE
    except LineproofError as exc:
        print(f"lineproof: run could not complete: {exc}", file=sys.stderr)
        return EXIT_INCOMPLETE
    except KeyboardInterrupt:
        print("lineproof: interrupted", file=sys.stderr)
        return EXIT_INCOMPLETE


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
