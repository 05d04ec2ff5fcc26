"""Balance: the discrete LQR at the rig's sample rate, and the per-sample controller.

Design (:func:`design_balance`): linearise the plant about upright
(:func:`sim_device.plant.linearise`; volts in with back-EMF for voltage
drives, newtons for force drives), discretise with zero-order hold at the
sample period, solve the discrete Riccati equation for ``Q = diag(q_diag)`` and
``R = r``. The continuous-time LQR for the same weights is computed alongside
for comparison. With ``integral_action`` the model gains a fifth state, the
integral of the cart position error, weighted by ``integral_weight``.

Control law, per sample (:class:`BalanceController`)::

    u = -K [x - 0, v, theta, omega] + Nbar r  (- Ki z,  z += dt (x - r) when not saturated)

Saturation is explicit: ``u`` is clamped to ``±drive.limit`` and clamped
samples are counted; the integrator stops while clamped (anti-windup).

Bumpless transfer: on :meth:`BalanceController.reset` the controller
remembers the difference between the last drive of the previous controller
and its own first command, and adds that difference decaying linearly to zero
over ``blend_samples`` samples. The first command therefore equals the last
drive exactly and the hand-over adds no step; the integrator (if any) starts
at zero so the blend is the only transient.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from daemon.config.control import BalanceSettings
from daemon.control.drive_model import clamp
from daemon.control.lqr import (
    augment_with_integrator,
    continuous_lqr,
    discrete_lqr,
    discretise_zoh,
    reference_gain,
)
from sim_device.plant import PlantParams, linearise

__all__ = ["BalanceController", "BalanceDesign", "design_balance"]

_CART_OUTPUT = np.array([[1.0, 0.0, 0.0, 0.0]])


@dataclass(frozen=True)
class BalanceDesign:
    """Everything the balance controller and the design report need."""

    k: tuple[float, float, float, float]
    ki: float  # integral gain (0 without integral action)
    nbar: float
    dt_s: float
    sample_rate_hz: int
    input_kind: str  # "voltage" (volts) or "force" (newtons)
    limit: float
    a: np.ndarray
    b: np.ndarray
    ad: np.ndarray
    bd: np.ndarray
    k_continuous: tuple[float, float, float, float]
    from_config: bool  # gains taken from [balance] gains rather than designed here

    @property
    def k_full(self) -> np.ndarray:
        """The gain row of the closed loop (with ``ki`` last when there is integral action)."""
        return np.array([*self.k, self.ki]) if self.ki else np.array(self.k)

    def closed_loop_matrix(self) -> np.ndarray:
        """``Ad - Bd K`` (on the augmented model with integral action)."""
        if self.ki:
            a_aug, b_aug = augment_with_integrator(self.ad, self.bd, _CART_OUTPUT, self.dt_s)
            return a_aug - b_aug @ self.k_full.reshape(1, -1)
        return self.ad - self.bd @ self.k_full.reshape(1, -1)

    def poles(self) -> np.ndarray:
        return np.linalg.eigvals(self.closed_loop_matrix())


def design_balance(
    params: PlantParams, settings: BalanceSettings, sample_rate_hz: int, use_config_gains: bool = True
) -> BalanceDesign:
    """Balance gains for this rig: from the config if given (and ``use_config_gains``), else designed."""
    dt = 1.0 / sample_rate_hz
    a, b = linearise(params, "upright")
    ad, bd = discretise_zoh(a, b, dt)
    q = np.diag(settings.q_diag)
    k_cont = continuous_lqr(a, b, q, settings.r)[0]
    from_config = use_config_gains and settings.gains is not None
    if from_config:
        k_full = np.array(settings.gains, dtype=float)
    elif settings.integral_action:
        a_aug, b_aug = augment_with_integrator(ad, bd, _CART_OUTPUT, dt)
        q_aug = np.zeros((5, 5))
        q_aug[:4, :4] = q
        q_aug[4, 4] = settings.integral_weight
        k_full = discrete_lqr(a_aug, b_aug, q_aug, settings.r)[0]
    else:
        k_full = discrete_lqr(ad, bd, q, settings.r)[0]
    k = k_full[:4]
    nbar = reference_gain(ad, bd, k.reshape(1, -1), _CART_OUTPUT, discrete=True)
    return BalanceDesign(
        k=tuple(float(g) for g in k),
        ki=float(k_full[4]) if settings.integral_action else 0.0,
        nbar=nbar,
        dt_s=dt,
        sample_rate_hz=sample_rate_hz,
        input_kind=params.drive.kind,
        limit=params.drive.limit,
        a=a,
        b=b.reshape(-1, 1),
        ad=ad,
        bd=bd,
        k_continuous=tuple(float(g) for g in k_cont),
        from_config=from_config,
    )


class BalanceController:
    """Per-sample LQR: ``update(x, v, theta, omega) -> drive``, theta wrapped to (-pi, pi]."""

    __slots__ = (
        "_blend",
        "_blend_samples",
        "_blend_step",
        "_dt",
        "_k0",
        "_k1",
        "_k2",
        "_k3",
        "_ki",
        "_nbar",
        "_z",
        "limit",
        "samples",
        "saturated_samples",
        "set_point_m",
    )

    def __init__(self, design: BalanceDesign, blend_samples: int = 10):
        self._k0, self._k1, self._k2, self._k3 = design.k
        self._ki = design.ki
        self._nbar = design.nbar
        self._dt = design.dt_s
        self.limit = design.limit
        self.set_point_m = 0.0
        self._blend_samples = blend_samples
        self._z = 0.0
        self._blend = 0.0
        self._blend_step = 0.0
        self.samples = 0
        self.saturated_samples = 0

    def _law(self, x: float, v: float, theta: float, omega: float) -> float:
        return (self._nbar * self.set_point_m - self._k0 * x - self._k1 * v - self._k2 * theta
                - self._k3 * omega - self._ki * self._z)

    def reset(self, state: tuple[float, float, float, float], last_drive: float) -> None:
        """Take over from another controller at the measured ``state`` without a step in the command."""
        self._z = 0.0
        self._blend = last_drive - self._law(*state)
        self._blend_step = self._blend / self._blend_samples

    def update(self, x: float, v: float, theta: float, omega: float) -> float:
        blend = self._blend
        # _law, written out: it runs every sample, and a Python call costs as much as the law.
        u = (self._nbar * self.set_point_m - self._k0 * x - self._k1 * v - self._k2 * theta
             - self._k3 * omega - self._ki * self._z) + blend
        if blend != 0.0:  # only for blend_samples samples after a reset
            step = self._blend_step
            blend -= step
            self._blend = 0.0 if (blend > 0.0) == (step < 0.0) or blend == 0.0 else blend
        self.samples += 1
        limit = self.limit
        if u > limit or u < -limit:
            self.saturated_samples += 1
            return clamp(u, limit)
        if self._ki:
            self._z += self._dt * (x - self.set_point_m)
        return u
