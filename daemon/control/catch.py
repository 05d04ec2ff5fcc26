"""Catch and fall: when to hand the pendulum to balance, and when balance has lost it.

Both tests work on theta wrapped to (-pi, pi] (0 upright). The catch window
(``catch.angle_deg`` and ``catch.rate_dps``) must lie inside the region the
saturated LQR can recover from; ``poise design`` reports that region's edge
(largest recoverable angle from rest). The fall window (``fall_angle_deg``)
is larger, so a caught pendulum is not declared fallen by the same wobble.
What follows a fall (stop, retry, idle) is the supervisor's decision.
"""

from __future__ import annotations

import enum
import math

from daemon.config.control import CatchSettings

__all__ = ["CatchWindow", "WindowEvent"]


class WindowEvent(enum.Enum):
    CATCH = "catch"
    FALL = "fall"


class CatchWindow:
    __slots__ = ("angle_rad", "fall_angle_rad", "rate_radps")

    def __init__(self, settings: CatchSettings):
        self.angle_rad = math.radians(settings.angle_deg)
        self.rate_radps = math.radians(settings.rate_dps)
        self.fall_angle_rad = math.radians(settings.fall_angle_deg)

    def can_catch(self, theta_rad: float, omega_radps: float) -> bool:
        return -self.angle_rad < theta_rad < self.angle_rad and -self.rate_radps < omega_radps < self.rate_radps

    def has_fallen(self, theta_rad: float) -> bool:
        return not -self.fall_angle_rad <= theta_rad <= self.fall_angle_rad

    def update(self, theta_rad: float, omega_radps: float, balancing: bool) -> WindowEvent | None:
        """``CATCH`` when not balancing and inside the catch window; ``FALL`` when balancing and outside the fall window."""
        if balancing:
            return WindowEvent.FALL if self.has_fallen(theta_rad) else None
        return WindowEvent.CATCH if self.can_catch(theta_rad, omega_radps) else None
