"""The plant model of a cart-and-pendulum rig: the one model of the rig.

Simulation, linearisation for controller design and identification all use the
equations and the parameter set defined here.

Coordinates and convention (see DEVELOPERS.md): state ``[x_m, v_mps, theta_rad,
omega_radps]``; ``theta = 0`` upright, ``pi`` hanging, positive counter-clockwise
seen from the front with ``+x`` to the right. The pendulum's centre of mass is
at ``(x - l sin th, l cos th)`` relative to the track centre and pivot height.

Equations of motion (Lagrange). Symbols: ``M`` cart mass plus the drive's
reflected rotor mass (``Mt = M + m`` below), ``m`` pendulum mass, ``l`` pivot to
centre of mass, ``I`` pendulum inertia about its centre of mass, ``J = I + m l^2``,
``s = sin th``, ``c = cos th``::

    T = 1/2 Mt v^2 - m l c v w + 1/2 J w^2          (w = omega)
    V = m g l c
    generalised forces: Q_x  = F(u, v) - b v - f_c   (drive, viscous, Coulomb)
                        Q_th = -b_p w                (pivot viscous friction)

    d/dt dL/dv - dL/dx = Q_x   ->  Mt a - m l c alpha + m l s w^2 = Q_x
    d/dt dL/dw - dL/dth = Q_th ->  -m l c a + J alpha - m g l s  = Q_th

Solved for the accelerations with ``D = Mt J - (m l c)^2 > 0``::

    a     = ( J (Q_x - m l s w^2) + m l c (m g l s + Q_th) ) / D
    alpha = ( m l c (Q_x - m l s w^2) + Mt (m g l s + Q_th) ) / D

The drive force ``F(u, v)`` is in :mod:`sim_device.drive`.

Coulomb friction ``f_c = coulomb * sign(v)`` while the cart moves. At ``v = 0``
the cart sticks: the friction needed to keep ``a = 0`` (with the pendulum's
reaction) is ``f_s = F + m l c alpha_0 - m l s w^2``, ``alpha_0 = (m g l s +
Q_th) / J``; if ``|f_s| <= coulomb`` the cart stays put, otherwise it slips with
``f_c = coulomb * sign(f_s)``. The integrator snaps ``v`` to exactly 0 when it
changes sign within a sub-step, so the stick test is reached deterministically.

Impulses (end stops, :meth:`Plant.apply_impulse`) follow from the same mass
matrix: ``[[Mt, -m l c], [-m l c, J]] [dv, dw] = [P_x, P_th]`` where a
horizontal impulse ``P`` at the pendulum's centre of mass gives ``P_x = P`` and
``P_th = -l c P``. An end stop imposes ``v+ = 0`` and leaves the pendulum's
generalised momentum ``J w - m l c v`` unchanged (the stop's impulse acts on the
cart only).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np

from sim_device.drive import (
    DriveParams,
    applied_command,
    cart_force,
    drive_gains,
    effective_command,
    reflected_mass_kg,
)
from sim_device.track import TrackParams, limit_switches

__all__ = [
    "DriveParams",
    "PlantParams",
    "State",
    "TrackParams",
    "applied_command",
    "cart_force",
    "drive_gains",
    "effective_command",
    "limit_switches",
    "linearise",
    "state_derivative",
]

State = tuple[float, float, float, float]
"""``(x_m, v_mps, theta_rad, omega_radps)``."""


@dataclass(frozen=True)
class PlantParams:
    """Physical parameters of one rig (SI units)."""

    cart_mass_kg: float
    pendulum_mass_kg: float
    com_distance_m: float
    inertia_com_kgm2: float
    drive: DriveParams
    track: TrackParams
    gravity_mps2: float = 9.81
    cart_viscous_n_per_mps: float = 0.0
    cart_coulomb_n: float = 0.0
    pivot_viscous_nms_per_rad: float = 0.0

    def __post_init__(self) -> None:
        for name in ("cart_mass_kg", "pendulum_mass_kg", "com_distance_m", "gravity_mps2"):
            if not getattr(self, name) > 0.0:
                raise ValueError(f"plant.{name} must be > 0 (got {getattr(self, name)!r})")
        for name in ("inertia_com_kgm2", "cart_viscous_n_per_mps", "cart_coulomb_n",
                     "pivot_viscous_nms_per_rad"):
            if not getattr(self, name) >= 0.0:
                raise ValueError(f"plant.{name} must be >= 0 (got {getattr(self, name)!r})")

    @property
    def moving_mass_kg(self) -> float:
        """``Mt``: cart, pendulum and the drive's reflected rotor mass."""
        return self.cart_mass_kg + self.pendulum_mass_kg + reflected_mass_kg(self.drive)

    @property
    def pivot_inertia_kgm2(self) -> float:
        """``J = I + m l^2``: the pendulum's inertia about the pivot."""
        return self.inertia_com_kgm2 + self.pendulum_mass_kg * self.com_distance_m ** 2


