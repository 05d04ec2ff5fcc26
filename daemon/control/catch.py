"""Catch and fall: when to hand the pendulum to balance, and when balance has lost it.

Both tests work on theta wrapped to (-pi, pi] (0 upright). A pendulum swung
up to exactly the upright energy approaches upright along the homoclinic
orbit, ``w = -2 w0 sin(th / 2) ~ -w0 th`` (``w0 = sqrt(m g l / J)``), never
slowly far from upright. So the catch window is centred on that approach::

    |th| < angle   and   |w + w0 th| < rate

(``catch.angle_deg``, ``catch.rate_dps``; with ``w0 = 0`` it is the plain box
``|w| < rate``). A swing-up that lands within a few per cent of the upright
energy passes through it, and the LQR's recoverable region is a band along
the same direction, so every corner of the window must be (and, for the
example rigs, is: tests/test_control_closed_loop.py) a state the saturated
LQR recovers from; ``poise design`` reports that region's edge from rest.
The fall window (``fall_angle_deg``) is larger, so a caught pendulum is not
declared fallen by the same wobble. What follows a fall (stop, retry, idle)
is the supervisor's decision.
"""

from __future__ import annotations

import enum
import math

from daemon.config.control import CatchSettings
from sim_device.plant import PlantParams

__all__ = ["CatchWindow", "WindowEvent", "natural_frequency_radps"]


def natural_frequency_radps(params: PlantParams) -> float:
    """``w0 = sqrt(m g l / J)``: the pendulum's small-swing frequency about its pivot."""
    return math.sqrt(params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
                     / params.pivot_inertia_kgm2)


class WindowEvent(enum.Enum):
    CATCH = "catch"
    FALL = "fall"


class CatchWindow:
    __slots__ = ("angle_rad", "approach_per_s", "fall_angle_rad", "rate_radps")

    def __init__(self, settings: CatchSettings, natural_frequency_radps: float = 0.0):
        self.angle_rad = math.radians(settings.angle_deg)
        self.rate_radps = math.radians(settings.rate_dps)
        self.fall_angle_rad = math.radians(settings.fall_angle_deg)
        self.approach_per_s = natural_frequency_radps if settings.follow_approach else 0.0

    def can_catch(self, theta_rad: float, omega_radps: float) -> bool:
        if not -self.angle_rad < theta_rad < self.angle_rad:
            return False
        relative = omega_radps + self.approach_per_s * theta_rad
        return -self.rate_radps < relative < self.rate_radps

    def has_fallen(self, theta_rad: float) -> bool:
        return not -self.fall_angle_rad <= theta_rad <= self.fall_angle_rad

    def update(self, theta_rad: float, omega_radps: float, balancing: bool) -> WindowEvent | None:
        """``CATCH`` when not balancing and inside the catch window; ``FALL`` when balancing and outside the fall window."""
        if balancing:
            return WindowEvent.FALL if self.has_fallen(theta_rad) else None
        return WindowEvent.CATCH if self.can_catch(theta_rad, omega_radps) else None
