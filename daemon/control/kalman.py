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

    __slots__ = ("_m", "_s")

    def __init__(self, gains: KalmanGains):
        # All 28 coefficients in one flat tuple, row by row ([F | G_u | L]): one unpack per sample
        # instead of 28 subscripts.
        self._m = tuple(
            v for f_row, g, l_row in zip(gains.f, gains.g_u, gains.l) for v in (*f_row, g, *l_row)
        )
        self._s = (0.0, 0.0, 0.0, 0.0)

    def reset(self, state: Vector4) -> None:
        """Start from ``state`` (e.g. the filtered-difference estimate) so the output does not jump."""
        self._s = tuple(float(v) for v in state)

    def shift_x(self, offset_m: float) -> None:
        """Move the origin of the cart position by ``offset_m`` (homing) without disturbing the estimate.

        Exact because the model is translation invariant along the track: the cart position feeds
        no other state (the first column of ``Ad`` is ``[1, 0, 0, 0]``), so shifting the estimate
        and every later measurement by the same offset shifts every later estimate by it too.
        """
        s0, s1, s2, s3 = self._s
        self._s = (s0 + offset_m, s1, s2, s3)

    def update(self, x_m: float, theta_rad: float, applied_drive: float) -> Vector4:
        """The state estimate after this sample's measurement; ``applied_drive`` held since the last one."""
        s0, s1, s2, s3 = self._s
        (f00, f01, f02, f03, g0, l00, l01,
         f10, f11, f12, f13, g1, l10, l11,
         f20, f21, f22, f23, g2, l20, l21,
         f30, f31, f32, f33, g3, l30, l31) = self._m
        u = applied_drive
        s = (
            f00 * s0 + f01 * s1 + f02 * s2 + f03 * s3 + g0 * u + l00 * x_m + l01 * theta_rad,
            f10 * s0 + f11 * s1 + f12 * s2 + f13 * s3 + g1 * u + l10 * x_m + l11 * theta_rad,
            f20 * s0 + f21 * s1 + f22 * s2 + f23 * s3 + g2 * u + l20 * x_m + l21 * theta_rad,
            f30 * s0 + f31 * s1 + f32 * s2 + f33 * s3 + g3 * u + l30 * x_m + l31 * theta_rad,
        )
        self._s = s
        return s

    @property
    def state(self) -> Vector4:
        return self._s
