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
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

from daemon.supervisor.stop_ramp import FOLLOWER_ACCEL_FACTOR
from sim_device.plant import PlantParams, state_derivative

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

__all__ = ["GRID_MARGIN", "stop_decel_problem", "weakest_braking_mps2"]

_EXTRA_RATE_RADPS = math.radians(20.0)
GRID_MARGIN = 0.02  # share of the grid's weakest braking not counted on


def weakest_braking_mps2(params: PlantParams, max_cart_speed_mps: float) -> tuple[float, tuple]:
    """The least deceleration at the drive limit over the states above, and the state it occurs in."""
    ml_g = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
    speeds = [v for v in (1e-3, 0.1, 0.5, 1.0) if v < max_cart_speed_mps] + [max_cart_speed_mps]
    weakest, where = math.inf, (0.0, 0.0, 0.0, 0.0)
    for degrees in range(0, 360, 2):
        theta = math.radians(degrees)
        rate = math.sqrt(2 * ml_g * (1 - math.cos(theta)) / params.pivot_inertia_kgm2) + _EXTRA_RATE_RADPS
        for omega in (-rate, 0.0, rate):
            for v_mps in speeds:
                state = (0.0, v_mps, theta, omega)
                braking = -state_derivative(params, state, -params.drive.limit)[1]
                if braking < weakest:
                    weakest, where = braking, state
    return weakest, where


def stop_decel_problem(config: PoiseConfig, params: PlantParams) -> str | None:
    """One line naming ``stop.decel_mps2`` if the drive cannot give the stop what it may ask, else None."""
    decel = config.stop.decel_mps2
    asked = FOLLOWER_ACCEL_FACTOR * decel
    weakest, (_x, v_mps, theta, omega) = weakest_braking_mps2(params, config.interlocks.max_cart_speed_mps)
    usable = weakest * (1.0 - GRID_MARGIN)
    if usable >= asked:
        return None
    state = (
        f"cart at {v_mps:g} m/s, pendulum {(math.degrees(theta) + 180.0) % 360.0 - 180.0:+.0f} deg "
        f"from upright turning "
        f"{math.degrees(omega):+.0f} deg/s"
    )
    most_mps2 = math.floor(100.0 * usable / FOLLOWER_ACCEL_FACTOR) / 100.0  # rounded down: it must pass
    if most_mps2 <= 0.0:
        return (
            f"stop.decel_mps2: at drive.limit this rig can hardly brake the cart in the worst case "
            f"({weakest:.2f} m/s^2; {state}): no stop deceleration can be counted on; raise drive.limit "
            "or fit a stronger drive"
        )
    return (
        f"stop.decel_mps2: {decel:g} m/s^2 lets the stop loop ask for up to {asked:g} m/s^2, but at "
        f"drive.limit this rig brakes at only {weakest:.2f} m/s^2 in the worst case ({state}); "
        f"set it to at most {most_mps2:.2f}, or raise drive.limit"
    )
