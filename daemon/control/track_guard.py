"""Keep a commanded cart acceleration from carrying the cart past a travel limit.

From position ``x`` the cart can still stop within ``limit`` if its speed
toward that end is below ``sqrt(2 a_brake d)``, ``d`` the distance left. The
allowed acceleration steers the speed onto that envelope within ``tau``::

    a_hi = ( sqrt(2 a_brake max(limit - x, 0)) - v) / tau
    a_lo = (-sqrt(2 a_brake max(limit + x, 0)) - v) / tau

``a_brake`` must stay below what the drive can deliver so the envelope is
followable; swing-up uses a fraction of its acceleration limit.
"""

from __future__ import annotations

import math

__all__ = ["TrackGuard"]


class TrackGuard:
    __slots__ = ("_inv_tau", "_two_a", "limit_m")

    def __init__(self, limit_m: float, brake_accel_mps2: float, tau_s: float = 0.02):
        if not limit_m > 0.0:
            raise ValueError(f"TrackGuard: limit_m must be > 0 (got {limit_m})")
        self.limit_m = limit_m
        self._two_a = 2.0 * brake_accel_mps2
        self._inv_tau = 1.0 / tau_s

    def limit(self, accel: float, x: float, v: float) -> float:
        room_pos = self.limit_m - x
        room_neg = self.limit_m + x
        a_hi = (math.sqrt(self._two_a * room_pos) if room_pos > 0.0 else 0.0) - v
        a_lo = -(math.sqrt(self._two_a * room_neg) if room_neg > 0.0 else 0.0) - v
        a_hi *= self._inv_tau
        a_lo *= self._inv_tau
        if accel > a_hi:
            return a_hi
        if accel < a_lo:
            return a_lo
        return accel
