"""Linear-quadratic regulator design: continuous and discrete, with reference gain.

Conventions: the control law is ``u = -K x + Nbar r`` (the sign convention of
the Control Tutorials for MATLAB and Simulink inverted-pendulum pages), where
``r`` is the commanded cart position. Discretisation is zero-order hold (the
drive holds each command for one sample), computed with the matrix exponential
of the augmented matrix ``[[A, B], [0, 0]] * dt`` (Franklin, Powell & Workman,
"Digital Control of Dynamic Systems", 3rd ed. 1998, section 4.3).
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import expm, solve_continuous_are, solve_discrete_are

__all__ = [
    "augment_with_integrator",
    "continuous_lqr",
    "discrete_lqr",
    "discretise_zoh",
    "reference_gain",
]


def _as_column(b: np.ndarray) -> np.ndarray:
    b = np.asarray(b, dtype=float)
    return b.reshape(-1, 1) if b.ndim == 1 else b


def discretise_zoh(a: np.ndarray, b: np.ndarray, dt_s: float) -> tuple[np.ndarray, np.ndarray]:
    """``(Ad, Bd)`` of ``x[k+1] = Ad x[k] + Bd u[k]`` for ``u`` held over each ``dt_s``."""
    a = np.asarray(a, dtype=float)
    b = _as_column(b)
    n, m = a.shape[0], b.shape[1]
    block = np.zeros((n + m, n + m))
    block[:n, :n] = a
    block[:n, n:] = b
    phi = expm(block * dt_s)
    return phi[:n, :n], phi[:n, n:]


def continuous_lqr(a: np.ndarray, b: np.ndarray, q: np.ndarray, r: np.ndarray | float) -> np.ndarray:
    """Gain ``K`` (m x n) minimising the integral of ``x'Qx + u'Ru`` for ``dx/dt = Ax + Bu``."""
    b = _as_column(b)
    r = np.atleast_2d(np.asarray(r, dtype=float))
    p = solve_continuous_are(a, b, q, r)
    return np.linalg.solve(r, b.T @ p)


def discrete_lqr(ad: np.ndarray, bd: np.ndarray, q: np.ndarray, r: np.ndarray | float) -> np.ndarray:
    """Gain ``K`` (m x n) minimising the sum of ``x'Qx + u'Ru`` for ``x[k+1] = Ad x + Bd u``."""
    bd = _as_column(bd)
    r = np.atleast_2d(np.asarray(r, dtype=float))
    p = solve_discrete_are(ad, bd, q, r)
    return np.linalg.solve(r + bd.T @ p @ bd, bd.T @ p @ ad)


def reference_gain(
    a: np.ndarray, b: np.ndarray, k: np.ndarray, c: np.ndarray, discrete: bool
) -> float:
    """``Nbar`` so that ``u = -K x + Nbar r`` gives ``c x = r`` in steady state.

    Continuous: ``Nbar = -1 / (c (A - B K)^-1 B)``; discrete: ``Nbar = 1 / (c
    (I - Ad + Bd K)^-1 Bd)`` (Franklin, Powell & Emami-Naeini, "Feedback Control
    of Dynamic Systems", section 7.6).
    """
    b = _as_column(b)
    k = np.atleast_2d(k)
    c = np.atleast_2d(c)
    if discrete:
        dc_gain = c @ np.linalg.solve(np.eye(a.shape[0]) - a + b @ k, b)
    else:
        dc_gain = -c @ np.linalg.solve(a - b @ k, b)
    return float(1.0 / dc_gain[0, 0])


def augment_with_integrator(
    ad: np.ndarray, bd: np.ndarray, c: np.ndarray, dt_s: float
) -> tuple[np.ndarray, np.ndarray]:
    """Discrete model with one more state ``z[k+1] = z[k] + dt (c x[k])`` (integral of the output).

    An LQR on this model with a weight on ``z`` gives integral action on the
    output (the cart position), which removes the offset Coulomb friction and
    the drive's dead band would otherwise leave.
    """
    bd = _as_column(bd)
    c = np.atleast_2d(c)
    n = ad.shape[0]
    a_aug = np.zeros((n + 1, n + 1))
    a_aug[:n, :n] = ad
    a_aug[n, :n] = dt_s * c
    a_aug[n, n] = 1.0
    b_aug = np.vstack([bd, np.zeros((1, bd.shape[1]))])
    return a_aug, b_aug
