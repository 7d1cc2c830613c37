"""The command line itself: a mistake on it is invalid input (exit 3) for every command, never
argparse's exit 2 (which lineproof keeps for "the run could not complete"), with the usage, the
option at fault and the fix, and the JSON error object when --json was given."""

from __future__ import annotations

import argparse
import json

import pytest

from lineproof.cli import EXIT_INPUT, build_parser, main


def _commands() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            return dict(action.choices)
    raise AssertionError("lineproof has no subcommands")


COMMANDS = sorted(_commands())
JSON_COMMANDS = sorted(name for name, sub in _commands().items() if "--json" in sub._option_string_actions)


def _with_positionals(command: str) -> list[str]:
    """The command and a placeholder for each positional argument it requires."""
    required = [a for a in _commands()[command]._actions if not a.option_strings and a.required]
    return [command] + ["placeholder"] * len(required)


def _refused(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[str, str]:
    with pytest.raises(SystemExit) as stopped:
        main(argv)
    assert stopped.value.code == EXIT_INPUT, f"{argv} exited {stopped.value.code}"
    captured = capsys.readouterr()
    return captured.out, captured.err


def test_every_command_is_covered() -> None:
    # The parametrised tests below take the commands from the parser: a new one is covered too.
    assert {"run", "check", "results", "report", "history", "instruments", "sim", "demo"} <= set(COMMANDS)
    assert {"run", "check", "results", "history", "instruments"} <= set(JSON_COMMANDS)


@pytest.mark.parametrize("command", COMMANDS)
def test_an_unknown_option_is_invalid_input(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    out, err = _refused([*_with_positionals(command), "--no-such-option"], capsys)
    assert err.startswith(f"usage: lineproof {command}")
    assert f"lineproof {command}: invalid input [--no-such-option]: unrecognized arguments" in err
    assert f"fix: correct the command line; lineproof {command} --help" in err
    assert out == ""  # no --json: nothing on standard output


@pytest.mark.parametrize("command", JSON_COMMANDS)
def test_with_json_the_error_object_is_written(command: str, capsys: pytest.CaptureFixture[str]) -> None:
    out, err = _refused([*_with_positionals(command), "--json", "--no-such-option"], capsys)
    assert "invalid input [--no-such-option]" in err
    error = json.loads(out)
    assert error["event"] == "error" and error["kind"] == "invalid-input" and error["exit_code"] == 3
    assert error["ok"] is False
    [problem] = error["problems"]
    assert problem["key"] == "--no-such-option" and problem["fix"] and problem["file"] is None


@pytest.mark.parametrize("argv, key", [
    (["run", "--bogus", "x"], "--bogus"),
    (["run", "seq.toml", "--operator"], "--operator"),
    (["results", "--verdict", "maybe"], "--verdict"),
    (["check"], "SEQUENCE"),
    (["report"], "RUN_ID"),
    (["no-such-command"], "COMMAND"),
    (["--no-such-option"], "--no-such-option"),
])
def test_the_audited_mistakes_name_their_key(argv: list[str], key: str, capsys: pytest.CaptureFixture[str]) -> None:
    out, err = _refused(argv, capsys)
    assert f"invalid input [{key}]" in err and "-- fix:" in err
    assert out == ""


@pytest.mark.parametrize("argv", [
    ["run", "seq.toml", "--operator", "--json"],  # --json taken as an option, not as the operator's name
    ["results", "--verdict", "maybe", "--js"],  # an abbreviation argparse accepts
    ["no-such-command", "--json"],  # before the command is known
    ["results", "--json", "--csv"],  # --json refused, but given
])
def test_json_is_seen_however_it_was_given(argv: list[str], capsys: pytest.CaptureFixture[str]) -> None:
    out, _ = _refused(argv, capsys)
    assert json.loads(out)["problems"][0]["key"] in ("--operator", "--verdict", "COMMAND", "--csv")


def test_json_after_a_double_dash_is_not_an_option(capsys: pytest.CaptureFixture[str]) -> None:
    out, _ = _refused(["run", "--bogus", "--", "--json"], capsys)
    assert out == ""


def test_help_and_version_still_exit_0(capsys: pytest.CaptureFixture[str]) -> None:
    for argv in (["--help"], ["--version"], ["run", "--help"]):
        with pytest.raises(SystemExit) as stopped:
            main(argv)
        assert stopped.value.code == 0
    capsys.readouterr()


def test_invalid_input_found_by_a_command_is_json_too(tmp_path, capsys: pytest.CaptureFixture[str]) -> None:  # noqa: ANN001
    # Not the parser but the command refuses (no database in the folder): the same error object.
    assert main(["results", "--records", str(tmp_path), "--json"]) == EXIT_INPUT
    captured = capsys.readouterr()
    error = json.loads(captured.out)
    assert error["kind"] == "invalid-input" and error["problems"][0]["problem"] == "no results database here"
    assert main(["results", "--records", str(tmp_path)]) == EXIT_INPUT
    assert capsys.readouterr().out == ""
