"""Instrument drivers: transports (VISA, serial), IEEE 488.2 / SCPI and line-protocol codecs,
a message session, declarative instrument profiles, the profiled analyzer and switch.

Layering, bottom up -- each module imports only those below it:

1. :mod:`.transports`     bytes in, bytes out, deadlines; pyvisa / pyserial errors end here
   (:mod:`.visa_backend` holds the guarded pyvisa-py workarounds it uses)
2. :mod:`.ieee488`,       pure codecs on bytes and text (blocks, number lists, *IDN?, error
   :mod:`.line_protocol`  entries, channel lists; echo, prompt, error lines, number rows)
3. :mod:`.session`        terminations, timeouts, retries, error-queue checks, I/O tracing
4. :mod:`.profiles`       TOML profiles: command templates, reply formats, capabilities
   (:mod:`.profile_files` reads the files, merges ``based_on``)
5. :mod:`.analyzer`,      the analyzer and switch primitives built from a profile over a
   :mod:`.switch`         session; :mod:`.connect` opens them; :mod:`.discovery` finds them

Drivers know no RF math.  They may import :mod:`lineproof.values` and
:mod:`lineproof.errors`, which import nothing of ours.
"""

from lineproof.drivers.connect import open_analyzer, open_switch

__all__ = ["open_analyzer", "open_switch"]
