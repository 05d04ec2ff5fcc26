"""The category 1 stop's deceleration: one setting, within what the demo rigs' drives deliver.

The predictive stopping-distance interlock assumes the cart brakes at
``stop.decel_mps2`` after ``reaction_latency_s`` plus the lag of the velocity
loop that follows the stop ramp. These checks hold that assumption against the
first-order lag's ramp response and against the plant model at the drive limit.
"""

from __future__ import annotations

import math

import pytest
from scipy.integrate import solve_ivp
from test_daemon_support import KESTREL, WREN

from daemon.config import ConfigError, load_config, parse_config
from daemon.config.plant import plant_params
from daemon.supervisor.interlocks import stopping_distance_m
from daemon.supervisor.stop_ramp import FOLLOWER_ACCEL_FACTOR, FOLLOWER_TIME_CONSTANT_S, StopRamp
from sim_device.plant import state_derivative


def test_the_old_duplicate_braking_setting_is_gone():
    with pytest.raises(ConfigError, match="interlocks.braking_decel_mps2: unknown field"):
        parse_config(KESTREL.read_text() + "\n[interlocks]\nbraking_decel_mps2 = 8.0\n")


@pytest.mark.parametrize(("v0_mps", "decel_mps2"), [(1.2, 6.0), (-0.7, 6.0), (1.5, 3.0), (0.3, 12.0)])
def test_a_first_order_loop_following_the_ramp_stops_within_the_predicted_distance(v0_mps, decel_mps2):
    # A first-order lag tracking a ramp settles to a lag of tau behind it (Ogata, Modern Control
    # Engineering, 5th ed., 2010, section 5-3, unit-ramp response of first-order systems), so it
    # travels v0^2/(2a) + v0 tau in all: the interlock's distance with the loop's lag as reaction.
    tau = FOLLOWER_TIME_CONSTANT_S
    ramp = StopRamp(0.0, v0_mps, decel_mps2, 0.01, 1.0)

    def follow(t_s, state):
        return [state[1], (ramp.velocity_setpoint(t_s) - state[1]) / tau]

    end_s = ramp.duration_s + 40 * tau
    solution = solve_ivp(follow, (0.0, end_s), [0.0, v0_mps], max_step=tau / 20, rtol=1e-9, atol=1e-12)
    travelled_m = abs(solution.y[0, -1])
    predicted_m = stopping_distance_m(v0_mps, decel_mps2, tau)
    assert travelled_m == pytest.approx(predicted_m, rel=1e-4)
    # Its largest acceleration is the ramp's (approached from below), inside the loop's limit.
    peak = max(abs(follow(t, y)[1]) for t, y in zip(solution.t, solution.y.T, strict=True))
    assert peak <= decel_mps2 * (1 + 1e-6) < FOLLOWER_ACCEL_FACTOR * decel_mps2


@pytest.mark.parametrize("rig", [KESTREL, WREN], ids=["kestrel-1", "wren-2"])
def test_the_drive_at_its_limit_gives_the_stop_loop_all_it_may_ask_for(rig):
    # On the plant model, with the drive at its limit against the motion: every pendulum angle,
    # turning as fast as a pendulum with the upright energy plus 20 deg/s (faster only when it
    # runs away), and cart speeds up to the overspeed limit. The stop loop may ask for up to
    # FOLLOWER_ACCEL_FACTOR times the ramp's deceleration.
    config = load_config(rig)
    params = plant_params(config)
    ml_g = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2
    weakest = math.inf
    for degrees in range(0, 360, 2):
        theta = math.radians(degrees)
        rate = math.sqrt(2 * ml_g * (1 - math.cos(theta)) / params.pivot_inertia_kgm2)
        rate += math.radians(20.0)
        for omega in (-rate, 0.0, rate):
            for v_mps in (1e-3, 0.1, 0.5, 1.0, config.interlocks.max_cart_speed_mps):
                state = (0.0, v_mps, theta, omega)
                braking = -state_derivative(params, state, -params.drive.limit)[1]
                weakest = min(weakest, braking)
    assert weakest >= FOLLOWER_ACCEL_FACTOR * config.stop.decel_mps2
