"""Whether the drive can brake the cart as hard as the category 1 stop counts on.

The predictive stopping-distance interlock assumes the cart brakes at
``stop.decel_mps2``, and the velocity loop that follows the stop ramp may ask
for up to ``FOLLOWER_ACCEL_FACTOR`` times that to keep up with it
(:mod:`daemon.supervisor.stop_ramp`). With a drive too weak for that, the cart
stops later than the interlock predicted, perhaps against the end stop; so the
daemon refuses such a config before it connects, and ``poise check-config``
reports it.

What the drive gives is read off the plant model with the drive at its limit
against the motion, over the states a stop may start from: every pendulum
angle (2 degree steps), the pendulum still or turning either way as fast as a
pendulum with the upright energy plus 20 deg/s, and cart speeds from a crawl
up to the overspeed limit. A pendulum faster than that has more energy than
any mode gives it (swing-up aims at the upright energy): it has run away, and
the pendulum-rate interlock is there for it. The grid's 2 degree steps can miss
the exact minimum by a little (the test measures it against a global search),
so the drive is counted on for 2 % less than the grid finds.

When the config leaves ``stop.decel_mps2`` out, it is derived from the same
figures (:func:`derived_stop_decel`, called once as the config is loaded): the
most the drive can give the stop loop, rounded down to 0.01 m/s^2, but no more
than the track needs. The track needs a stop from the overspeed limit
(``interlocks.max_cart_speed_mps``) that takes at most a quarter of the way to
the soft limit: with that, the interlocks' calm envelope (half the soft limit,
speeds whose stop needs at most a quarter of it, see
:class:`daemon.supervisor.interlocks.SampleInterlocks`) covers every speed the
overspeed limit allows, and braking harder would only shake the rig. When the
reaction lag alone uses that quarter, no deceleration meets it and only the
drive bounds the stop.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from daemon.supervisor.stop_ramp import FOLLOWER_ACCEL_FACTOR, stop_lag_s
from sim_device.drive import drive_gains, effective_command
from sim_device.plant import PlantParams, acceleration_function

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

__all__ = [
    "GRID_MARGIN",
    "DriveBraking",
    "derived_stop_decel",
    "drive_braking",
    "stop_decel_problem",
    "track_stop_decel_mps2",
    "weakest_braking_mps2",
]

_EXTRA_RATE_RADPS = math.radians(20.0)
GRID_MARGIN = 0.02  # share of the grid's weakest braking not counted on


@functools.lru_cache(maxsize=64)
def weakest_braking_mps2(params: PlantParams, max_cart_speed_mps: float) -> tuple[float, tuple]:
    """The least deceleration at the drive limit over the states above, and the state it occurs in.

    Cached: a config is checked where it loads, where the daemon starts and in ``poise design``,
    and the plant parameters are frozen, so the same rig gives the same grid.
    """
    ml_g = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
    speeds = [v for v in (1e-3, 0.1, 0.5, 1.0) if v < max_cart_speed_mps] + [max_cart_speed_mps]
    accel = acceleration_function(params)  # built once: the grid has 2,700 states
    f_rest = drive_gains(params.drive)[0] * effective_command(params.drive, -params.drive.limit)
    weakest, where = math.inf, (0.0, 0.0, 0.0, 0.0)
    for degrees in range(0, 360, 2):
        theta = math.radians(degrees)
        sin_th, cos_th = math.sin(theta), math.cos(theta)
        rate = math.sqrt(2 * ml_g * (1 - cos_th) / params.pivot_inertia_kgm2) + _EXTRA_RATE_RADPS
        for omega in (-rate, 0.0, rate):
            for v_mps in speeds:
                braking = -accel(v_mps, sin_th, cos_th, omega, f_rest)[0]
                if braking < weakest:
                    weakest, where = braking, (0.0, v_mps, theta, omega)
    return weakest, where


@dataclass(frozen=True, slots=True)
class DriveBraking:
    """What the drive allows the stop: the weakest braking, where it occurs, and the ramp it can carry."""

    weakest_mps2: float
    state: tuple[float, float, float, float]
    most_mps2: float  # the largest stop.decel_mps2 that passes, rounded down to 0.01 (0 or less: none)

    def describe_state(self) -> str:
        _x, v_mps, theta, omega = self.state
        return (
            f"cart at {v_mps:g} m/s, pendulum {(math.degrees(theta) + 180.0) % 360.0 - 180.0:+.0f} deg "
            f"from upright turning {math.degrees(omega):+.0f} deg/s"
        )


def drive_braking(params: PlantParams, max_cart_speed_mps: float) -> DriveBraking:
    """The largest stop deceleration whose follower's demand the drive meets in every state of the grid."""
    weakest, state = weakest_braking_mps2(params, max_cart_speed_mps)
    usable = weakest * (1.0 - GRID_MARGIN)
    most_mps2 = math.floor(100.0 * usable / FOLLOWER_ACCEL_FACTOR) / 100.0  # rounded down: it must pass
    return DriveBraking(weakest, state, most_mps2)


