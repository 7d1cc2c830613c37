"""Open instruments: an explicit transport choice, a profile, and the session between them."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Literal

from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.drivers.profiles import (
    AnalyzerProfile,
    Profile,
    SwitchProfile,
    load_analyzer_profile,
    load_switch_profile,
)
from lineproof.drivers.session import Framing, MessageSession
from lineproof.drivers.switch import ProfiledSwitch
from lineproof.drivers.transports import SerialOptions, SerialTransport, Transport, VisaOptions, VisaTransport
from lineproof.errors import InputError

TransportName = Literal["visa", "serial"]


def framing_of(profile: Profile) -> Framing:
    """The session framing a profile's [link] table describes."""
    link = profile.link
    return Framing(
        write_termination=link.write_termination.encode("ascii"),
        read_termination=link.read_termination.encode("ascii"),
        echo=link.echo,
        prompt=link.prompt.encode("ascii") if link.prompt else None,
        error_line=re.compile(link.error_line) if link.error_line else None,
        rows_end=link.rows_end,
    )


def serial_options_of(profile: Profile) -> SerialOptions:
    """The line settings a profile states for its instrument (baud rate, framing, flow control)."""
    link = profile.link
    return SerialOptions(link.baud_rate, link.byte_size, link.parity, link.stop_bits, link.flow_control)


def open_session(resource: str, profile: Profile, transport: TransportName = "visa",
                 visa: VisaOptions | None = None, serial: SerialOptions | None = None) -> MessageSession:
    """Open ``resource`` over the chosen transport with the framing and timing of ``profile``."""
    if transport not in ("visa", "serial"):
        raise InputError(f"unknown transport {transport!r}", key="transport", fix="use visa or serial")
    if transport == "visa" and profile.link.needs_serial:
        raise InputError(
            "this profile's replies end with a prompt, which only the serial transport reads",
            path=profile.source, key="link.prompt",
            fix="open it with transport = \"serial\" (pyserial: a port, a pseudo-terminal or a socket:// URL)",
        )
    link: Transport
    if transport == "visa":
        link = VisaTransport(resource, visa)
    else:
        link = SerialTransport(resource, serial or serial_options_of(profile))
    next_error = profile.operation("next_error")
    return MessageSession(
        link, framing_of(profile), default_timeout_s=profile.timing.command_timeout_s,
        retries=profile.timing.retries, error_query=next_error.send if next_error else None,
    )


def open_analyzer(resource: str, profile: AnalyzerProfile | str | Path, transport: TransportName = "visa",
                  visa: VisaOptions | None = None, serial: SerialOptions | None = None) -> ProfiledAnalyzer:
    """Connect to ``resource`` over the chosen transport and wrap it in ``profile`` (a loaded
    profile, a shipped profile's name or a path to a profile file)."""
    if not isinstance(profile, AnalyzerProfile):
        profile = load_analyzer_profile(profile)
    return ProfiledAnalyzer(open_session(resource, profile, transport, visa, serial), profile)


def open_switch(resource: str, profile: SwitchProfile | str | Path, transport: TransportName = "visa",
                visa: VisaOptions | None = None, serial: SerialOptions | None = None) -> ProfiledSwitch:
    """Connect to a switch matrix at ``resource`` and wrap it in a switch ``profile``."""
    if not isinstance(profile, SwitchProfile):
        profile = load_switch_profile(profile)
    return ProfiledSwitch(open_session(resource, profile, transport, visa, serial), profile)
