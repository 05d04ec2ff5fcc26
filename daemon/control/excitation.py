"""Excitation signals for identification runs: a drive offset added to the cart hold loop.

``chirp``: a sine sweeping linearly from CHIRP_START_HZ to CHIRP_END_HZ over the
run, phase ``2 pi (f0 t + (f1 - f0) t^2 / (2 T))``. ``prbs``: a maximal-length
7-bit pseudo-random binary sequence (feedback polynomial x^7 + x^6 + 1, period
127 bits) of ``±amplitude``, one bit per PRBS_BIT_S. ``step``: ``+amplitude``
for the whole run. The hold loop under it keeps the cart near its set-point, so
the run stays on the track; the recorded drive is what identification uses.
"""

from __future__ import annotations

import math

__all__ = ["Excitation"]

CHIRP_START_HZ = 0.2
CHIRP_END_HZ = 5.0
PRBS_BIT_S = 0.02


class Excitation:
    """``value(t_s)`` is the drive offset ``t_s`` after the start; ``done(t_s)`` once the run is over."""

    __slots__ = ("_bit", "_bit_index", "_register", "amplitude", "duration_s", "kind")

    def __init__(self, kind: str, amplitude: float, duration_s: float):
        if kind not in ("chirp", "prbs", "step"):
            raise ValueError(f"excite: unknown kind {kind!r} (chirp, prbs or step)")
        self.kind = kind
        self.amplitude = amplitude
        self.duration_s = duration_s
        self._register = 0x7F
        self._bit_index = -1
        self._bit = 1.0

    def done(self, t_s: float) -> bool:
        return t_s >= self.duration_s

    def value(self, t_s: float) -> float:
        if self.kind == "step":
            return self.amplitude
        if self.kind == "chirp":
            sweep = (CHIRP_END_HZ - CHIRP_START_HZ) / (2.0 * self.duration_s)
            return self.amplitude * math.sin(2.0 * math.pi * (CHIRP_START_HZ * t_s + sweep * t_s * t_s))
        index = int(t_s / PRBS_BIT_S)
        while self._bit_index < index:
            feedback = ((self._register >> 6) ^ (self._register >> 5)) & 1
            self._register = ((self._register << 1) | feedback) & 0x7F
            self._bit = 1.0 if self._register & 1 else -1.0
            self._bit_index += 1
        return self.amplitude * self._bit