Accelerations = Callable[[float, float, float, float, float], tuple[float, float]]


def _acceleration_function(params: PlantParams) -> Accelerations:
    """Build ``accel(v, sin th, cos th, w, drive_force_at_rest) -> (a, alpha)``.

    The drive's back-EMF is folded into the viscous coefficient, so the only
    input is the force the drive gives at rest, ``gain * effective_command``.
    Pure float arithmetic: this runs 4 times per RK4 sub-step.
    """
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp = params.pivot_inertia_kgm2
    mt = params.moving_mass_kg
    b = params.cart_viscous_n_per_mps + drive_gains(params.drive)[1]
    bp = params.pivot_viscous_nms_per_rad
    coulomb = params.cart_coulomb_n

    def accel(v: float, s: float, c: float, w: float, f_rest: float) -> tuple[float, float]:
        q_th = mgl * s - bp * w
        centripetal = ml * s * w * w
        if v > 0.0:
            q_x = f_rest - b * v - coulomb
        elif v < 0.0:
            q_x = f_rest - b * v + coulomb
        else:
            alpha_stuck = q_th / jp
            f_hold = f_rest + ml * c * alpha_stuck - centripetal
            if -coulomb <= f_hold <= coulomb:
                return 0.0, alpha_stuck
            q_x = f_rest - coulomb if f_hold > 0.0 else f_rest + coulomb
        mlc = ml * c
        rhs_x = q_x - centripetal
        det = mt * jp - mlc * mlc
        return (jp * rhs_x + mlc * q_th) / det, (mlc * rhs_x + mt * q_th) / det

    return accel


def state_derivative(params: PlantParams, state: State, command: float) -> State:
    """``d/dt [x, v, theta, omega]`` of the free (not held, not at an end stop) plant."""
    _x, v, th, w = state
    f_rest = drive_gains(params.drive)[0] * effective_command(params.drive, command)
    a, alpha = _acceleration_function(params)(v, math.sin(th), math.cos(th), w, f_rest)
    return v, a, w, alpha


def linearise(
    params: PlantParams, about: Literal["upright", "hanging"] = "upright"
) -> tuple[np.ndarray, np.ndarray]:
    """``(A, B)`` of ``d/dt dx = A dx + B du`` about an equilibrium at rest.

    ``about="upright"`` linearises at theta = 0, ``"hanging"`` at theta = pi
    (the state deviation's angle is theta - pi there). ``u`` is the drive
    command in volts or newtons per ``params.drive.kind``; B is the slope of
    the drive above its dead band. Coulomb friction, being non-smooth, is left
    out; viscous friction and back-EMF are in.
    """
    if about == "upright":
        c0 = 1.0
    elif about == "hanging":
        c0 = -1.0
    else:
        raise ValueError(f"linearise: about must be 'upright' or 'hanging' (got {about!r})")
    gain, damping = drive_gains(params.drive)
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp = params.pivot_inertia_kgm2
    mt = params.moving_mass_kg
    b = params.cart_viscous_n_per_mps + damping
    bp = params.pivot_viscous_nms_per_rad
    det = mt * jp - ml * ml
    a_mat = np.array(
        [
            [0.0, 1.0, 0.0, 0.0],
            [0.0, -jp * b / det, ml * mgl / det, -ml * c0 * bp / det],
            [0.0, 0.0, 0.0, 1.0],
            [0.0, -ml * c0 * b / det, mt * mgl * c0 / det, -mt * bp / det],
        ]
    )
    b_vec = np.array([0.0, jp * gain / det, 0.0, ml * c0 * gain / det])
    return a_mat, b_vec
