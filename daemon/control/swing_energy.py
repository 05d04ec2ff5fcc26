"""Swing-up A: energy control with cart position and velocity feedback, for a limited track.

Energy of the pendulum relative to upright at rest (K. J. Åström and K.
Furuta, "Swinging up a pendulum by energy control", Automatica 36(2), 2000)::

    E = 1/2 J w^2 + m g l (cos th - 1)          (0 upright at rest, -2 m g l hanging)
    dE/dt = m l a cos(th) w - b_p w^2           (a: cart acceleration)

so a cart acceleration with the sign of ``w cos th`` pumps energy in. The
commanded acceleration here is::

    a = sat_amax( k g (E0 - E)/(2 m g l) sign(w cos th)  -  k_x x  -  k_v v )

The first term is Åström-Furuta's law (``sign(0)`` taken as +1 so a pendulum
at rest gets a first push); the pure law needs several equivalent pendulum
lengths of cart travel, so the cart position and velocity feedback (M. W.
Spong, "Energy based control of a class of underactuated mechanical systems",
IFAC World Congress 1996; R. Lozano, I. Fantoni, D. J. Block, "Stabilization
of the inverted pendulum around its homoclinic orbit", Systems & Control
Letters 40(3), 2000) pulls the cart back toward the centre, and
:class:`TrackGuard` makes sure the cart can always stop inside
``track_use_fraction`` of the soft limits. The acceleration becomes a drive
command through :class:`AccelerationDrive` (inverse plant model).
"""

from __future__ import annotations

import math

from daemon.config.control import SwingUpSettings
from daemon.control.drive_model import AccelerationDrive, clamp
from daemon.control.track_guard import TrackGuard
from sim_device.plant import PlantParams

__all__ = ["EnergySwingUp", "energy_pumping_accel"]


def energy_pumping_accel(energy_error: float, omega: float, cos_th: float, gain: float) -> float:
    """Åström-Furuta pumping term ``gain * (E0 - E) * sign(w cos th)``, with sign(0) = +1."""
    return gain * energy_error if omega * cos_th >= 0.0 else -gain * energy_error


class EnergySwingUp:
    """Per-sample energy swing-up: ``update(x, v, theta, omega) -> drive`` (volts or newtons)."""

    __slots__ = (
        "_a_max",
        "_drive",
        "_gain",
        "_guard",
        "_half_jp",
        "_inv_2mgl",
        "_kv",
        "_kx",
        "_mgl",
        "last_accel",
        "last_drive",
    )

    def __init__(self, params: PlantParams, settings: SwingUpSettings, travel_limit_m: float):
        self._drive = AccelerationDrive(params)
        self._a_max = settings.max_accel_mps2
        self._guard = TrackGuard(travel_limit_m, 0.8 * settings.max_accel_mps2)
        self._gain = settings.energy_gain * params.gravity_mps2
        self._kx = settings.position_gain_per_s2
        self._kv = settings.velocity_gain_per_s
        self._half_jp = 0.5 * params.pivot_inertia_kgm2
        self._mgl = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
        self._inv_2mgl = 1.0 / (2.0 * self._mgl)
        self.last_drive = 0.0
        self.last_accel = 0.0

    def energy(self, theta: float, omega: float) -> float:
        """``E`` of the module docstring, joules (0 upright at rest)."""
        return self._half_jp * omega * omega + self._mgl * (math.cos(theta) - 1.0)

    def reset(self, state: tuple[float, float, float, float], last_drive: float) -> None:
        """Nothing to initialise: the law is static; kept for the common controller shape."""
        self.last_drive = last_drive

    def accel_command(self, x: float, v: float, theta: float, omega: float) -> float:
        cos_th = math.cos(theta)
        error = -self.energy(theta, omega) * self._inv_2mgl
        a = energy_pumping_accel(error, omega, cos_th, self._gain) - self._kx * x - self._kv * v
        return self._guard.limit(clamp(a, self._a_max), x, v)

    def update(self, x: float, v: float, theta: float, omega: float) -> float:
        a = self.accel_command(x, v, theta, omega)
        self.last_accel = a
        drive = self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)
        self.last_drive = drive
        return drive
