"""Finding instruments: the VISA resources a VISA library can list, the serial ports of the
machine, and -- when asked -- who answers on each, within a bounded time per resource.

VISA resources are asked ``*IDN?`` (IEEE 488.2 §10.14); serial ports are asked with the
identify operation of each serial profile given (shipped ones by default), at that profile's
line settings.  Serial (ASRL) VISA resources are listed but asked as serial ports, not twice.
A TCP socket instrument cannot be listed by anyone: name it with ``extra``.
"""

from __future__ import annotations

import gc
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field

from lineproof.drivers.connect import open_session
from lineproof.drivers.ieee488 import CodecError, parse_identity
from lineproof.drivers.profile_files import shipped_profile_names
from lineproof.drivers.profiles import AnalyzerProfile, Profile, load_analyzer_profile, profile_kind
from lineproof.drivers.transports import VisaOptions
from lineproof.drivers.visa_backend import install_advice
from lineproof.errors import InstrumentError, LineproofError
from lineproof.values import InstrumentIdentity


@dataclass(frozen=True)
class FoundInstrument:
    """One resource or port, and what answered there (if it was asked)."""

    transport: str  # "visa" | "serial"
    resource: str
    description: str = ""
    identity: InstrumentIdentity | None = None
    profile: str = ""
    problem: str = ""


@dataclass(frozen=True)
class Discovery:
    found: list[FoundInstrument]
    #: What was not searched and why (a VISA interface whose package is missing, ...).
    notes: list[str] = field(default_factory=list)


def list_visa_resources(library: str = "@py") -> tuple[list[str], list[str]]:
    """Resource strings the VISA library lists, and notes on what it could not search."""
    notes: list[str] = []
    try:
        import pyvisa

        manager = pyvisa.ResourceManager(library)
    except (ImportError, OSError, ValueError) as exc:
        return [], [f"VISA library {library!r} not available ({exc}); install pyvisa-py for '@py'"]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            resources = list(manager.list_resources("?*::INSTR"))
        except Exception as exc:  # noqa: BLE001 - a backend's listing fails in its own ways
            resources = []
            notes.append(f"listing VISA resources failed: {exc}")
        # pyvisa-py 0.8's VXI-11 broadcast leaves a socket to the garbage collector; let its
        # ResourceWarning fire here, where it is caught, rather than somewhere later.
        gc.collect()
    # pyvisa-py says with a UserWarning which optional package would widen the search.
    notes += [str(w.message).splitlines()[0] for w in caught if issubclass(w.category, UserWarning)]
    if library == "@py":
        notes += _pyvisa_py_gaps()
    return resources, notes


def _pyvisa_py_gaps() -> list[str]:
    """pyvisa-py's own sentences on interfaces it cannot use (a package is missing)."""
    try:
        from pyvisa_py.highlevel import PyVisaLibrary
    except ImportError:
        return []
    gaps = []
    for interface, state in PyVisaLibrary.get_debug_info().items():
        if isinstance(state, list) and state:
            gaps.append(f"{interface}: {install_advice(state[0])}")
    return gaps


def list_serial_ports() -> list[tuple[str, str]]:
    """(device, description) of every serial port pyserial finds."""
    from serial.tools import list_ports

    return [(port.device, port.description if port.description != "n/a" else "") for port in list_ports.comports()]


def _identify(resource: str, profile: Profile, transport: str, timeout_s: float,
              library: str = "@py") -> InstrumentIdentity:
    """Ask once (no retries) with the profile's identify operation, every exchange within
    ``timeout_s``: an unanswered query is not followed by a question to the error queue
    (which would take the profile's command timeout, and whatever is there may not speak
    SCPI at all)."""
    session = open_session(resource, profile, transport,  # type: ignore[arg-type]
                           visa=VisaOptions(library, open_timeout_s=timeout_s))
    try:
        session.retries = 0
        session.error_query = None
        session.default_timeout_s = timeout_s
        return parse_identity(session.query(profile.operations["identify"].send, timeout_s), resource)
    finally:
        session.close()


def identify_visa(resource: str, timeout_s: float = 2.0, library: str = "@py") -> InstrumentIdentity:
    """``*IDN?`` of a VISA resource; LinkError / ReplyError when nothing sensible answers."""
    return _identify(resource, load_analyzer_profile("generic-scpi-analyzer"), "visa", timeout_s, library)


def serial_profiles(names: Sequence[str] = ()) -> list[AnalyzerProfile]:
    """The profiles to ask serial ports with: those named, else every shipped analyzer profile
    whose framing needs a serial line."""
    if names:
        return [load_analyzer_profile(name) for name in names]
    shipped = [load_analyzer_profile(n) for n in shipped_profile_names() if profile_kind(n) == "analyzer"]
    return [p for p in shipped if p.link.needs_serial]


def identify_serial(port: str, profiles: Sequence[AnalyzerProfile], timeout_s: float = 2.0) -> tuple[
        InstrumentIdentity, str]:
    """The identity of whatever answers on ``port`` to one of ``profiles`` (tried in turn)."""
    problems = []
    for profile in profiles:
        try:
            return _identify(port, profile, "serial", timeout_s), profile.name
        except (InstrumentError, CodecError) as exc:
            problems.append(f"{profile.name}: {getattr(exc, 'problem', exc)}")
    raise LineproofError("; ".join(problems) or "no serial profile to ask with")


def _probe(item: FoundInstrument, profiles: Sequence[AnalyzerProfile], timeout_s: float,
           library: str) -> FoundInstrument:
    try:
        if item.transport == "visa":
            return FoundInstrument(item.transport, item.resource, item.description,
                                   identify_visa(item.resource, timeout_s, library), "*IDN?")
        identity, profile = identify_serial(item.resource, profiles, timeout_s)
        return FoundInstrument(item.transport, item.resource, item.description, identity, profile)
    except (LineproofError, CodecError) as exc:
        return FoundInstrument(item.transport, item.resource, item.description,
                               problem=getattr(exc, "problem", str(exc)))


def discover(identify: bool = False, extra: Sequence[str] = (), timeout_s: float = 2.0,
             library: str = "@py", profile_names: Sequence[str] = (), search: bool = True) -> Discovery:
    """List VISA resources and serial ports (``search``) plus ``extra`` ones (a VISA resource
    string has ``::``, anything else is a serial port or pyserial URL); with ``identify``,
    ask each who it is, each within about ``timeout_s``."""
    found: list[FoundInstrument] = []
    notes: list[str] = []
    if search:
        resources, notes = list_visa_resources(library)
        found += [FoundInstrument("visa", r, "serial port, asked as one" if r.upper().startswith("ASRL") else "")
                  for r in resources]
        found += [FoundInstrument("serial", device, description) for device, description in list_serial_ports()]
    found += [FoundInstrument("visa" if "::" in r else "serial", r, "given") for r in extra]
    if identify:
        profiles = serial_profiles(profile_names)
        found = [item if item.description == "serial port, asked as one" else
                 _probe(item, profiles, timeout_s, library) for item in found]
    return Discovery(found, notes)
