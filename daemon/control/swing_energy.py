"""Swing-up A: energy control with cart position and velocity feedback, for a limited track.

Energy of the pendulum relative to upright at rest (K. J. Åström and K.
Furuta, "Swinging up a pendulum by energy control", Automatica 36(2), 2000)::

    E = 1/2 J w^2 + m g l (cos th - 1)          (0 upright at rest, -2 m g l hanging)
    dE/dt = m l a cos(th) w - b_p w^2           (a: cart acceleration)

so a cart acceleration with the sign of ``c = w cos th`` pumps energy in. The
commanded acceleration here is::

    e = (E_ref - E) / (2 m g l)
    a = sat_amax( sat_ap( k (g / w0) e c )  -  k_x x  -  k_v v )      (w0 = sqrt(m g l / J))

The pumping term is Åström-Furuta's law ``k e c`` saturated at the pumping
acceleration ``a_p``: bang-bang while the error is large, proportional near
the target, where the energy settles instead of chattering around it. What
makes it work on a short track:

- ``a_p`` is sized by the travel. The pumping term is at most a square wave
  of ``±a_p`` at the swing frequency (``<= w0``), which moves the cart by
  ``(4 / pi) a_p / w^2``; ``a_p = (pi / 4) w0^2 d``, ``d`` half the travel
  limit, keeps that inside the track. The cart position and velocity feedback
  (M. W. Spong, "Energy based control of a class of underactuated mechanical
  systems", IFAC World Congress 1996; R. Lozano, I. Fantoni, D. J. Block,
  "Stabilization of the inverted pendulum around its homoclinic orbit",
  Systems & Control Letters 40(3), 2000) pulls the cart back toward the
  centre, and :class:`TrackGuard` makes sure the cart can always stop inside
  the travel limit. While the square wave is in phase with ``c`` the
  pendulum swings about the equilibrium tilted by ``atan(a_p / g)`` (gravity
  plus the cart's acceleration), so every half swing below horizontal grows
  the amplitude by ``2 atan(a_p / g)``, whatever the amplitude; the energy
  gained, ``m l a_p integral |w cos th| dt``, is ``m l a_p (sin A1 + sin A2)``
  between amplitudes ``A1`` and ``A2``. On Wren-2 (travel limit 0.085 m,
  ``w0 = 7.0 rad/s``) ``a_p = 1.64 m/s^2``: 19 degrees more every half swing,
  nine half swings from rest to the top.
- While the swing is small (``e > _SMALL_SWING_ERROR``) the pumping term is the
  pure bang-bang law with the sign of ``c`` switched with hysteresis: the
  velocity estimate of a pendulum near rest is mostly noise, and ``sign(0) =
  +1`` gives the first push from rest.
- The reference ``E_ref`` is the target ``E_t = 1/2 J w_t^2`` (``w_t``:
  ``swing_up.upright_rate_dps``), just above the homoclinic orbit ``E = 0``,
  plus what pivot friction will still take before the pendulum reaches
  upright. Along the homoclinic orbit ``w = 2 w0 sin(phi / 2)`` (``phi`` the
  angle from upright), so that loss, ``b_p integral w^2 dt = b_p integral w
  dphi``, is ``4 b_p w0 (1 - cos(phi / 2))`` while rising and ``4 b_p w0 (1 +
  cos(phi / 2))`` while falling away (down, then up the other side). The
  pendulum then arrives with ``E_t``: it creeps up to upright and passes it
  at ``w_t``, slowly enough to be caught, instead of turning back short of it.

The acceleration becomes a drive command through :class:`AccelerationDrive`
(inverse plant model).

Measured on the plant model with encoder noise of 0.5 counts, 64 seeds each
(bench/bench_swing_up.py prints the table): from hanging at rest to the
catch in 6.7-6.8 s on Kestrel-1 and 5.8-6.9 s on Wren-2, every seed caught
and balanced, the cart within 0.14 m and 0.09 m of the centre (soft limits
0.36 m and 0.17 m); at 1.5 counts of noise, 6.9-8.4 s on Wren-2, all caught.
"""

from __future__ import annotations

import math

from daemon.config.control import SwingUpSettings
from daemon.control.drive_model import AccelerationDrive, clamp
from daemon.control.encoders import wrap_angle
from daemon.control.track_guard import TrackGuard
from sim_device.plant import PlantParams, pendulum_energy_j

__all__ = ["EnergySwingUp", "energy_pumping_accel", "pumping_accel_limit"]

