"""How a drive command becomes a horizontal force on the cart.

Two kinds of drive (``DriveParams.kind``):

``"voltage"`` — a DC motor driving the cart through a pinion or belt. The
command is armature volts. With torque constant ``Kt`` (equal to the back-EMF
constant ``Ke`` in SI units), armature resistance ``R`` (inductance neglected),
gear ratio ``G`` (motor turns per pulley turn) and pulley radius ``r``::

    motor speed      w_m = G * v / r
    armature current i   = (V_eff - Kt * w_m) / R
    cart force       F   = (Kt * G / r) * i
                         = (Kt*G/(R*r)) * V_eff - (Kt^2*G^2/(R*r^2)) * v

The back-EMF term acts like viscous friction. The motor rotor's inertia ``J``
turns into extra cart mass ``J*G^2/r^2`` (:func:`reflected_mass_kg`, for either
kind of drive), which the plant adds to the cart's inertia; it is not a force.

``"force"`` — a current-mode amplifier: the command is newtons and
``F = V_eff`` (no back-EMF).

For both kinds the command first saturates at ``±limit`` (the *applied*
command, :func:`applied_command`); then a dead band, if any, removes
``dead_band`` from its magnitude (:func:`effective_command`): commands with
``|u| <= dead_band`` give no force, larger ones give ``u - sign(u)*dead_band``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

__all__ = [
    "DriveParams",
    "applied_command",
    "cart_force",
    "drive_gains",
    "effective_command",
    "reflected_mass_kg",
]

DRIVE_KINDS = ("voltage", "force")


@dataclass(frozen=True)
class DriveParams:
    """The cart drive. ``limit`` and ``dead_band`` are in command units (volts or newtons)."""

    kind: Literal["voltage", "force"]
    limit: float
    torque_constant_nm_per_a: float
    resistance_ohm: float
    gear_ratio: float
    pulley_radius_m: float
    rotor_inertia_kgm2: float = 0.0
    dead_band: float = 0.0

    def __post_init__(self) -> None:
        if self.kind not in DRIVE_KINDS:
            raise ValueError(f"drive.kind must be one of {DRIVE_KINDS} (got {self.kind!r})")
        for name in (
            "limit",
            "torque_constant_nm_per_a",
            "resistance_ohm",
            "gear_ratio",
            "pulley_radius_m",
        ):
            if not getattr(self, name) > 0.0:
                raise ValueError(f"drive.{name} must be > 0 (got {getattr(self, name)!r})")
        for name in ("rotor_inertia_kgm2", "dead_band"):
            if not getattr(self, name) >= 0.0:
                raise ValueError(f"drive.{name} must be >= 0 (got {getattr(self, name)!r})")


def applied_command(drive: DriveParams, command: float) -> float:
    """The command after saturation at ``±drive.limit``."""
    limit = drive.limit
    if command > limit:
        return limit
    if command < -limit:
        return -limit
    return command


def effective_command(drive: DriveParams, command: float) -> float:
    """The saturated command with the dead band removed (what produces force)."""
    u = applied_command(drive, command)
    band = drive.dead_band
    if u > band:
        return u - band
    if u < -band:
        return u + band
    return 0.0


def drive_gains(drive: DriveParams) -> tuple[float, float]:
    """``(force per unit effective command, back-EMF damping in N per m/s)``.

    The drive force is ``gain * effective_command - damping * v``; these two
    numbers are also the drive's entries in the linearised model.
    """
    if drive.kind == "force":
        return 1.0, 0.0
    kt, g, r = drive.torque_constant_nm_per_a, drive.gear_ratio, drive.pulley_radius_m
    res = drive.resistance_ohm
    return kt * g / (res * r), kt * kt * g * g / (res * r * r)


def cart_force(drive: DriveParams, command: float, v_mps: float) -> float:
    """Horizontal force on the cart, newtons, for a command held at cart speed ``v_mps``."""
    gain, damping = drive_gains(drive)
    return gain * effective_command(drive, command) - damping * v_mps


def reflected_mass_kg(drive: DriveParams) -> float:
    """The motor rotor's inertia seen at the cart, ``J*G^2/r^2``."""
    ratio = drive.gear_ratio / drive.pulley_radius_m
    return drive.rotor_inertia_kgm2 * ratio * ratio
