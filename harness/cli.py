"""The ``lineproof`` command."""

from __future__ import annotations

import argparse
import importlib
import json
import os
import re
import sys
from collections.abc import Sequence
from typing import NoReturn

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


#: argparse's own wording of a mistake in one argument: "argument --verdict: invalid choice: ...".
_ARGUMENT_MESSAGE = re.compile(r"^argument (?P<key>[^:]+): (?P<problem>.*)$", re.DOTALL)
_REQUIRED_MESSAGE = re.compile(r"^the following arguments are required: (?P<key>.*)$")


def error_object(problems: list[dict[str, object]]) -> str:
    """The one-line JSON error object every ``--json`` command writes on invalid input
    (``ok`` as ``lineproof check --json`` reports, ``event`` as ``lineproof run --json``)."""
    return json.dumps({"event": "error", "kind": "invalid-input", "exit_code": EXIT_INPUT, "ok": False,
                       "problems": problems})


class CommandLineParser(argparse.ArgumentParser):
    """argparse with lineproof's exit codes: a mistake on the command line is invalid input
    (exit 3), not argparse's 2, which lineproof keeps for "the run could not complete".  The
    usage and the problem go to standard error and, when ``--json`` was given, the JSON error
    object to standard output.  Subcommands' parsers are of this class too (argparse makes
    them of their parent's class)."""

    _given: list[str] = []

    def parse_known_args(self, args=None, namespace=None):  # type: ignore[no-untyped-def]  # noqa: ANN001, ANN201
        self._given = list(sys.argv[1:] if args is None else args)
        return super().parse_known_args(args, namespace)

    def parse_args(self, args=None, namespace=None):  # type: ignore[no-untyped-def]  # noqa: ANN001, ANN201
        # Unrecognized arguments are reported by the subcommand they were given to (with its usage).
        arguments, extras = self.parse_known_args(args, namespace)
        if extras:
            self.subcommand(arguments).error(f"unrecognized arguments: {' '.join(extras)}")
        return arguments

    def subcommand(self, arguments: argparse.Namespace) -> CommandLineParser:
        """The parser of the subcommand ``arguments`` were parsed for (else this one)."""
        for action in self._actions:
            if isinstance(action, argparse._SubParsersAction):
                chosen = action.choices.get(getattr(arguments, action.dest, None) or "")
                if isinstance(chosen, CommandLineParser):
                    return chosen
        return self

    def wants_json(self) -> bool:
        """Whether ``--json`` (or an abbreviation argparse accepts) was among the arguments."""
        given = self._given[:self._given.index("--")] if "--" in self._given else self._given
        if "--json" not in self._option_string_actions:  # the top level: before the subcommand was known
            return "--json" in given
        return any(len(arg) >= 3 and "--json".startswith(arg.split("=", 1)[0]) for arg in given)

    def problem(self, message: str) -> dict[str, object]:
        """argparse's message as a problem with its key (the option or argument) and the fix."""
        key, problem = None, message
        found = _ARGUMENT_MESSAGE.match(message)
        required = _REQUIRED_MESSAGE.match(message)
        if found:
            key, problem = found.group("key"), found.group("problem")
        elif required:
            key = required.group("key")
        elif message.startswith("unrecognized arguments: "):
            key = message.split(": ", 1)[1].split(" ", 1)[0]
        return {"file": None, "line": None, "key": key, "problem": problem,
                "fix": f"correct the command line; {self.prog} --help lists what it takes"}

    def error(self, message: str) -> NoReturn:
        problem = self.problem(message)
        self.print_usage(sys.stderr)
        where = f" [{problem['key']}]" if problem["key"] else ""
        print(f"{self.prog}: invalid input{where}: {problem['problem']} -- fix: {problem['fix']}", file=sys.stderr)
        if self.wants_json():
            print(error_object([problem]), flush=True)
        self.exit(EXIT_INPUT)


def build_parser() -> CommandLineParser:
    parser = CommandLineParser(
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
        if getattr(arguments, "json", False):
            items = getattr(exc, "problems", None) or [exc]
            print(error_object([{"file": p.path, "line": p.line, "key": p.key, "problem": p.problem, "fix": p.fix}
                                for p in items]), flush=True)
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
