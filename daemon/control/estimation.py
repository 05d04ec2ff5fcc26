"""The daemon's state estimate each sample: counts in, ``(x_m, v_mps, theta_rad, omega_radps)`` out.

Positions come straight from the encoders (:mod:`daemon.control.encoders`);
theta is wrapped to (-pi, pi]. Velocities come from one of two estimators
(``estimator.velocity`` in the rig config):

``filtered_difference``
    finite difference through a first-order low-pass (:mod:`.velocity_filter`),
    valid everywhere (swing-up, homing, balance).
``kalman``
    the steady-state Kalman filter on the linear model about upright
    (:mod:`.kalman`), used while the pendulum is within ``kalman_region_deg``
    of upright, where that model holds; elsewhere the filtered difference is
    used. The two hand over without a jump in the estimate: the Kalman filter
    starts from the filtered-difference estimate each time the pendulum enters
    the region, and the filtered differences, idle while the Kalman filter runs
    (their results would be thrown away), restart from its rates, at the
    measured positions, on the sample the pendulum leaves it.

Noise/lag trade-off, measured on the plant model balancing with the LQR
(``tests/test_control_estimation.py::test_noise_and_lag_figures``, run with
``-s`` to print it; Kestrel-1, 500 Hz, 4096-count pendulum encoder, 173852
counts/m cart encoder, encoder noise 0.5 counts rms on top of quantisation, a
1.5 Hz square wave of ±5 cm on the cart set-point; rms error against the
plant's true velocity, which includes the error due to lag)::

    estimator                    cart v rms   lag      pendulum w rms   lag
    raw difference (no filter)    6.4 mm/s    0 ms       0.63 rad/s      0 ms
    filtered difference, 40 Hz   22.4 mm/s    4 ms       0.20 rad/s      4 ms
    filtered difference, 15 Hz   53.0 mm/s   10 ms       0.16 rad/s     10 ms
    Kalman (defaults)             2.1 mm/s    0 ms       0.04 rad/s      0 ms

(Lag: the shift that best aligns estimate and truth, in whole samples.) The
filtered difference buys noise reduction with lag ~``1/(2 pi fc)``; the Kalman
filter, knowing the drive and the dynamics, is both quieter and without lag
near upright, but only there.

Beside the estimate, every sample also gives the *raw* rates
(:attr:`StateEstimator.raw_v_mps`, :attr:`StateEstimator.raw_omega_radps`): the
plain difference of this sample's encoder positions and the last one's over
one sample period, with no model and no filter. The interlocks judge those, so
what stops the rig never depends on a model of it; the estimate feeds the
controllers only. Their noise is one count per period (2.9 mm/s for the demo
rig's cart at 500 Hz), far below any speed an interlock judges.
"""

from __future__ import annotations

import math

from daemon.control.encoders import TWO_PI, EncoderScaling, wrap_angle
from daemon.control.kalman import KalmanGains, SteadyStateKalman
from daemon.control.velocity_filter import FilteredDifference

__all__ = ["StateEstimator"]

State = tuple[float, float, float, float]

_PI = math.pi
_fmod = math.fmod
class StateEstimator:
    """Encoder readings and the applied drive to the state vector, once per sample.

    Exactly one velocity estimator runs each sample: the Kalman filter inside its region,
    the filtered differences outside it (see the module docstring for the hand-over).
    """

    __slots__ = (
        "_cart_rate",
        "_inv_dt",
        "_kalman",
        "_kalman_active",
        "_last_theta",
        "_last_x",
        "_offset_counts",
        "_pendulum_rate",
        "_region_rad",
        "raw_omega_radps",
        "raw_v_mps",
        "scaling",
    )

    def __init__(
        self,
        scaling: EncoderScaling,
        dt_s: float,
        cutoff_hz: float,
        kalman: KalmanGains | None = None,
        kalman_region_rad: float = math.radians(30.0),
    ):
        self.scaling = scaling
        self._cart_rate = FilteredDifference(cutoff_hz, dt_s)
        self._pendulum_rate = FilteredDifference(cutoff_hz, dt_s)
        self._kalman = SteadyStateKalman(kalman) if kalman is not None else None
        self._region_rad = kalman_region_rad if kalman is not None else 0.0  # 0: the region is empty
        self._kalman_active = False
        self._offset_counts = scaling.cart_offset_counts
        self._inv_dt = 1.0 / dt_s
        self._last_x = 0.0
        self._last_theta = math.pi
        self.raw_v_mps = 0.0
        self.raw_omega_radps = 0.0

    def reset(self, cart_reading: int, pendulum_reading: int,
              v_mps: float = 0.0, omega_radps: float = 0.0) -> State:
        """Start from these readings and rates (at rest unless given), in the scaling's present origin."""
        x_m, theta = self.scaling.update(cart_reading, pendulum_reading)
        self._offset_counts = self.scaling.cart_offset_counts  # x_m is already in this origin
        self._cart_rate.reset(x_m, v_mps)
        self._pendulum_rate.reset(theta, omega_radps)
        self._last_x = x_m
        self._last_theta = theta
        self.raw_v_mps = self.raw_omega_radps = 0.0
        self._kalman_active = False
        return x_m, v_mps, wrap_angle(theta), omega_radps

    def update(self, cart_reading: int, pendulum_reading: int, applied_drive: float) -> State:
        """This sample's state estimate; ``applied_drive`` is the drive held since the last sample."""
        scaling = self.scaling
        if scaling.cart_offset_counts != self._offset_counts:  # homed: new origin, same motion
            self._move_origin()
        x_m, theta = scaling.update(cart_reading, pendulum_reading)
        inv_dt = self._inv_dt
        self.raw_v_mps = (x_m - self._last_x) * inv_dt
        self.raw_omega_radps = (theta - self._last_theta) * inv_dt
        self._last_x = x_m
        self._last_theta = theta
        theta_w = _fmod(theta + _PI, TWO_PI)  # wrap_angle(theta), inlined: one call less per sample
        if theta_w <= 0.0:
            theta_w += TWO_PI
        theta_w -= _PI
        if self._kalman_active:
            state = self._kalman.update(x_m, theta_w, applied_drive)
            if abs(theta_w) < self._region_rad:
                return state
            # Leaving the region: the filtered differences take over from the Kalman filter's rates.
            self._kalman_active = False
            v, w = state[1], state[3]
            self._cart_rate.reset(x_m, v)
            self._pendulum_rate.reset(theta, w)
            return x_m, v, theta_w, w
        v = self._cart_rate.update(x_m)
        w = self._pendulum_rate.update(theta)
        if abs(theta_w) < self._region_rad:  # entering the region: the Kalman filter takes over here
            self._kalman.reset((x_m, v, theta_w, w))
            self._kalman_active = True
        return x_m, v, theta_w, w

    def _move_origin(self) -> None:
        """Follow a new homing offset: shift the running position filter, keep its rates."""
        scaling = self.scaling
        shift_m = (self._offset_counts - scaling.cart_offset_counts) * scaling.cart_quantum_m
        self._offset_counts = scaling.cart_offset_counts
        self._last_x += shift_m
        if self._kalman_active:
            self._kalman.shift_x(shift_m)
        else:
            self._cart_rate.shift(shift_m)

    @property
    def kalman_active(self) -> bool:
        return self._kalman_active
