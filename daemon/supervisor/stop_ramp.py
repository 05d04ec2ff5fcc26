"""The category 1 stop (IEC 60204-1): a cart velocity set-point ramped to zero at a fixed deceleration.

The ramp starts from the measured cart velocity so the set-point never jumps;
a cart velocity loop (in the control cycle) follows it. The stop is complete
once the ramp has reached zero and the measured speed is below the stopped
threshold; if the cart has still not stopped ``timeout_s`` after the ramp
ended, the stop is overdue and the drive must be switched off anyway.

The velocity loop (:class:`daemon.control.cart_loops.CartVelocityFollower`,
``a = (v_sp - v) / tau``) is built from the two constants below. Following a
ramp of deceleration ``a`` it would lag the set-point by ``tau`` in time, and on
the ramp's first samples ask for almost no deceleration: the drive would then
hold the cart's speed against friction and back-EMF, pushing it along its
motion. So the loop is handed the ramp's set-point ``tau`` ahead
(:meth:`StopRamp.follower_setpoint`): ``(v_sp(t + tau) - v) / tau`` is the
ramp's own deceleration from the very first sample, and the drive brakes from
the first command of the stop. The predictive stopping-distance interlock still
counts the lag ``tau`` (:func:`stop_lag_s`), a margin the stop now keeps. The
loop follows the raw cart velocity, the one the stop started from and judges
its end by, never a model-based estimate that a pendulum glitch can pull.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

#: Time constant of the velocity loop that follows the ramp.
FOLLOWER_TIME_CONSTANT_S = 0.05
#: The loop may ask for up to this multiple of the ramp's deceleration to catch up with it.
FOLLOWER_ACCEL_FACTOR = 2.0


def stop_lag_s(reaction_latency_s: float) -> float:
    """Time from a sample to the cart braking at the ramp's rate: reaction plus the loop's lag."""
    return reaction_latency_s + FOLLOWER_TIME_CONSTANT_S


@dataclass(frozen=True, slots=True)
class StopRamp:
    t0_s: float
    v0_mps: float
    decel_mps2: float
    stopped_speed_mps: float
    timeout_s: float

    @property
    def duration_s(self) -> float:
        """Time for the set-point to reach zero: |v0| / a."""
        return abs(self.v0_mps) / self.decel_mps2

    @property
    def distance_m(self) -> float:
        """Signed distance the set-point travels before it reaches zero: v0 |v0| / (2a)."""
        return self.v0_mps * abs(self.v0_mps) / (2.0 * self.decel_mps2)

    def velocity_setpoint(self, t_s: float) -> float:
        """The velocity set-point at ``t_s``: v0 reduced by a·t toward zero, never past it."""
        speed = abs(self.v0_mps) - self.decel_mps2 * max(0.0, t_s - self.t0_s)
        return math.copysign(speed, self.v0_mps) if speed > 0.0 else 0.0

    def follower_setpoint(self, t_s: float) -> float:
        """The set-point the velocity loop chases at ``t_s``: the ramp's, ``tau`` ahead (module docstring)."""
        return self.velocity_setpoint(t_s + FOLLOWER_TIME_CONSTANT_S)

    def complete(self, t_s: float, v_mps: float) -> bool:
        """True once the ramp has ended and the cart is measured as stopped."""
        return t_s - self.t0_s >= self.duration_s and abs(v_mps) < self.stopped_speed_mps

    def overdue(self, t_s: float) -> bool:
        """True when the cart has had ``timeout_s`` beyond the ramp's end to stop."""
        return t_s - self.t0_s > self.duration_s + self.timeout_s