# Below this energy error (swing amplitude above about 30 degrees) the pumping term is proportional.
_SMALL_SWING_ERROR = 0.93
# The sign of w cos th changes only once it is past this share of w0 (noise near rest), or less for a small a_p.
_SIGN_HYSTERESIS_W0 = 0.1


def energy_pumping_accel(energy_error: float, omega: float, cos_th: float, gain: float) -> float:
    """Åström-Furuta pumping term ``gain * (E0 - E) * sign(w cos th)``, with sign(0) = +1."""
    return gain * energy_error if omega * cos_th >= 0.0 else -gain * energy_error


def pumping_accel_limit(params: PlantParams, travel_limit_m: float, max_accel_mps2: float) -> float:
    """``a_p``: the square wave of pumping acceleration at ``w0`` moves the cart ``±travel/2``."""
    w0_sq = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2 / params.pivot_inertia_kgm2
    return min(max_accel_mps2, 0.25 * math.pi * w0_sq * 0.5 * travel_limit_m)


class EnergySwingUp:
    """Per-sample energy swing-up: ``update(x, v, theta, omega) -> drive`` (volts or newtons)."""

    __slots__ = (
        "_a_max",
        "_a_pump",
        "_direction",
        "_drive",
        "_gain",
        "_guard",
        "_hysteresis",
        "_inv_2mgl",
        "_jp",
        "_kv",
        "_kx",
        "_loss_scale",
        "_mgl",
        "_target",
        "last_accel",
        "last_drive",
    )

    def __init__(self, params: PlantParams, settings: SwingUpSettings, travel_limit_m: float):
        self._drive = AccelerationDrive(params)
        self._a_max = settings.max_accel_mps2
        self._a_pump = pumping_accel_limit(params, travel_limit_m, settings.max_accel_mps2)
        self._guard = TrackGuard(travel_limit_m, 0.8 * settings.max_accel_mps2)
        ml = params.pendulum_mass_kg * params.com_distance_m
        jp = params.pivot_inertia_kgm2
        self._mgl = ml * params.gravity_mps2
        w0 = math.sqrt(self._mgl / jp)
        self._gain = settings.energy_gain * params.gravity_mps2 / w0
        self._kx = settings.position_gain_per_s2
        self._kv = settings.velocity_gain_per_s
        self._jp = jp
        self._inv_2mgl = 1.0 / (2.0 * self._mgl)
        self._loss_scale = 4.0 * params.pivot_viscous_nms_per_rad * w0
        # the first push from rest swings the pendulum by 2 atan(a_p / g), so c peaks near 2 atan(a_p / g) w0
        self._hysteresis = min(_SIGN_HYSTERESIS_W0, math.atan(self._a_pump / params.gravity_mps2)) * w0
        self._target = 0.5 * jp * math.radians(settings.upright_rate_dps) ** 2
        self._direction = 1.0
        self.last_drive = 0.0
        self.last_accel = 0.0

    def energy(self, theta: float, omega: float) -> float:
        """``E`` of the module docstring, joules (0 upright at rest)."""
        return pendulum_energy_j(self._jp, self._mgl, theta, omega)

    @property
    def target_energy_j(self) -> float:
        return self._target

    def reference_energy(self, theta: float, omega: float) -> float:
        """``E_t`` plus what pivot friction will take on the way to upright (module docstring)."""
        half = 0.5 * wrap_angle(theta)
        rising = half * omega < 0.0
        return self._target + self._loss_scale * (1.0 - math.cos(half) if rising else 1.0 + math.cos(half))

    def reset(self, state: tuple[float, float, float, float], last_drive: float) -> None:
        """Start from the measured state: the first push (if at rest) goes toward ``+x``."""
        self._direction = 1.0
        self.last_drive = last_drive

    def accel_command(self, x: float, v: float, theta: float, omega: float) -> float:
        cos_th = math.cos(theta)
        c = omega * cos_th
        error = (self.reference_energy(theta, omega) - self.energy(theta, omega)) * self._inv_2mgl
        if c > self._hysteresis:
            self._direction = 1.0
        elif c < -self._hysteresis:
            self._direction = -1.0
        a_pump = self._a_pump
        if error > _SMALL_SWING_ERROR:
            a = self._direction * a_pump
        else:
            a = clamp(self._gain * error * c, a_pump)
        a -= self._kx * x + self._kv * v
        return self._guard.limit(clamp(a, self._a_max), x, v)

    def update(self, x: float, v: float, theta: float, omega: float) -> float:
        a = self.accel_command(x, v, theta, omega)
        self.last_accel = a
        drive = self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)
        self.last_drive = drive
        return drive