def track_stop_decel_mps2(soft_limit_m: float, max_cart_speed_mps: float, lag_s: float) -> float:
    """The deceleration that stops the cart from the overspeed limit in a quarter of the soft limit.

    ``v lag + v^2 / (2 a) = soft / 4``; infinite when the lag alone takes the quarter.
    """
    braking_room_m = soft_limit_m / 4.0 - max_cart_speed_mps * lag_s
    if braking_room_m <= 0.0:
        return math.inf
    return max_cart_speed_mps**2 / (2.0 * braking_room_m)


def derived_stop_decel(config: PoiseConfig, params: PlantParams) -> tuple[float, str]:
    """``stop.decel_mps2`` for a config that leaves it out, and what it came from (for check-config and design).

    Raises ValueError (naming ``stop.decel_mps2``) when the drive can hardly brake at all.
    """
    top_mps = config.interlocks.max_cart_speed_mps
    drive = drive_braking(params, top_mps)
    if drive.most_mps2 <= 0.0:
        raise ValueError(_cannot_brake(drive))
    soft_m = config.soft_limit_m
    track_mps2 = track_stop_decel_mps2(soft_m, top_mps, stop_lag_s(config.interlocks.reaction_latency_s))
    brakes = (
        f"at drive.limit {config.drive.limit:g} it brakes at {drive.weakest_mps2:.2f} m/s^2 or more, "
        f"counted on less {GRID_MARGIN:.0%} and divided by the stop loop's factor {FOLLOWER_ACCEL_FACTOR:g}"
    )
    if track_mps2 < drive.most_mps2:
        value = max(0.01, math.floor(100.0 * track_mps2) / 100.0)
        return value, (
            f"from the track: a stop from {top_mps:g} m/s within a quarter of the soft limit ±{soft_m:.3f} m; "
            f"the drive would allow {drive.most_mps2:.2f}: {brakes}"
        )
    if math.isinf(track_mps2):
        bound = f"at {top_mps:g} m/s the reaction lag alone takes a quarter of the soft limit ±{soft_m:.3f} m"
    else:
        bound = f"it would take up to {track_mps2:.2f}"
    return drive.most_mps2, f"from the drive: {brakes}; no bound from the track: {bound}"


def _cannot_brake(drive: DriveBraking) -> str:
    return (
        f"stop.decel_mps2: at drive.limit this rig can hardly brake the cart in the worst case "
        f"({drive.weakest_mps2:.2f} m/s^2; {drive.describe_state()}): no stop deceleration can be "
        "counted on; raise drive.limit or fit a stronger drive"
    )


def stop_decel_problem(config: PoiseConfig, params: PlantParams) -> str | None:
    """One line naming ``stop.decel_mps2`` if the drive cannot give the stop what it may ask, else None."""
    decel = config.stop.decel_mps2
    asked = FOLLOWER_ACCEL_FACTOR * decel
    drive = drive_braking(params, config.interlocks.max_cart_speed_mps)
    if drive.weakest_mps2 * (1.0 - GRID_MARGIN) >= asked:
        return None
    if drive.most_mps2 <= 0.0:
        return _cannot_brake(drive)
    return (
        f"stop.decel_mps2: {decel:g} m/s^2 lets the stop loop ask for up to {asked:g} m/s^2, but at "
        f"drive.limit this rig brakes at only {drive.weakest_mps2:.2f} m/s^2 in the worst case "
        f"({drive.describe_state()}); set it to at most {drive.most_mps2:.2f}, leave it out to have it "
        "derived, or raise drive.limit"
    )
