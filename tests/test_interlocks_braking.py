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
from scipy.optimize import differential_evolution
from test_daemon_support import KESTREL, WREN

from daemon.cli import main as cli_main
from daemon.config import ConfigError, load_config, parse_config
from daemon.config.plant import plant_params
from daemon.control.stop_capability import GRID_MARGIN, stop_decel_problem, weakest_braking_mps2
from daemon.errors import OperatorError
from daemon.runtime.service import PoiseService
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
    config = load_config(rig)
    params = plant_params(config)
    weakest, _state = weakest_braking_mps2(params, config.interlocks.max_cart_speed_mps)
    assert weakest * (1 - GRID_MARGIN) >= FOLLOWER_ACCEL_FACTOR * config.stop.decel_mps2
    assert stop_decel_problem(config, params) is None


@pytest.mark.parametrize("rig", [KESTREL, WREN], ids=["kestrel-1", "wren-2"])
def test_the_braking_grid_finds_the_weakest_state_a_global_search_finds(rig):
    # An independent search of the same envelope: scipy's differential evolution (Storn and
    # Price, "Differential Evolution", J. Global Optimization 11, 1997) over angle, rate as a
    # share of the envelope's, and cart speed. The grid's 2-degree steps may miss the exact
    # minimum by a little, never by much, and never report a state weaker than one that exists.
    config = load_config(rig)
    params = plant_params(config)
    top_speed = config.interlocks.max_cart_speed_mps
    ml_g = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2

    def braking(point):
        theta, share, v_mps = point
        rate = math.sqrt(2 * ml_g * (1 - math.cos(theta)) / params.pivot_inertia_kgm2) + math.radians(20.0)
        return -state_derivative(params, (0.0, v_mps, theta, share * rate), -params.drive.limit)[1]

    found = differential_evolution(
        braking, [(0.0, 2 * math.pi), (-1.0, 1.0), (1e-3, top_speed)], seed=1, tol=1e-10, polish=True
    )
    weakest, _state = weakest_braking_mps2(params, top_speed)
    # Overstating the drive is the unsafe direction: the grid may be above the search by no more
    # than the margin the check leaves.
    assert weakest * (1 - GRID_MARGIN) <= found.fun
    assert weakest == pytest.approx(found.fun, rel=0.05)


def test_a_drive_too_weak_for_the_stop_is_refused_naming_the_setting(tmp_path):
    text = WREN.read_text().replace("limit = 10.0", "limit = 2.0", 1)
    assert text != WREN.read_text()
    path = tmp_path / "weak.toml"
    path.write_text(text)
    config = parse_config(text)
    problem = stop_decel_problem(config, plant_params(config))
    assert problem is not None and problem.startswith("stop.decel_mps2: ")
    weakest, _state = weakest_braking_mps2(plant_params(config), config.interlocks.max_cart_speed_mps)
    suggested = float(problem.split("set it to at most ")[1].split(",")[0])
    assert suggested <= weakest * (1 - GRID_MARGIN) / FOLLOWER_ACCEL_FACTOR
    # the same config with the deceleration it suggests passes
    assert "[stop]" not in text
    lower = parse_config(text + f"\n[stop]\ndecel_mps2 = {suggested}\n")
    assert stop_decel_problem(lower, plant_params(lower)) is None
    # the command line refuses it in one line and exits 2
    assert cli_main(["check-config", str(path)]) == 2
    with pytest.raises(OperatorError, match=r"^stop\.decel_mps2: "):
        PoiseService(config, text, port_url="/dev/null", serve_api=False)
