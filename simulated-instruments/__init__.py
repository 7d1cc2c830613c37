"""Simulated instruments: analyzers with a hidden truth, served over the same transports as
real hardware (SCPI over TCP on 127.0.0.1), plus a local bench control channel.

Imported as ``lineproof.simulators`` (the folder on disk is ``simulated-instruments/``; see
DEVELOPERS.md).  Shares no code with ``lineproof.drivers``: only the open standards both
speak.  It may import :mod:`lineproof.errors` and :mod:`lineproof.values`.
"""
