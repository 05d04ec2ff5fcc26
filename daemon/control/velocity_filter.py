"""Velocity by filtered finite difference: first-order low-pass on ``(p[k] - p[k-1]) / dt``.

The smoothing factor is the exact discretisation of a first-order lag with
corner ``fc``: ``alpha = 1 - exp(-2 pi fc dt)``. Its group delay at low
frequency is about ``1/(2 pi fc) + dt/2`` (the difference itself lags half a
sample), which is the price of the noise reduction: the raw difference of a
quantised position has noise of about ``q / dt`` rms.
"""

from __future__ import annotations

import math

__all__ = ["FilteredDifference"]


class FilteredDifference:
    """Rate of one measured coordinate (metres or radians) from its samples."""

    __slots__ = ("_alpha", "_inv_dt", "_last", "_rate")

    def __init__(self, cutoff_hz: float, dt_s: float):
        if not cutoff_hz > 0.0 or not dt_s > 0.0:
            raise ValueError(f"FilteredDifference: cutoff_hz and dt_s must be > 0 (got {cutoff_hz}, {dt_s})")
        self._alpha = 1.0 - math.exp(-2.0 * math.pi * cutoff_hz * dt_s)
        self._inv_dt = 1.0 / dt_s
        self._last = 0.0
        self._rate = 0.0

    def reset(self, position: float, rate: float = 0.0) -> None:
        self._last = position
        self._rate = rate

    def shift(self, offset: float) -> None:
        """Move the origin of the measured coordinate by ``offset`` without disturbing the rate."""
        self._last += offset

    def update(self, position: float) -> float:
        raw = (position - self._last) * self._inv_dt
        self._last = position
        rate = self._rate
        rate += self._alpha * (raw - rate)
        self._rate = rate
        return rate

    @property
    def rate(self) -> float:
        return self._rate
