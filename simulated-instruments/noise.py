"""Receiver noise of a simulated analyzer, cheap enough to draw for every 10,001-point trace.

Drawing 20,000 fresh Gaussian numbers costs more than sending the trace over a local socket,
which would make the simulator the bottleneck of a driver benchmark.  So each analyzer draws
once a table of independent complex Gaussian samples (unit variance in each part, seeded)
and takes every trace's noise as a window of the table at a fresh random offset.  Within a
trace the samples are independent; at the same frequency point two traces use the same
sample only if their offsets coincide (one chance in the table's length, 2^18), so averaging
sweeps lowers the noise as it should.  A trace longer than the table gets fresh samples.
"""

from __future__ import annotations

import numpy as np

TABLE_LENGTH = 1 << 18


class NoiseTable:
    """Complex Gaussian noise windows; each part of each sample has standard deviation 1."""

    def __init__(self, seed: int) -> None:
        self._rng = np.random.Generator(np.random.SFC64(seed))
        self._table: np.ndarray | None = None

    def draw(self, count: int) -> np.ndarray:
        """``count`` complex samples (a read-only view; do not keep it)."""
        if count > TABLE_LENGTH // 2:
            return self._rng.standard_normal(2 * count).view(np.complex128)
        if self._table is None:
            self._table = self._rng.standard_normal(2 * TABLE_LENGTH).view(np.complex128)
            self._table.setflags(write=False)
        offset = int(self._rng.integers(0, TABLE_LENGTH - count + 1))
        return self._table[offset:offset + count]
