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
``f_c = coulomb * sign(f_s)``. When ``v`` changes sign within a sub-step the
integrator stops the cart (as an end stop does, below), so the stick test is
reached deterministically and the snap never adds energy.

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
from sim_device.track import TrackParams, limit_switches, switch_trip_m

__all__ = [
    "DriveParams",
    "Plant",
    "PlantParams",
    "State",
    "TrackParams",
    "acceleration_function",
    "applied_command",
    "cart_counts",
    "cart_force",
    "drive_gains",
    "effective_command",
    "limit_switches",
    "linearise",
    "pendulum_counts",
    "pendulum_energy",
    "pendulum_energy_j",
    "state_derivative",
    "theta_from_counts",
    "total_energy",
    "x_from_counts",
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
        for name in (
            "inertia_com_kgm2",
            "cart_viscous_n_per_mps",
            "cart_coulomb_n",
            "pivot_viscous_nms_per_rad",
        ):
            if not getattr(self, name) >= 0.0:
                raise ValueError(f"plant.{name} must be >= 0 (got {getattr(self, name)!r})")

    @property
    def moving_mass_kg(self) -> float:
        """``Mt``: cart, pendulum and the drive's reflected rotor mass."""
        return self.cart_mass_kg + self.pendulum_mass_kg + reflected_mass_kg(self.drive)

    @property
    def pivot_inertia_kgm2(self) -> float:
        """``J = I + m l^2``: the pendulum's inertia about the pivot."""
        return self.inertia_com_kgm2 + self.pendulum_mass_kg * self.com_distance_m**2


Accelerations = Callable[[float, float, float, float, float], tuple[float, float]]


def acceleration_function(params: PlantParams) -> Accelerations:
    """Build ``accel(v, sin th, cos th, w, drive_force_at_rest) -> (a, alpha)``.

    The drive's back-EMF is folded into the viscous coefficient, so the only
    input is the force the drive gives at rest, ``gain * effective_command``.
    Pure float arithmetic: this runs 4 times per RK4 sub-step (and once a sample in the
    daemon's dead-encoder check, :mod:`daemon.supervisor.encoder_checks`).
    """
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp = params.pivot_inertia_kgm2
    mt = params.moving_mass_kg
    b = params.cart_viscous_n_per_mps + drive_gains(params.drive)[1]
    bp = params.pivot_viscous_nms_per_rad
    coulomb = params.cart_coulomb_n
    mt_jp = mt * jp

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
        det = mt_jp - mlc * mlc
        return (jp * rhs_x + mlc * q_th) / det, (mlc * rhs_x + mt * q_th) / det

    return accel


def state_derivative(params: PlantParams, state: State, command: float) -> State:
    """``d/dt [x, v, theta, omega]`` of the free (not held, not at an end stop) plant."""
    _x, v, th, w = state
    f_rest = drive_gains(params.drive)[0] * effective_command(params.drive, command)
    a, alpha = acceleration_function(params)(v, math.sin(th), math.cos(th), w, f_rest)
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


def pendulum_energy_j(
    pivot_inertia_kgm2: float, mgl: float, theta_rad: float, omega_radps: float
) -> float:
    """The pendulum's energy in the cart's frame, joules: ``1/2 J w^2 + m g l (cos th - 1)``.

    The one definition in Poise, with one zero point: upright at rest (the state swing-up
    brings the pendulum to, so the swing-up laws regulate this to 0); hanging at rest it is
    ``-2 m g l``. ``J`` is the inertia about the pivot, ``mgl`` is ``m g l``.
    """
    return 0.5 * pivot_inertia_kgm2 * omega_radps * omega_radps + mgl * (math.cos(theta_rad) - 1.0)


def pendulum_energy(params: PlantParams, state: State) -> float:
    """:func:`pendulum_energy_j` of the pendulum of ``params`` in ``state``."""
    mgl = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
    return pendulum_energy_j(params.pivot_inertia_kgm2, mgl, state[2], state[3])


def total_energy(params: PlantParams, state: State) -> float:
    """Total mechanical energy, joules, zero with the cart still and the pendulum upright at rest.

    Kinetic energy of cart (with reflected rotor), pendulum translation and
    rotation, plus the pendulum's potential energy: ``T + V`` of the docstring.
    """
    _x, v, th, w = state
    ml_c = params.pendulum_mass_kg * params.com_distance_m * math.cos(th)
    kinetic = 0.5 * params.moving_mass_kg * v * v - ml_c * v * w
    return kinetic + pendulum_energy(params, state)


def cart_counts(x_m: float, counts_per_m: float) -> int:
    """Cart encoder count nearest to ``x_m`` (0 at the track centre)."""
    return math.floor(x_m * counts_per_m + 0.5)


def x_from_counts(counts: int, counts_per_m: float) -> float:
    """``x = counts / counts_per_m``."""
    return counts / counts_per_m


def pendulum_counts(theta_rad: float, counts_per_rev: int) -> int:
    """Pendulum encoder count nearest to ``theta_rad``; 0 hanging, multi-turn (never wraps)."""
    return math.floor((theta_rad - math.pi) * counts_per_rev / (2.0 * math.pi) + 0.5)


def theta_from_counts(counts: int, counts_per_rev: int) -> float:
    """``theta = pi + counts * 2 pi / counts_per_rev``."""
    return math.pi + counts * (2.0 * math.pi) / counts_per_rev


class Plant:
    """The simulated rig's mechanics, stepped with fixed-step RK4.

    ``step(command, dt_s)`` holds the command for ``dt_s`` and integrates it in
    ``substeps`` RK4 sub-steps. Pure float arithmetic and no randomness: the same
    calls give bit-identical states. End stops are checked after every sub-step.

    The state is in four attributes, ``x_m``, ``v_mps``, ``theta_rad`` and
    ``omega_radps`` (also together as :attr:`state`): read them freely, change
    them only through :meth:`set_state`, :meth:`hold_cart`, :meth:`apply_impulse`
    and :meth:`step`, which keep the cart on the track.
    """

    def __init__(
        self,
        params: PlantParams,
        state0: State = (0.0, 0.0, math.pi, 0.0),
        substeps: int = 2,
    ):
        if substeps < 1:
            raise ValueError(f"Plant: substeps must be >= 1 (got {substeps!r})")
        self.params = params
        self.substeps = substeps
        self._accel = acceleration_function(params)
        self._gain = drive_gains(params.drive)[0]
        self._ml = params.pendulum_mass_kg * params.com_distance_m
        self._jp = params.pivot_inertia_kgm2
        self._mt = params.moving_mass_kg
        self._half_m = params.track.half_length_m
        self._switch_trip_m = switch_trip_m(params.track)
        self._stiction = params.cart_coulomb_n > 0.0
        self._ml_over_jp = self._ml / self._jp
        self._command = math.nan  # the command _f_rest was worked out for (NaN: none yet)
        self._f_rest = 0.0
        self._held = False
        self.end_stop_touched = False  # whether the cart was against an end stop in the last step
        self.set_state(state0)

    # -- state ---------------------------------------------------------------

    @property
    def state(self) -> State:
        return self.x_m, self.v_mps, self.theta_rad, self.omega_radps

    def set_state(self, state: State) -> None:
        """Place the rig in ``state`` (clamped to the track; cart still if held)."""
        x, v, th, w = (float(value) for value in state)
        half = self._half_m
        self.x_m = min(max(x, -half), half)
        self.v_mps = 0.0 if self._held else v
        self.theta_rad = th
        self.omega_radps = w

    @property
    def held(self) -> bool:
        return self._held

    def hold_cart(self, held: bool) -> None:
        """Clamp the cart still where it is (``True``) or let it go (``False``).

        Clamping a moving cart stops it like an end stop does (the pendulum
        keeps its momentum about the pivot).
        """
        if held and self.v_mps != 0.0:
            self._stop_cart()
        self._held = held

    @property
    def limit_switches(self) -> tuple[bool, bool]:
        """``(negative-end, positive-end)`` limit switch states now (as :func:`limit_switches`)."""
        x, trip = self.x_m, self._switch_trip_m
        return x <= -trip, x >= trip

    def pendulum_energy(self) -> float:
        return pendulum_energy(self.params, self.state)

    def total_energy(self) -> float:
        return total_energy(self.params, self.state)

    # -- disturbances ----------------------------------------------------------

    def apply_impulse(self, pendulum_ns: float = 0.0, cart_ns: float = 0.0) -> None:
        """Horizontal impulses (N s, +x positive) at the pendulum's centre of mass and on the cart.

        Solves the impulse-momentum equations of the constrained system (module
        docstring). A held cart takes the cart's share and stays still.
        """
        mlc = self._ml * math.cos(self.theta_rad)
        p_x = pendulum_ns + cart_ns
        p_th = -self.params.com_distance_m * math.cos(self.theta_rad) * pendulum_ns
        if self._held:
            self.omega_radps += p_th / self._jp
            return
        det = self._mt * self._jp - mlc * mlc
        self.v_mps += (self._jp * p_x + mlc * p_th) / det
        self.omega_radps += (mlc * p_x + self._mt * p_th) / det

    def _stop_cart(self) -> None:
        """Stop the cart dead, keeping the pendulum's generalised momentum ``J w - m l c v``."""
        self.omega_radps -= self._ml * math.cos(self.theta_rad) * self.v_mps / self._jp
        self.v_mps = 0.0

    # -- integration -------------------------------------------------------------

    def step(self, command: float, dt_s: float) -> None:
        """Advance ``dt_s`` seconds with the drive ``command`` (volts or newtons) held.

        The simulated rig calls this once per sample, so the free cart's RK4 is
        written out here rather than in a helper, every constant is worked out in
        ``__init__``, and the drive force is worked out again only when the command
        changes: each Python call costs about as much as a few lines of arithmetic.
        """
        if not dt_s > 0.0:
            raise ValueError(f"Plant.step: dt_s must be > 0 (got {dt_s!r})")
        if command != self._command:
            self._command = command
            self._f_rest = self._gain * effective_command(self.params.drive, command)
        h = dt_s / self.substeps
        if self._held:
            self._step_held(h)
            return
        f_rest, accel = self._f_rest, self._accel
        sin, cos = math.sin, math.cos
        half, stiction, ml_over_jp = self._half_m, self._stiction, self._ml_over_jp
        x, v, th, w = self.x_m, self.v_mps, self.theta_rad, self.omega_radps
        h2, h6 = 0.5 * h, h / 6.0
        touched = False
        for _ in range(self.substeps):
            a1, al1 = accel(v, sin(th), cos(th), w, f_rest)
            v2, th2, w2 = v + h2 * a1, th + h2 * w, w + h2 * al1
            a2, al2 = accel(v2, sin(th2), cos(th2), w2, f_rest)
            v3, th3, w3 = v + h2 * a2, th + h2 * w2, w + h2 * al2
            a3, al3 = accel(v3, sin(th3), cos(th3), w3, f_rest)
            v4, th4, w4 = v + h * a3, th + h * w3, w + h * al3
            a4, al4 = accel(v4, sin(th4), cos(th4), w4, f_rest)
            x += h6 * (v + 2.0 * (v2 + v3) + v4)
            th += h6 * (w + 2.0 * (w2 + w3) + w4)
            w += h6 * (al1 + 2.0 * (al2 + al3) + al4)
            v_new = v + h6 * (a1 + 2.0 * (a2 + a3) + a4)
            # velocity reversed within the sub-step: stop, and let the stick test decide
            stop = stiction and v != 0.0 and (v_new > 0.0) != (v > 0.0)
            v = v_new
            if x >= half or x <= -half:
                touched = True
                if x > half or x < -half:
                    x = half if x > 0.0 else -half
                stop = stop or (v != 0.0 and (v > 0.0) == (x > 0.0))
            if stop:  # as _stop_cart: keep J w - m l cos(th) v
                w -= ml_over_jp * cos(th) * v
                v = 0.0
        self.x_m, self.v_mps, self.theta_rad, self.omega_radps = x, v, th, w
        self.end_stop_touched = touched

    def _step_held(self, h: float) -> None:
        """Pendulum alone on a clamped cart: ``J alpha = m g l sin th - b_p w``."""
        mgl = self._ml * self.params.gravity_mps2
        bp = self.params.pivot_viscous_nms_per_rad
        jp = self._jp
        sin = math.sin
        th, w = self.theta_rad, self.omega_radps
        h2, h6 = 0.5 * h, h / 6.0
        for _ in range(self.substeps):
            al1 = (mgl * sin(th) - bp * w) / jp
            w2 = w + h2 * al1
            al2 = (mgl * sin(th + h2 * w) - bp * w2) / jp
            w3 = w + h2 * al2
            al3 = (mgl * sin(th + h2 * w2) - bp * w3) / jp
            w4 = w + h * al3
            al4 = (mgl * sin(th + h * w3) - bp * w4) / jp
            th += h6 * (w + 2.0 * (w2 + w3) + w4)
            w += h6 * (al1 + 2.0 * (al2 + al3) + al4)
        self.theta_rad, self.omega_radps = th, w
        self.end_stop_touched = abs(self.x_m) >= self._half_m
