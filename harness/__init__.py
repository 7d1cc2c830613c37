"""lineproof: measurement automation for inline coaxial devices.

The harness (this package) runs sequences: calibrate, qualify the termination, verify,
measure and re-verify batches of devices, judge them against limits with the measurement
uncertainty in view, and record everything.  ``lineproof.drivers`` talks to instruments;
``lineproof.simulators`` provides a simulated bench.
"""

__version__ = "0.1.0"
