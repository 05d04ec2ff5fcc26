"""Commanded cart acceleration to drive command, by inverting the plant model.

Swing-up and homing think in cart acceleration; the rig takes volts or
newtons. Given the measured state and a wanted cart acceleration ``a``, the
plant's equations (sim_device/plant.py) give the pendulum's angular
acceleration and hence the horizontal force the cart needs::

    alpha = (m l c a + m g l s - b_p w) / J
    Q_x   = Mt a - m l c alpha + m l s w^2          (force on cart after friction)
    F     = Q_x + b v + f_c sign(v)                 (drive force at rest, b incl. back-EMF)
    u     = F / gain  (+ dead band, with the sign of F)

``gain`` and back-EMF damping are those of :func:`sim_device.drive.drive_gains`.
This is exact for the model (feedback linearisation of the cart) and leaves
model error to the outer loops. Coulomb friction is compensated with the sign
of the velocity, or of the wanted force while the cart is still.
"""

from __future__ import annotations

from sim_device.drive import drive_gains
from sim_device.plant import PlantParams

__all__ = ["AccelerationDrive", "clamp"]


def clamp(value: float, limit: float) -> float:
    """``value`` limited to ``[-limit, limit]``."""
    if value > limit:
        return limit
    if value < -limit:
        return -limit
    return value


class AccelerationDrive:
    """Per-sample conversion of a wanted cart acceleration into a clamped drive command."""

    __slots__ = (
        "_b",
        "_band",
        "_bp",
        "_coulomb",
        "_inv_gain",
        "_jp",
        "_mgl",
        "_ml",
        "_mt",
        "limit",
    )

    def __init__(self, params: PlantParams):
        gain, damping = drive_gains(params.drive)
        self._mt = params.moving_mass_kg
        self._ml = params.pendulum_mass_kg * params.com_distance_m
        self._mgl = self._ml * params.gravity_mps2
        self._jp = params.pivot_inertia_kgm2
        self._bp = params.pivot_viscous_nms_per_rad
        self._b = params.cart_viscous_n_per_mps + damping
        self._coulomb = params.cart_coulomb_n
        self._inv_gain = 1.0 / gain
        self._band = params.drive.dead_band
        self.limit = params.drive.limit

    def force_for(self, accel: float, v: float, sin_th: float, cos_th: float, w: float) -> float:
        """Drive force at rest (newtons) that gives cart acceleration ``accel`` in this state."""
        mlc = self._ml * cos_th
        alpha = (mlc * accel + self._mgl * sin_th - self._bp * w) / self._jp
        q_x = self._mt * accel - mlc * alpha + self._ml * sin_th * w * w
        force = q_x + self._b * v
        if v > 1e-4 or (-1e-4 <= v <= 1e-4 and q_x > 0.0):
            force += self._coulomb
        elif v < -1e-4 or q_x < 0.0:
            force -= self._coulomb
        return force

    def command_for(self, accel: float, v: float, sin_th: float, cos_th: float, w: float) -> float:
        """Drive command (volts or newtons), clamped to ``±limit``, for cart acceleration ``accel``."""
        u = self.force_for(accel, v, sin_th, cos_th, w) * self._inv_gain
        if u > 0.0:
            u += self._band
        elif u < 0.0:
            u -= self._band
        limit = self.limit  # clamp(u, limit), inlined: one call less per sample
        if u > limit:
            return limit
        if u < -limit:
            return -limit
        return u
