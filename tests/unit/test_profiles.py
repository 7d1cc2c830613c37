"""Instrument profiles: the shipped ones load; bad ones name file, key and fix."""

from __future__ import annotations

import pytest

from lineproof.drivers.profiles import load_analyzer_profile, parse_analyzer_profile, shipped_profile_names
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
read_raw = { send = "TRAC? RAW", reply = "block" }
"""


@pytest.mark.parametrize("name", shipped_profile_names())
def test_shipped_profiles_load(name: str) -> None:
    profile = load_analyzer_profile(name)
    assert profile.capabilities.max_points >= 2


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


def test_unknown_shipped_profile_lists_the_known_ones() -> None:
    with pytest.raises(InputError, match="generic-scpi-analyzer"):
        load_analyzer_profile("no-such-profile")
