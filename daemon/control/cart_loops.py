"""Cart position hold (the READY state) and cart velocity following (the category 1 stop ramp).

Both think in cart acceleration and turn it into a drive command through the
inverse plant model (:class:`AccelerationDrive`), like homing and swing-up.

:class:`CartHold` is a critically damped position loop on the set-point,
``a = wc^2 (x_sp - x) - 2 wc v``, plus a swing damper for the hanging
pendulum: the pendulum's energy changes at ``m l a cos(th) w`` (see
:mod:`.swing_energy`), so ``a = -k_d cos(th) w`` takes energy out and a swing
left by homing dies away in a few seconds instead of minutes.

:class:`CartVelocityFollower` is ``a = (v_sp - v) / tau``, saturated; the stop
ramp hands it a velocity set-point falling to zero. Its ``tau`` and saturation
are the stop's (daemon/supervisor/stop_ramp.py), since the stopping-distance
interlock counts the lag ``tau`` gives. Being the stop's loop, it never has the
drive push the cart along its motion: where friction and back-EMF brake the
cart harder than the loop asks, the drive lets them rather than cancel them. A
command along the motion is held below the dead band plus the back-EMF's
voltage, ``damping / gain * |v|``, at which the drive's force is zero; ``|v|``
is taken one sample's loop deceleration lower, since the measured velocity (a
difference over the last period) runs ahead of the braking cart's.
"""

from __future__ import annotations

import math

from daemon.control.drive_model import AccelerationDrive, clamp
from sim_device.plant import PlantParams, drive_gains

__all__ = ["CartHold", "CartVelocityFollower"]

HOLD_BANDWIDTH_HZ = 0.3
HOLD_MAX_ACCEL_MPS2 = 2.0
SWING_DAMPING_PER_S = 1.0  # m/s^2 of cart acceleration per rad/s of pendulum rate


class CartHold:
    """Hold the cart at ``set_point_m`` and damp the pendulum's swing: ``update(x, v, th, w) -> drive``."""

    __slots__ = ("_2wc", "_a_max", "_damping", "_drive", "_wc2", "set_point_m")

    def __init__(self, params: PlantParams, bandwidth_hz: float = HOLD_BANDWIDTH_HZ,
                 max_accel_mps2: float = HOLD_MAX_ACCEL_MPS2,
                 swing_damping_per_s: float = SWING_DAMPING_PER_S):
        wc = 2.0 * math.pi * bandwidth_hz
        self._wc2 = wc * wc
        self._2wc = 2.0 * wc
        self._a_max = max_accel_mps2
        self._damping = swing_damping_per_s
        self._drive = AccelerationDrive(params)
        self.set_point_m = 0.0

    def reset(self, state: tuple[float, float, float, float], last_drive: float) -> None:
        """Nothing to initialise: the loop is static; kept for the common controller shape."""

    @property
    def max_accel_mps2(self) -> float:
        """The most cart acceleration the loop asks for; beyond it the loop is saturated."""
        return self._a_max

    def accel_command(self, x: float, v: float, theta: float, omega: float) -> float:
        """The cart acceleration the loop wants in this state, before its limit."""
        return self._wc2 * (self.set_point_m - x) - self._2wc * v - self._damping * math.cos(theta) * omega

    def update(self, x: float, v: float, theta: float, omega: float) -> float:
        a = clamp(self.accel_command(x, v, theta, omega), self._a_max)
        return self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)


class CartVelocityFollower:
    """Follow a cart velocity set-point: ``update(v_sp, x, v, th, w) -> drive``."""

    __slots__ = ("_a_max", "_band", "_drive", "_emf_per_mps", "_inv_tau", "_lead_mps")

    def __init__(self, params: PlantParams, max_accel_mps2: float, time_constant_s: float,
                 period_s: float):
        self._a_max = max_accel_mps2
        self._inv_tau = 1.0 / time_constant_s
        self._drive = AccelerationDrive(params)
        gain, damping = drive_gains(params.drive)
        self._band = params.drive.dead_band
        self._emf_per_mps = damping / gain  # command per m/s at which the drive's force is zero
        self._lead_mps = max_accel_mps2 * period_s  # how far the measured speed may run ahead

    def update(self, v_setpoint: float, x: float, v: float, theta: float, omega: float) -> float:
        a = clamp((v_setpoint - v) * self._inv_tau, self._a_max)
        u = self._drive.command_for(a, v, math.sin(theta), math.cos(theta), omega)
        if u * v > 0.0:  # along the motion: never a force along it
            return clamp(u, self._band + self._emf_per_mps * max(0.0, abs(v) - self._lead_mps))
        return u
