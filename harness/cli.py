"""The ``lineproof`` command."""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from collections.abc import Sequence

from lineproof import __version__
from lineproof.errors import InputError, LineproofError, RunHalted

#: Exit codes: 0 all devices passed / command done, 1 a device failed or was indeterminate,
#: 2 the run could not complete, 3 invalid input.
EXIT_OK, EXIT_DEVICE_FAILED, EXIT_INCOMPLETE, EXIT_INPUT = 0, 1, 2, 3


#: The modules that define the subcommands, in the order --help lists them.  Each has a
#: ``register(commands)`` that adds its subparser and sets ``handler`` (a function taking the
#: parsed arguments and returning an exit code).  Listed explicitly: nothing registers itself
#: by being imported.
COMMAND_MODULES = (
    "lineproof.demo",
    "lineproof.run_command",
    "lineproof.check_command",
    "lineproof.report_command",
    "lineproof.results_command",
    "lineproof.history_command",
    "lineproof.instruments_command",
    "lineproof.sim_command",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="lineproof",
        description="Calibrate, qualify, verify and measure inline coaxial devices on VISA or serial "
        "analyzers, judge them against limits with the uncertainty in view, and keep a traceable record.",
    )
    parser.add_argument("--version", action="version", version=f"lineproof {__version__}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module_name in COMMAND_MODULES:
        importlib.import_module(module_name).register(commands)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    arguments = parser.parse_args(argv)
    if not getattr(arguments, "handler", None):
        parser.print_help()
        return EXIT_INPUT
    try:
        code = arguments.handler(arguments)
        sys.stdout.flush()  # inside the try: a closed pipe is caught below
        return code
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
    except BrokenPipeError:
        # The reader went away (`lineproof results | head`): not an error of ours.  Point
        # stdout at devnull so the interpreter's final flush does not complain again.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
