"""Steady-state Kalman filter on the discretised linear model about upright.

Model (ZOH at the sample period, the same ``Ad, Bd`` the balance LQR uses)::

    s[k+1] = Ad s[k] + Bd u[k] + w[k],      y[k] = C s[k] + e[k]
    s = [x_m, v_mps, theta_rad, omega_radps],  y = [x_m, theta_rad],  u = drive applied

Measurement noise ``e``: an encoder that rounds to a step ``q`` has a
quantisation error uniform over one step, variance ``q^2 / 12`` (B. Widrow and
I. Kollár, "Quantization Noise", Cambridge University Press 2008, ch. 4),
plus any extra electrical noise given in counts rms.

Process noise ``w``: what the linear model leaves out (Coulomb friction, the
drive's dead band, non-linearity away from upright) enters as white
accelerations on the cart (``sigma_a``, m/s^2) and the pendulum (``sigma_alpha``,
rad/s^2), held over each sample: ``w = G [a, alpha]`` with ``G`` the
ZOH-integrated input ``[[dt^2/2, 0], [dt, 0], [0, dt^2/2], [0, dt]]``. These two
numbers are the filter's tuning: larger trusts the encoders more (less lag,
more noise).

The gain is the steady-state one (scipy.linalg.solve_discrete_are on the dual
problem), computed once at start-up; per sample the filter is the fixed affine
map ``s <- F s + G_u u + L y`` with ``F = (I - L C) Ad``, ``G_u = (I - L C) Bd``,
evaluated with Python floats.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import solve_discrete_are

__all__ = ["KalmanGains", "SteadyStateKalman", "design_kalman"]

Vector4 = tuple[float, float, float, float]


@dataclass(frozen=True)
class KalmanGains:
    """The filter's fixed matrices as nested tuples of floats (rows)."""

    f: tuple[Vector4, Vector4, Vector4, Vector4]
    g_u: Vector4
    l: tuple[tuple[float, float], tuple[float, float], tuple[float, float], tuple[float, float]]


def design_kalman(
    ad: np.ndarray,
    bd: np.ndarray,
    dt_s: float,
    cart_quantum_m: float,
    pendulum_quantum_rad: float,
    cart_accel_noise_mps2: float,
    pendulum_accel_noise_radps2: float,
    extra_noise_counts: float = 0.0,
) -> KalmanGains:
    """Steady-state gains for the model above (see the module docstring for the noise model)."""
    bd = np.asarray(bd, dtype=float).reshape(4)
    c = np.array([[1.0, 0.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]])
    per_count = 1.0 / 12.0 + extra_noise_counts**2
    r = np.diag([cart_quantum_m**2 * per_count, pendulum_quantum_rad**2 * per_count])
    g = np.array([[dt_s**2 / 2, 0.0], [dt_s, 0.0], [0.0, dt_s**2 / 2], [0.0, dt_s]])
    q = g @ np.diag([cart_accel_noise_mps2**2, pendulum_accel_noise_radps2**2]) @ g.T
    p = solve_discrete_are(ad.T, c.T, q, r)
    gain = p @ c.T @ np.linalg.inv(c @ p @ c.T + r)
    correction = np.eye(4) - gain @ c
    f = correction @ ad
    g_u = correction @ bd
    return KalmanGains(
        f=tuple(tuple(float(v) for v in row) for row in f),
        g_u=tuple(float(v) for v in g_u),
        l=tuple((float(row[0]), float(row[1])) for row in gain),
    )


class SteadyStateKalman:
    """Per-sample filter: measured ``x_m`` and wrapped ``theta_rad`` plus the applied drive in, state out."""

    __slots__ = ("_f", "_g", "_l", "_s")

    def __init__(self, gains: KalmanGains):
        self._f = gains.f
        self._g = gains.g_u
        self._l = gains.l
        self._s = (0.0, 0.0, 0.0, 0.0)

    def reset(self, state: Vector4) -> None:
        """Start from ``state`` (e.g. the filtered-difference estimate) so the output does not jump."""
        self._s = tuple(float(v) for v in state)

    def update(self, x_m: float, theta_rad: float, applied_drive: float) -> Vector4:
        """The state estimate after this sample's measurement; ``applied_drive`` held since the last one."""
        s0, s1, s2, s3 = self._s
        f0, f1, f2, f3 = self._f
        g0, g1, g2, g3 = self._g
        l0, l1, l2, l3 = self._l
        u = applied_drive
        s = (
            f0[0] * s0 + f0[1] * s1 + f0[2] * s2 + f0[3] * s3 + g0 * u + l0[0] * x_m + l0[1] * theta_rad,
            f1[0] * s0 + f1[1] * s1 + f1[2] * s2 + f1[3] * s3 + g1 * u + l1[0] * x_m + l1[1] * theta_rad,
            f2[0] * s0 + f2[1] * s1 + f2[2] * s2 + f2[3] * s3 + g2 * u + l2[0] * x_m + l2[1] * theta_rad,
            f3[0] * s0 + f3[1] * s1 + f3[2] * s2 + f3[3] * s3 + g3 * u + l3[0] * x_m + l3[1] * theta_rad,
        )
        self._s = s
        return s

    @property
    def state(self) -> Vector4:
        return self._s
