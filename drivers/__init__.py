"""Instrument drivers: transports (VISA, serial), IEEE 488.2 / SCPI codecs, a message
session, declarative instrument profiles and the profiled analyzer.

Layering, bottom up -- each module imports only those below it:

1. :mod:`.transports`  bytes in, bytes out, deadlines; pyvisa / pyserial errors end here
2. :mod:`.ieee488`     pure codecs on bytes and text (blocks, number lists, *IDN?, errors)
3. :mod:`.session`     terminations, timeouts, error-queue checks, I/O tracing
4. :mod:`.profiles`    TOML profiles: command templates, reply formats, capabilities
5. :mod:`.analyzer`    the analyzer primitives built from a profile over a session

Drivers know no RF math.  They may import :mod:`lineproof.values` and
:mod:`lineproof.errors`, which import nothing of ours.
"""

from lineproof.drivers.connect import open_analyzer

__all__ = ["open_analyzer"]
