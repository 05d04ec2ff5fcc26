"""Excitation signals for identification runs: a drive offset added to the cart hold loop.

``chirp``: a sine sweeping linearly from CHIRP_START_HZ to CHIRP_END_HZ over the
run, phase ``2 pi (f0 t + (f1 - f0) t^2 / (2 T))``. ``prbs``: a maximal-length
7-bit pseudo-random binary sequence (feedback polynomial x^7 + x^6 + 1, period
127 bits) of ``±amplitude``, one bit per PRBS_BIT_S. ``step``: ``+amplitude``
for the whole run. The hold loop under it keeps the cart near its set-point, so
the run stays on the track; the recorded drive is what identification uses.

:func:`unit_waveform` gives the same signals at unit amplitude for many times at
once (numpy arrays), for predicting a run before it starts
(:mod:`daemon.control.excitation_sizing`).
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import numpy as np

__all__ = ["EXCITE_KINDS", "PRBS_BITS", "Excitation", "chirp_phase_rad", "unit_waveform"]

EXCITE_KINDS = ("chirp", "prbs", "step")
CHIRP_START_HZ = 0.2
CHIRP_END_HZ = 5.0
PRBS_BIT_S = 0.02


def _prbs_period() -> tuple[float, ...]:
    """One period of the PRBS as ±1: the register's low bit after each shift, from all ones."""
    register, bits = 0x7F, []
    for _ in range(127):
        feedback = ((register >> 6) ^ (register >> 5)) & 1
        register = ((register << 1) | feedback) & 0x7F
        bits.append(1.0 if register & 1 else -1.0)
    return tuple(bits)


#: One period (127 bits) of the PRBS at unit amplitude; bit ``k`` is held from ``k PRBS_BIT_S``.
PRBS_BITS = _prbs_period()


def chirp_phase_rad(t_s, duration_s: float):
    """The chirp's phase at ``t_s`` (a float or an array) for a run of ``duration_s``."""
    sweep = (CHIRP_END_HZ - CHIRP_START_HZ) / (2.0 * duration_s)
    return 2.0 * math.pi * (CHIRP_START_HZ * t_s + sweep * t_s * t_s)


def _check_kind(kind: str) -> None:
    if kind not in EXCITE_KINDS:
        raise ValueError(f"excite: unknown kind {kind!r} (chirp, prbs or step)")


class Excitation:
    """``value(t_s)`` is the drive offset ``t_s`` after the start; ``done(t_s)`` once the run is over."""

    __slots__ = ("amplitude", "duration_s", "kind")

    def __init__(self, kind: str, amplitude: float, duration_s: float):
        _check_kind(kind)
        self.kind = kind
        self.amplitude = amplitude
        self.duration_s = duration_s

    def done(self, t_s: float) -> bool:
        return t_s >= self.duration_s

    def value(self, t_s: float) -> float:
        if self.kind == "step":
            return self.amplitude
        if self.kind == "chirp":
            return self.amplitude * math.sin(chirp_phase_rad(t_s, self.duration_s))
        return self.amplitude * PRBS_BITS[int(t_s / PRBS_BIT_S) % 127]


def unit_waveform(kind: str, duration_s: float, times_s: np.ndarray) -> np.ndarray:
    """The signal of ``kind`` at unit amplitude at each of ``times_s`` (all within the run)."""
    import numpy as np  # only for predictions; the control cycle uses Excitation

    _check_kind(kind)
    if kind == "step":
        return np.ones_like(times_s)
    if kind == "chirp":
        return np.sin(chirp_phase_rad(times_s, duration_s))
    return np.asarray(PRBS_BITS)[(times_s / PRBS_BIT_S).astype(int) % 127]
