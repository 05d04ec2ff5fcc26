"""Encoder counts to cart position and pendulum angle.

Hardware counters are signed 32-bit and wrap; :class:`EncoderScaling` turns
successive readings of each into one unbounded count by taking each step as the
shortest signed 32-bit difference (valid while the true change between two
samples is below 2**31 counts, true of any real encoder at these sample rates).

Angle convention (DEVELOPERS.md): the pendulum encoder reads 0 with the
pendulum hanging, so ``theta = pi + counts * 2 pi / counts_per_rev``; whole
turns accumulate (theta is not wrapped here). Balance control uses
:func:`wrap_angle` to bring theta into (-pi, pi], the deviation from upright.
"""

from __future__ import annotations

import math

__all__ = ["EncoderScaling", "wrap_angle"]

TWO_PI = 2.0 * math.pi
_PI = math.pi
_SPAN = 1 << 32
_HALF_SPAN = 1 << 31
# Steps within +-(2**30 - 1) are already the shortest difference; only a step beyond them can be a
# wrap. (The bounds are one-digit Python ints, so the comparison takes CPython's fast int path.)
_PLAIN_STEP_MAX = (1 << 30) - 1
_PLAIN_STEP_MIN = -_PLAIN_STEP_MAX


def wrap_angle(theta_rad: float) -> float:
    """``theta_rad`` wrapped to (-pi, pi]."""
    wrapped = math.fmod(theta_rad + math.pi, TWO_PI)
    if wrapped <= 0.0:
        wrapped += TWO_PI
    return wrapped - math.pi


def _shortest_step(step: int) -> int:
    """A step of a wrapping signed 32-bit counter as the shortest signed difference.

    Called only for large steps (a wrap, or a huge move): the modulo works on two-digit
    Python ints, slower than the range test that precedes it.
    """
    return (step + _HALF_SPAN) % _SPAN - _HALF_SPAN


class EncoderScaling:
    """Counts to ``x_m`` (from the track centre) and ``theta_rad`` for one rig.

    ``cart_offset_counts`` is the unwrapped cart count at the track centre,
    found by homing (:mod:`daemon.control.homing`); it is 0 until then.
    """

    __slots__ = (
        "_cart_last",
        "_cart_total",
        "_m_per_count",
        "_pendulum_last",
        "_pendulum_total",
        "_rad_per_count",
        "cart_counts_per_m",
        "cart_offset_counts",
        "pendulum_counts_per_rev",
    )

    def __init__(self, cart_counts_per_m: float, pendulum_counts_per_rev: int,
                 first_cart_reading: int = 0, first_pendulum_reading: int = 0):
        self.cart_counts_per_m = cart_counts_per_m
        self.pendulum_counts_per_rev = pendulum_counts_per_rev
        self.cart_offset_counts = 0
        self._m_per_count = 1.0 / cart_counts_per_m
        self._rad_per_count = TWO_PI / pendulum_counts_per_rev
        self._cart_last = self._cart_total = first_cart_reading
        self._pendulum_last = self._pendulum_total = first_pendulum_reading

    def update(self, cart_reading: int, pendulum_reading: int) -> tuple[float, float]:
        """``(x_m, theta_rad)`` from this sample's raw counter readings (theta not wrapped).

        Both counters are unwrapped here, inline: this runs every sample.
        """
        step = cart_reading - self._cart_last
        if not _PLAIN_STEP_MIN <= step <= _PLAIN_STEP_MAX:
            step = _shortest_step(step)
        self._cart_last = cart_reading
        self._cart_total = cart = self._cart_total + step
        step = pendulum_reading - self._pendulum_last
        if not _PLAIN_STEP_MIN <= step <= _PLAIN_STEP_MAX:
            step = _shortest_step(step)
        self._pendulum_last = pendulum_reading
        self._pendulum_total = pendulum = self._pendulum_total + step
        return (cart - self.cart_offset_counts) * self._m_per_count, _PI + pendulum * self._rad_per_count

    def raw_x_m(self) -> float:
        """Cart position of the last sample without the homing offset (for homing itself)."""
        return self._cart_total * self._m_per_count

    def set_centre_at(self, raw_x_m: float) -> None:
        """Declare the raw cart position ``raw_x_m`` (see :meth:`raw_x_m`) the track centre."""
        self.cart_offset_counts = round(raw_x_m * self.cart_counts_per_m)

    @property
    def cart_quantum_m(self) -> float:
        return self._m_per_count

    @property
    def pendulum_quantum_rad(self) -> float:
        return self._rad_per_count
