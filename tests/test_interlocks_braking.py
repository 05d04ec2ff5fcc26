"""The category 1 stop's deceleration: one setting, within what the demo rigs' drives deliver.

The predictive stopping-distance interlock assumes the cart brakes at
``stop.decel_mps2`` after ``reaction_latency_s`` plus the lag of the velocity
loop that follows the stop ramp. These checks hold that assumption against the
first-order lag's ramp response and against the plant model at the drive limit.
"""

from __future__ import annotations

import math
import tomllib

import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import differential_evolution
from test_daemon_support import KESTREL, WREN, write_rig_config

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
    config = load_config(rig)  # the deceleration derived from the drive
    params = plant_params(config)
    weakest, _state = weakest_braking_mps2(params, config.interlocks.max_cart_speed_mps)
    assert weakest * (1 - GRID_MARGIN) >= FOLLOWER_ACCEL_FACTOR * config.stop.decel_mps2
    assert stop_decel_problem(config, params) is None


def globally_weakest_braking_mps2(params, top_speed: float) -> float:
    """The least braking at the drive limit over the envelope the grid covers, by a global search.

    scipy's differential evolution (Storn and Price, "Differential Evolution", J. Global
    Optimization 11, 1997) over angle, rate as a share of the envelope's, and cart speed.
    """
    ml_g = params.pendulum_mass_kg * params.com_distance_m * params.gravity_mps2

    def braking(point):
        theta, share, v_mps = point
        rate = math.sqrt(2 * ml_g * (1 - math.cos(theta)) / params.pivot_inertia_kgm2) + math.radians(20.0)
        return -state_derivative(params, (0.0, v_mps, theta, share * rate), -params.drive.limit)[1]

    found = differential_evolution(
        braking, [(0.0, 2 * math.pi), (-1.0, 1.0), (1e-3, top_speed)], seed=1, tol=1e-10, polish=True
    )
    return float(found.fun)


@pytest.mark.parametrize("rig", [KESTREL, WREN], ids=["kestrel-1", "wren-2"])
def test_the_braking_grid_finds_the_weakest_state_a_global_search_finds(rig):
    # The grid's 2-degree steps may miss the exact minimum by a little, never by much, and never
    # report a state weaker than one that exists.
    config = load_config(rig)
    params = plant_params(config)
    top_speed = config.interlocks.max_cart_speed_mps
    found = globally_weakest_braking_mps2(params, top_speed)
    weakest, _state = weakest_braking_mps2(params, top_speed)
    # Overstating the drive is the unsafe direction: the grid may be above the search by no more
    # than the margin the check leaves.
    assert weakest * (1 - GRID_MARGIN) <= found
    assert weakest == pytest.approx(found, rel=0.05)


# Rigs that leave stop.decel_mps2 out: the two examples, Kestrel-1 started at a third of its drive
# limit (the README's advice for first runs), and a short track with a weak drive (our scenario).
SHORT_WEAK = {"length_m": "0.40", "limit": "3.0"}
DERIVED_RIGS = [(KESTREL, {}), (WREN, {}), (KESTREL, {"limit": "4.0"}), (KESTREL, SHORT_WEAK)]
DERIVED_IDS = ["kestrel-1", "wren-2", "kestrel-1-at-4V", "short-weak"]


@pytest.mark.parametrize(("rig", "edits"), DERIVED_RIGS, ids=DERIVED_IDS)
def test_left_out_the_deceleration_is_the_most_the_drive_surely_gives_the_stop(tmp_path, rig, edits):
    path = write_rig_config(tmp_path, rig, edits=edits)
    config = load_config(path)
    assert "decel_mps2" not in tomllib.loads(path.read_text()).get("stop", {})
    decel = config.stop.decel_mps2
    params = plant_params(config)
    found = globally_weakest_braking_mps2(params, config.interlocks.max_cart_speed_mps)
    # what the stop loop may ask for is within what the drive gives in the weakest state there is,
    # and not needlessly below it (the grid's margin and the rounding down to 0.01 aside)
    assert FOLLOWER_ACCEL_FACTOR * decel <= found
    assert FOLLOWER_ACCEL_FACTOR * decel >= 0.95 * found
    assert stop_decel_problem(config, params) is None
    assert config.derived[0].field == "stop.decel_mps2"
    assert config.derived[0].value == decel and "from the drive" in config.derived[0].source


