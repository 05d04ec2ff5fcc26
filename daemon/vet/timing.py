"""Measurements on the device's clock: telemetry rate over t_us windows, and sample jitter.

Both work on one telemetry stream (from one accepted Configure) as ``(seq, t_us)`` pairs in
the order received, so they measure what the device did, not when the host read it.
"""

from __future__ import annotations

import itertools
import struct
from collections.abc import Sequence

RATE_WINDOW_US = 100_000  # PROTOCOL.md section 8.1: windows of about 0.1 s

_F32 = struct.Struct("<f")


def f32(value: float) -> float:
    """``value`` as the device sees it after the trip through an f32 field."""
    return _F32.unpack(_F32.pack(value))[0]


def window_rates(samples: Sequence[tuple[int, int]]) -> list[float]:
    """Rates (Hz) over consecutive windows of at least 0.1 s of t_us, as the host measures them
    (section 8.1): samples taken (received plus lost, from the seq) over the t_us difference."""
    rates = []
    start = 0
    for index in range(1, len(samples)):
        seq0, t0 = samples[start]
        seq, t_us = samples[index]
        if t_us - t0 >= RATE_WINDOW_US:
            rates.append(((seq - seq0) & 0xFFFF) * 1e6 / (t_us - t0))
            start = index
    return rates


def interval_deviations_us(samples: Sequence[tuple[int, int]], period_us: float) -> list[float]:
    """|t_us difference - period| of each pair of consecutive samples (same seq + 1)."""
    return [
        abs((t1 - t0) - period_us)
        for (s0, t0), (s1, t1) in itertools.pairwise(samples)
        if (s1 - s0) & 0xFFFF == 1
    ]


def largest_gap_us(samples: Sequence[tuple[int, int]]) -> int:
    """The longest t_us interval between consecutive received samples (0 if fewer than two)."""
    return max((t1 - t0 for (_s0, t0), (_s1, t1) in itertools.pairwise(samples)), default=0)
