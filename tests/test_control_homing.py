"""Homing on the plant model: switch to switch with a length check, or declare the centre without switches."""

import dataclasses
import math

import pytest

from daemon.config import load_config
from daemon.config.plant import plant_params
from daemon.control.encoders import EncoderScaling
from daemon.control.homing import Homing, HomingPhase
from daemon.control.velocity_filter import FilteredDifference
from protocol.messages import SW_LIMIT_NEG, SW_LIMIT_POS
from sim_device.plant import Plant
from sim_device.sensors import SensorParams, Sensors

RIGS = ["configs/kestrel-1.toml", "configs/wren-2.toml"]


def run_homing(config, params, start_x_m: float, switch_params=None, seconds: float = 60.0):
    """Home a simulated rig that powered up with the cart at ``start_x_m`` (encoder zero there)."""
    rate = config.sampling.rate_hz
    dt = 1.0 / rate
    plant = Plant(params, (start_x_m, 0.0, math.pi, 0.0), substeps=2)
    sensors = Sensors(SensorParams(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev))
    scaling = EncoderScaling(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev)
    switches_at = switch_params or params.track
    cart_rate, pendulum_rate = FilteredDifference(40.0, dt), FilteredDifference(40.0, dt)

    def read():
        x, _v, th, _w = plant.state
        cart, pendulum = sensors.encoder_counts(x - start_x_m, th)  # incremental: zero at power-up
        return scaling.update(cart, pendulum)

    raw, theta = read()
    cart_rate.reset(raw)
    pendulum_rate.reset(theta)
    homing = Homing(params, config.homing)
    homing.start(scaling.raw_x_m())
    pending = 0.0
    max_command = 0.0
    for _ in range(round(seconds / dt)):
        if homing.finished:
            break
        x = plant.state[0]
        trip = switches_at.length_m / 2 - switches_at.switch_inset_m
        flags = (SW_LIMIT_NEG if x <= -trip else 0) | (SW_LIMIT_POS if x >= trip else 0)
        raw, theta = read()
        command = homing.update(scaling.raw_x_m(), cart_rate.update(raw), theta, pendulum_rate.update(theta), flags)
        max_command = max(max_command, abs(command))
        plant.step(pending, dt)
        pending = command
    return homing, plant, start_x_m, max_command


@pytest.mark.parametrize("path", RIGS)
@pytest.mark.parametrize("start_x_m", [0.12, -0.05])
def test_homing_with_switches_finds_the_centre_and_checks_the_track_length(path, start_x_m):
    config = load_config(path)
    params = plant_params(config)
    homing, plant, start, max_command = run_homing(config, params, start_x_m)
    assert homing.phase is HomingPhase.DONE, homing.message
    expected = config.track.length_m - 2 * config.track.switch_inset_m
    assert homing.measured_travel_m == pytest.approx(expected, abs=config.homing.length_tolerance_m)
    # the centre in raw (power-up) coordinates is where the true track centre lies
    assert homing.centre_raw_m == pytest.approx(0.0 - start, abs=0.003)
    assert abs(plant.state[0]) < config.homing.centre_tolerance_m + 0.002
    assert max_command <= params.drive.limit


def test_homing_fails_clearly_when_the_track_is_shorter_than_configured():
    config = load_config(RIGS[0])
    params = plant_params(config)
    real_track = dataclasses.replace(params.track, switch_inset_m=params.track.switch_inset_m + 0.05)
    homing, _plant, _start, _max = run_homing(config, params, 0.0, switch_params=real_track)
    assert homing.phase is HomingPhase.FAILED
    assert homing.message.startswith("homing failed: measured switch-to-switch travel 0.740 m, config says 0.840 m")
    assert "homing.length_tolerance_m" in homing.message


def test_homing_fails_when_both_switches_are_closed():
    config = load_config(RIGS[0])
    homing = Homing(plant_params(config), config.homing)
    homing.start(0.0)
    assert homing.update(0.0, 0.0, math.pi, 0.0, SW_LIMIT_NEG | SW_LIMIT_POS) == 0.0
    assert homing.phase is HomingPhase.FAILED and "both limit switches" in homing.message


def test_homing_without_switches_declares_the_present_position_the_centre():
    config = load_config(RIGS[1])
    params = plant_params(config)
    params = dataclasses.replace(params, track=dataclasses.replace(params.track, has_limit_switches=False))
    homing = Homing(params, config.homing)
    homing.start(0.0731)
    assert homing.phase is HomingPhase.DONE
    assert homing.centre_raw_m == 0.0731
    assert homing.update(0.0731, 0.0, math.pi, 0.0, 0) == 0.0
