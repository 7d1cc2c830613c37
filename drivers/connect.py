"""Open an analyzer from an explicit transport choice and a profile."""

from __future__ import annotations

from typing import Literal

from lineproof.drivers.analyzer import ProfiledAnalyzer
from lineproof.drivers.profiles import AnalyzerProfile, load_analyzer_profile
from lineproof.drivers.session import Framing, MessageSession
from lineproof.drivers.transports import SerialOptions, SerialTransport, VisaOptions, VisaTransport
from lineproof.errors import InputError


def _termination(profile: AnalyzerProfile, key: str) -> bytes:
    value = profile.link.get(key, "\n")
    if not isinstance(value, str) or not value:
        raise InputError("must be a non-empty string such as \"\\n\"", path=profile.source, key=f"link.{key}")
    return value.encode("ascii")


def open_analyzer(
    resource: str,
    profile: AnalyzerProfile | str,
    transport: Literal["visa", "serial"] = "visa",
    visa: VisaOptions | None = None,
    serial: SerialOptions | None = None,
) -> ProfiledAnalyzer:
    """Connect to ``resource`` over the chosen transport and wrap it in ``profile``."""
    if isinstance(profile, str):
        profile = load_analyzer_profile(profile)
    if transport == "visa":
        link = VisaTransport(resource, visa)
    elif transport == "serial":
        link = SerialTransport(resource, serial)
    else:
        raise InputError(f"unknown transport {transport!r}", key="transport", fix="use visa or serial")
    framing = Framing(_termination(profile, "write_termination"), _termination(profile, "read_termination"))
    session = MessageSession(link, framing, default_timeout_s=profile.timing.command_timeout_s)
    return ProfiledAnalyzer(session, profile)
