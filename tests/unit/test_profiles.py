"""Instrument profiles: the shipped ones load; bad ones name file, key and fix."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from lineproof.drivers.profile_files import ProfileProblems
from lineproof.drivers.profiles import (
    load_analyzer_profile,
    load_switch_profile,
    parse_analyzer_profile,
    parse_switch_profile,
    profile_kind,
    shipped_profile_names,
)
from lineproof.errors import InputError

MINIMAL = """
[profile]
name = "x"
kind = "analyzer"
[capabilities]
ports = 1
paths = "reflection"
frequency_min_hz = 1e6
frequency_max_hz = 1e9
max_points = 201
parameters = ["S11"]
[operations]
identify = { send = "*IDN?", reply = "identity" }
set_start = "FREQ:STAR {start_hz:.0f}"
set_stop = "FREQ:STOP {stop_hz:.0f}"
set_points = "SWE:POIN {points}"
trigger = "INIT"
wait = { send = "*OPC?", reply = "complete" }
read_raw = { send = "TRAC? RAW", reply = "block" }
"""


@pytest.mark.parametrize("name", shipped_profile_names())
def test_shipped_profiles_load(name: str) -> None:
    kind = profile_kind(name)
    if kind == "switch":
        assert load_switch_profile(name).capabilities.channels_per_module >= 1
    else:
        assert kind == "analyzer"
        assert load_analyzer_profile(name).capabilities.max_points >= 2


def test_variant_inherits_operations_and_overrides_capabilities() -> None:
    profile = load_analyzer_profile("generic-scpi-reflectometer")
    assert profile.capabilities.ports == 1 and profile.capabilities.parameters == ("S11",)
    assert profile.operation("read_raw").send == "TRACe:DATA? RAW"


def test_templates_render() -> None:
    profile = parse_analyzer_profile(MINIMAL, "x.toml")
    assert profile.operation("set_start").render(start_hz=144e6) == "FREQ:STAR 144000000"
    assert profile.operation("set_points").render(points=401) == "SWE:POIN 401"


@pytest.mark.parametrize(
    ("change", "key"),
    [
        (('set_start = "FREQ:STAR {start_hz:.0f}"', 'set_start = "FREQ:STAR {stop_hz}"'), "operations.set_start.send"),
        (('set_start = "FREQ:STAR {start_hz:.0f}"', 'set_start = "FREQ:STAR {start_hz.__class__}"'), "operations.set_start.send"),
        (('trigger = "INIT"', 'trigger = { send = "INIT", reply = "maybe" }'), "operations.trigger.reply"),
        (('trigger = "INIT"\n', ""), "operations.trigger"),
        (('paths = "reflection"', 'paths = "sideways"'), "capabilities.paths"),
        (('max_points = 201', 'max_points = "many"'), "capabilities.max_points"),
        (('ports = 1', 'ports = 1\nwheels = 4'), "capabilities.wheels"),
        (('[operations]', '[operations]\nbake = "CAKE"'), "operations.bake"),
    ],
)
def test_bad_profiles_name_the_key(change: tuple[str, str], key: str) -> None:
    text = MINIMAL.replace(*change)
    assert text != MINIMAL
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "mine.toml")
    message = str(caught.value)
    assert "mine.toml" in message and f"[{key}]" in message


@pytest.mark.parametrize(
    ("operation", "allowed"),
    [
        ('identify = "*IDN?"', '"identity"'),  # a plain string means no reply
        ('event_status = "*ESR?"', '"text" or "status"'),
        ('next_error = { send = "SYST:ERR?", reply = "text" }', '"error-entry"'),
        ('wait = "*OPC?"', '"complete" or "status"'),
        ('read_temperature = { send = "SYST:TEMP?", reply = "text" }', '"numbers"'),
        ('read_frequencies = { send = "FREQ:DATA?", reply = "text" }', '"block", "numbers" or "rows"'),
        ('reset = { send = "*RST", reply = "identity" }', '"none", "text" or "complete"'),
        ('set_power = { send = "POW {power_dbm}", reply = "numbers" }', '"none", "text" or "complete"'),
    ],
)
def test_each_operation_allows_only_the_reply_kinds_the_driver_reads(operation: str, allowed: str) -> None:
    name = operation.split(" = ", 1)[0]
    lines = [line for line in MINIMAL.splitlines() if not line.startswith(f"{name} = ")]
    text = "\n".join(lines).replace("[operations]", f"[operations]\n{operation}")
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "mine.toml")
    error = caught.value
    assert (error.path, error.key) == ("mine.toml", f"operations.{name}.reply")
    assert f"{name} must reply {allowed}" in error.problem and f"{name} = {{ send = " in error.fix


def test_an_analyzer_must_have_a_way_to_tell_that_its_sweep_ended() -> None:
    # Without a wait, a trigger without a reply would be followed at once by the trace read,
    # which could return the previous sweep.
    without_wait = MINIMAL.replace('wait = { send = "*OPC?", reply = "complete" }\n', "")
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(without_wait, "mine.toml")
    error = caught.value
    assert (error.path, error.key) == ("mine.toml", "operations.wait")
    assert "previous sweep" in error.problem and 'wait = { send = "*OPC?", reply = "complete" }' in error.fix
    for trigger in ('{ send = "INIT;*OPC?", reply = "complete" }', '{ send = "take", reply = "text" }'):
        profile = parse_analyzer_profile(without_wait.replace('trigger = "INIT"', f"trigger = {trigger}"), "x.toml")
        assert profile.operation("wait") is None


def test_a_polled_wait() -> None:
    polled = '{ send = "*ESR?", reply = "status", arm = "*OPC", done_bits = 1 }'
    profile = parse_analyzer_profile(MINIMAL.replace('{ send = "*OPC?", reply = "complete" }', polled), "x.toml")
    wait = profile.operation("wait")
    assert (wait.send, wait.reply, wait.arm, wait.done_bits) == ("*ESR?", "status", "*OPC", 1)


@pytest.mark.parametrize(
    ("wait", "key"),
    [
        ('{ send = "*ESR?", reply = "status" }', "operations.wait.done_bits"),
        ('{ send = "*ESR?", reply = "status", done_bits = 0 }', "operations.wait.done_bits"),
        ('{ send = "*ESR?", reply = "status", done_bits = 1, arm = "*OPC {points}" }', "operations.wait.arm"),
        ('{ send = "*OPC?", reply = "complete", done_bits = 1 }', "operations.wait.done_bits"),
        ('{ send = "*OPC?", reply = "complete", arm = "*OPC" }', "operations.wait.arm"),
    ],
)
def test_bad_polled_waits_name_the_key_and_the_fix(wait: str, key: str) -> None:
    text = MINIMAL.replace('{ send = "*OPC?", reply = "complete" }', wait)
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "mine.toml")
    assert (caught.value.path, caught.value.key) == ("mine.toml", key) and caught.value.fix


def test_a_switch_reads_its_channels_as_numbers() -> None:
    with pytest.raises(InputError, match=r"\[operations.query_closed.reply\]: query_closed must reply \"numbers\""):
        parse_switch_profile(SWITCH + '[operations]\nquery_closed = { send = "ROUT:CLOS? {channels}", reply = "text" }',
                             "matrix.toml")


def _with_timing(line: str) -> tuple[str, str]:
    return "[operations]", f"[timing]\n{line}\n[operations]"


@pytest.mark.parametrize(
    ("change", "key"),
    [
        (("ports = 1", "ports = 0"), "capabilities.ports"),
        (("ports = 1", "ports = -2"), "capabilities.ports"),
        (("ports = 1", "ports = 5"), "capabilities.ports"),
        (('parameters = ["S11"]', 'parameters = ["S11", "S22"]'), "capabilities.parameters"),  # one port
        (('paths = "reflection"', 'paths = "full"'), "capabilities.paths"),  # one port
        (('parameters = ["S11"]', 'parameters = ["S11", "T11"]'), "capabilities.parameters"),
        (("frequency_max_hz = 1e9", "frequency_max_hz = inf"), "capabilities.frequency_max_hz"),
        (("frequency_max_hz = 1e9", "frequency_max_hz = nan"), "capabilities.frequency_max_hz"),
        (("frequency_max_hz = 1e9", "frequency_max_hz = 1e5"), "capabilities.frequency_max_hz"),
        (("frequency_min_hz = 1e6", "frequency_min_hz = 0"), "capabilities.frequency_min_hz"),
        (("frequency_min_hz = 1e6", "frequency_min_hz = -inf"), "capabilities.frequency_min_hz"),
        (("max_points = 201", "max_points = 1"), "capabilities.max_points"),
        (_with_timing("settle_per_point_s = -1e-3"), "timing.settle_per_point_s"),
        (_with_timing("sweep_overhead_s = -0.1"), "timing.sweep_overhead_s"),
        (_with_timing("sweep_overhead_s = inf"), "timing.sweep_overhead_s"),
        (_with_timing("command_timeout_s = inf"), "timing.command_timeout_s"),
        (_with_timing("command_timeout_s = 0"), "timing.command_timeout_s"),
        (_with_timing("transfer_timeout_margin = -1"), "timing.transfer_timeout_margin"),
        (_with_timing("retries = 11"), "timing.retries"),
        (_with_timing("retries = -1"), "timing.retries"),
        (('trigger = "INIT"', 'trigger = { send = "INIT", timeout_s = inf }'), "operations.trigger.timeout_s"),
        (('set_start = "FREQ:STAR {start_hz:.0f}"', 'set_start = "FREQ:STAR {start_hz"'), "operations.set_start.send"),
        (('trigger = "INIT"', "trigger = 7"), "operations.trigger"),
        (('kind = "analyzer"', 'kind = "meter"'), "profile.kind"),
    ],
)
def test_values_out_of_range_are_refused_with_file_key_and_fix(change: tuple[str, str], key: str) -> None:
    text = MINIMAL.replace(*change)
    assert text != MINIMAL
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "mine.toml")
    error = caught.value
    assert (error.path, error.key) == ("mine.toml", key)
    assert error.line is not None and key.split(".")[1] in text.splitlines()[error.line - 1]
    assert error.fix and f"mine.toml:{error.line} [{key}]: " in str(error) and " -- fix: " in str(error)


@pytest.mark.parametrize(
    ("change", "key"),
    [
        (("parity = \"E\"", "parity = \"E\"\nstop_bits = 3"), "link.stop_bits"),
        (("parity = \"E\"", "parity = \"E\"\nbyte_size = 9"), "link.byte_size"),
        (("baud_rate = 9600", "baud_rate = 0"), "link.baud_rate"),
        (("baud_rate = 9600", "baud_rate = 9600.5"), "link.baud_rate"),
    ],
)
def test_line_settings_out_of_range_are_refused_with_file_key_and_fix(change: tuple[str, str], key: str) -> None:
    text = LINE.replace(*change)
    assert text != LINE
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "line.toml")
    assert (caught.value.path, caught.value.key) == ("line.toml", key) and caught.value.fix


def test_stop_bits_may_be_one_and_a_half() -> None:
    assert parse_analyzer_profile(LINE.replace('parity = "E"', 'parity = "E"\nstop_bits = 1.5'),
                                  "line.toml").link.stop_bits == 1.5


@pytest.mark.parametrize("change", [("modules = 2", "modules = 0"), ("channels_per_module = 6", "channels_per_module = -1")])
def test_a_switch_of_no_channels_is_refused(change: tuple[str, str]) -> None:
    with pytest.raises(InputError) as caught:
        parse_switch_profile(SWITCH.replace(*change), "matrix.toml")
    assert caught.value.key == f"capabilities.{change[1].split(' =')[0]}" and caught.value.fix


def test_a_misspelt_based_on_names_the_users_file(tmp_path: Path) -> None:
    path = tmp_path / "my-analyzer.toml"
    path.write_text('[profile]\nname = "mine"\nkind = "analyzer"\nbased_on = "generic-scpi-analyser"\n',
                    encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_analyzer_profile(path)
    error = caught.value
    assert (error.path, error.key) == (str(path), "profile.based_on")
    assert "'generic-scpi-analyser'" in error.problem and "generic-scpi-analyzer" in error.fix
    assert str(error).startswith(f"{path} [profile.based_on]: ")


def test_unknown_shipped_profile_lists_the_known_ones() -> None:
    with pytest.raises(InputError, match="generic-scpi-analyzer"):
        load_analyzer_profile("no-such-profile")


SWITCH = """
[profile]
name = "bench-matrix"
kind = "switch"
based_on = "generic-scpi-switch"
[capabilities]
modules = 2
channels_per_module = 6
"""


def test_switch_profile_inherits_the_generic_route_commands() -> None:
    profile = parse_switch_profile(SWITCH, "matrix.toml")
    assert (profile.capabilities.modules, profile.capabilities.channels_per_module) == (2, 6)
    assert profile.operation("close_channels").render(channels="(@1!2)") == "ROUTe:CLOSe (@1!2)"
    assert profile.operation("open_all").idempotent and not profile.operation("reset").idempotent


def test_a_switch_profile_is_not_an_analyzer_profile() -> None:
    with pytest.raises(InputError, match="load it as a switch profile"):
        parse_analyzer_profile(SWITCH, "matrix.toml")


LINE = MINIMAL.replace("[capabilities]", """[link]
write_termination = "\\r"
read_termination = "\\r\\n"
echo = true
prompt = "S2> "
error_line = '^\\?(?P<code>\\d+) (?P<text>.*)$'
baud_rate = 9600
parity = "E"
[capabilities]
data_format = "ASCII"
parameter_names = { S11 = "s11" }""").replace(
    'read_raw = { send = "TRAC? RAW", reply = "block" }',
    'read_raw = { send = "rows raw {parameter}", reply = "rows", columns = ["frequency", "re", "im"] }',
).replace('trigger = "INIT"', 'trigger = { send = "take", reply = "text", timeout_s = 30 }')


def test_line_protocol_profile() -> None:
    profile = parse_analyzer_profile(LINE, "line.toml")
    assert profile.link.needs_serial and profile.link.prompt == "S2> " and profile.link.baud_rate == 9600
    assert profile.capabilities.instrument_name("S11") == "s11"
    read = profile.operation("read_raw")
    assert read.columns == ("frequency", "re", "im") and read.render(parameter="s11") == "rows raw s11"
    assert profile.operation("trigger").timeout_s == 30 and not profile.operation("trigger").idempotent


def test_one_set_sweep_replaces_start_stop_points() -> None:
    text = MINIMAL.replace('set_start = "FREQ:STAR {start_hz:.0f}"\nset_stop = "FREQ:STOP {stop_hz:.0f}"\n'
                           'set_points = "SWE:POIN {points}"',
                           'set_sweep = "band {start_hz:.0f} {stop_hz:.0f} {points:d}"')
    profile = parse_analyzer_profile(text, "x.toml")
    assert profile.operation("set_sweep").render(start_hz=1e6, stop_hz=2e6, points=11) == "band 1000000 2000000 11"
    with pytest.raises(InputError, match=r"\[operations.set_points\].*set_sweep"):
        parse_analyzer_profile(text.replace('set_sweep = "band {start_hz:.0f} {stop_hz:.0f} {points:d}"',
                                            'set_start = "A {start_hz}"\nset_stop = "B {stop_hz}"'), "x.toml")


@pytest.mark.parametrize(
    ("change", "key"),
    [
        (("error_line = '^\\?(?P<code>\\d+) (?P<text>.*)$'", "error_line = '^\\?(\\d+) (.*)$'"), "link.error_line"),
        (("baud_rate = 9600", "baud_rate = -1"), "link.baud_rate"),
        (("parity = \"E\"", "parity = \"even\""), "link.parity"),
        (("prompt = \"S2> \"", "prompt = \"\""), "link.prompt"),
        (("echo = true", "echo = true\nbell = true"), "link.bell"),
        (('columns = ["frequency", "re", "im"]', 'columns = ["frequency", "re"]'), "operations.read_raw.columns"),
        (('columns = ["frequency", "re", "im"]', 'columns = ["f", "re", "im"]'), "operations.read_raw.columns"),
        (('reply = "rows", columns', 'reply = "block", columns'), "operations.read_raw.columns"),
        (('timeout_s = 30', 'timeout_s = 0'), "operations.trigger.timeout_s"),
        (('parameter_names = { S11 = "s11" }', 'parameter_names = { S22 = "s22" }'),
         "capabilities.parameter_names.S22"),
    ],
)
def test_bad_line_profiles_name_the_key(change: tuple[str, str], key: str) -> None:
    text = LINE.replace(*change)
    assert text != LINE
    with pytest.raises(InputError) as caught:
        parse_analyzer_profile(text, "line.toml")
    assert "line.toml" in str(caught.value) and f"[{key}]" in str(caught.value)


def test_a_block_reply_cannot_come_over_a_prompted_line() -> None:
    text = LINE.replace('reply = "rows", columns = ["frequency", "re", "im"]', 'reply = "block"').replace(
        'data_format = "ASCII"', 'data_format = "REAL,64"')
    with pytest.raises(InputError, match=r"\[operations.read_raw.reply\].*message framing"):
        parse_analyzer_profile(text, "line.toml")


def _guide_examples() -> list[str]:
    """The TOML examples of DEVELOPERS.md's "Adding an instrument profile" section."""
    text = (Path(__file__).parents[2] / "DEVELOPERS.md").read_text(encoding="utf-8")
    section = text.split("## Adding an instrument profile", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```toml\n(.*?)```", section, re.DOTALL)


def test_the_contributor_guide_examples_load(tmp_path: Path) -> None:
    examples = _guide_examples()
    assert len(examples) == 3
    for index, text in enumerate(examples):
        path = tmp_path / f"example-{index}.toml"
        path.write_text(text, encoding="utf-8")
        if profile_kind(path) == "switch":
            assert load_switch_profile(path).capabilities.modules == 2
        else:
            profile = load_analyzer_profile(path)
            assert profile.operation("read_raw") is not None and profile.operation("identify") is not None
    line = load_analyzer_profile(tmp_path / "example-1.toml")
    assert line.link.needs_serial and line.operation("read_raw").render(parameter="refl") == "dump refl"
    misspelt = examples[0].replace('reply = "block"', 'reply = "blok"')
    with pytest.raises(InputError, match=re.escape("[operations.read_raw.reply]: unknown value 'blok'")):
        parse_analyzer_profile(misspelt, "my-analyzer.toml")


def test_every_problem_of_a_switch_profile_is_reported_at_once_each_with_its_line() -> None:
    text = SWITCH.replace("modules = 2", 'modules = "two"') + "foo = 1\n"
    with pytest.raises(ProfileProblems) as caught:
        parse_switch_profile(text, "matrix.toml")
    found = {(p.key, p.line) for p in caught.value.problems}
    lines = text.splitlines()
    assert found == {("capabilities.modules", lines.index('modules = "two"') + 1),
                     ("capabilities.foo", lines.index("foo = 1") + 1)}
    assert all(p.path == "matrix.toml" and p.fix for p in caught.value.problems)
    assert "2 problems found" in str(caught.value) and "matrix.toml:9 [capabilities.foo]: unknown key" in str(caught.value)


def test_every_problem_of_an_analyzer_profile_is_reported_across_its_tables() -> None:
    text = (MINIMAL.replace("ports = 1", "ports = 0").replace('trigger = "INIT"', "trigger = 7")
            .replace("[operations]", "[timing]\nretries = 11\n[link]\nparity = \"Q\"\n[operations]"))
    with pytest.raises(ProfileProblems) as caught:
        parse_analyzer_profile(text, "mine.toml")
    lines = text.splitlines()
    assert {(p.key, p.line) for p in caught.value.problems} == {
        ("capabilities.ports", lines.index("ports = 0") + 1),
        ("operations.trigger", lines.index("trigger = 7") + 1),
        ("timing.retries", lines.index("retries = 11") + 1),
        ("link.parity", lines.index('parity = "Q"') + 1),
    }
