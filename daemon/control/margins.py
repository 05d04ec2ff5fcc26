"""Stability margins of a state-feedback loop broken at the plant input.

With ``u = -K x`` the loop transfer seen at the input is ``L = K (zI - Ad)^-1 Bd``
(discrete, ``z = exp(j w dt)`` on the unit circle) or ``L = K (sI - A)^-1 B``
(continuous, ``s = j w``); the closed loop's characteristic equation is
``1 + L = 0``. Evaluated on a dense frequency grid and refined by bisection:

- phase margin: ``180 deg - |arg L|`` at every frequency where ``|L| = 1``; the smallest.
- gain margins: where ``L`` crosses the negative real axis at ``-c``, scaling
  ``K`` by ``1/c`` puts a closed-loop pole on the stability boundary. The
  nearest such factor above 1 is the upper gain margin, the nearest below 1 the
  lower one (an open-loop unstable plant such as the inverted pendulum needs
  a minimum gain, so it has both).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["LoopMargins", "loop_margins"]


@dataclass(frozen=True)
class LoopMargins:
    phase_margin_deg: float  # inf if |L| never crosses 1
    phase_crossover_radps: float
    gain_margin_upper: float  # factor on K, inf if none
    gain_margin_lower: float  # factor on K, 0 if none

    @property
    def gain_margin_upper_db(self) -> float:
        return 20.0 * math.log10(self.gain_margin_upper) if math.isfinite(self.gain_margin_upper) else math.inf

    @property
    def gain_margin_lower_db(self) -> float:
        return 20.0 * math.log10(self.gain_margin_lower) if self.gain_margin_lower > 0.0 else -math.inf


def _loop(a: np.ndarray, b: np.ndarray, k: np.ndarray, points: np.ndarray) -> np.ndarray:
    n = a.shape[0]
    stack = points[:, None, None] * np.eye(n)[None, :, :] - a[None, :, :]
    rhs = np.broadcast_to(b.reshape(n, 1), (len(points), n, 1))
    x = np.linalg.solve(stack, rhs)[:, :, 0]
    return x @ k.reshape(n)


def loop_margins(a: np.ndarray, b: np.ndarray, k: np.ndarray, dt_s: float | None) -> LoopMargins:
    """Margins of ``L`` for ``(Ad, Bd)`` at period ``dt_s``, or for continuous ``(A, B)`` if ``dt_s`` is None."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float).reshape(-1)
    k = np.asarray(k, dtype=float).reshape(-1)

    if dt_s is None:
        w_grid = np.logspace(-3, 5, 8000)

        def point(w: np.ndarray) -> np.ndarray:
            return 1j * w
    else:
        w_grid = np.linspace(1e-4, math.pi / dt_s, 8000)

        def point(w: np.ndarray) -> np.ndarray:
            return np.exp(1j * w * dt_s)

    def loop_at(w: float) -> complex:
        return complex(_loop(a, b, k, point(np.array([w])))[0])

    def refine(f, lo: float, hi: float) -> float:
        f_lo = f(lo)
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            f_mid = f(mid)
            if (f_mid > 0.0) == (f_lo > 0.0):
                lo, f_lo = mid, f_mid
            else:
                hi = mid
        return 0.5 * (lo + hi)

    values = _loop(a, b, k, point(w_grid))
    magnitude = np.abs(values)
    phase_margin, crossover = math.inf, math.nan
    for i in np.nonzero(np.diff(np.sign(magnitude - 1.0)))[0]:
        w = refine(lambda f: abs(loop_at(f)) - 1.0, w_grid[i], w_grid[i + 1])
        margin = 180.0 - abs(math.degrees(np.angle(loop_at(w))))
        if margin < phase_margin:
            phase_margin, crossover = margin, w
    factors = []
    imag = values.imag
    for i in np.nonzero(np.diff(np.sign(imag)))[0]:
        w = refine(lambda f: loop_at(f).imag, w_grid[i], w_grid[i + 1])
        value = loop_at(w)
        if value.real < 0.0:
            factors.append(-1.0 / value.real)
    if dt_s is not None:
        nyquist = loop_at(math.pi / dt_s)
        if nyquist.real < 0.0:
            factors.append(-1.0 / nyquist.real)
    upper = min((f for f in factors if f > 1.0), default=math.inf)
    lower = max((f for f in factors if f < 1.0), default=0.0)
    return LoopMargins(phase_margin, crossover, upper, lower)