def test_lowering_the_drive_limit_needs_no_new_deceleration(tmp_path, capsys):
    # The trial that found this: the README says to start at a low drive.limit, and the fixed
    # 6 m/s^2 of before got such a config refused until the owner found stop.decel_mps2.
    path = write_rig_config(tmp_path, KESTREL, edits={"limit": "4.0"})
    assert cli_main(["check-config", str(path)]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0] == f"{path}: ok (rig kestrel-1, 500 Hz, voltage drive)"
    decel = load_config(path).stop.decel_mps2
    assert out[1].startswith(f"  stop.decel_mps2 = {decel:g} m/s^2, derived from the drive: at drive.limit 4 ")


def test_on_a_long_track_the_derived_deceleration_is_what_the_track_needs(tmp_path):
    # A 2 m track: a stop from the overspeed limit fits in a quarter of the soft limit with far less
    # than the drive gives, so the stop is no harder than that.
    config = load_config(write_rig_config(tmp_path, KESTREL, edits={"length_m": "2.0"}))
    decel = config.stop.decel_mps2
    soft_m = 2.0 / 2 - 0.03 - 0.06  # half the track less the switch and soft-limit insets
    top_mps = config.interlocks.max_cart_speed_mps
    lag_s = config.interlocks.reaction_latency_s + FOLLOWER_TIME_CONSTANT_S
    # rounded down to 0.01 m/s^2: the stop needs a quarter of the soft limit, or a hair more
    assert stopping_distance_m(top_mps, decel, lag_s) >= soft_m / 4
    assert stopping_distance_m(top_mps, decel + 0.01, lag_s) < soft_m / 4
    drive_mps2 = weakest_braking_mps2(plant_params(config), top_mps)[0] * (1 - GRID_MARGIN) / FOLLOWER_ACCEL_FACTOR
    assert decel < drive_mps2
    assert config.derived[0].source.startswith("from the track: ")


def test_a_drive_that_cannot_brake_at_all_is_a_config_error_naming_the_field(tmp_path, capsys):
    path = write_rig_config(tmp_path, KESTREL, edits={"limit": "0.3"})
    assert cli_main(["check-config", str(path)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert len(err) == 1
    assert err[0].startswith(f"poise: {path}: stop.decel_mps2: at drive.limit this rig can hardly brake")


def test_an_explicit_deceleration_too_hard_for_the_drive_is_refused_naming_the_setting(tmp_path):
    weak = WREN.read_text().replace("limit = 10.0", "limit = 2.0", 1)
    assert weak != WREN.read_text() and "stop" not in tomllib.loads(weak)
    text = weak + "\n[stop]\ndecel_mps2 = 6.0\n"
    path = tmp_path / "weak.toml"
    path.write_text(text)
    config = parse_config(text)
    problem = stop_decel_problem(config, plant_params(config))
    assert problem is not None and problem.startswith("stop.decel_mps2: ")
    weakest, _state = weakest_braking_mps2(plant_params(config), config.interlocks.max_cart_speed_mps)
    suggested = float(problem.split("set it to at most ")[1].split(",")[0])
    assert suggested <= weakest * (1 - GRID_MARGIN) / FOLLOWER_ACCEL_FACTOR
    # the same config with the deceleration it suggests passes, and so does leaving it out
    lower = parse_config(weak + f"\n[stop]\ndecel_mps2 = {suggested}\n")
    assert stop_decel_problem(lower, plant_params(lower)) is None
    derived = parse_config(weak)
    assert derived.stop.decel_mps2 == suggested
    assert stop_decel_problem(derived, plant_params(derived)) is None
    # the command line refuses it in one line and exits 2
    assert cli_main(["check-config", str(path)]) == 2
    with pytest.raises(OperatorError, match=r"^stop\.decel_mps2: "):
        PoiseService(config, text, port_url="/dev/null", serve_api=False)
