"""The encoder checks on their own, fed readings made here from known motion.

- The glitch bound is a true bound: no state the plant can be in (speeds up to
  the ones the bound allows for) accelerates it faster, checked on the plant's
  own equations (sim_device.plant.state_derivative, the one model of the rig).
- The fastest motion the plant can make, read through a quantising encoder with
  the allowed flicker, never trips it; a jump one count beyond it does.
- A cart encoder frozen under a constant force trips once the model cart has
  gone 1 mm, at the time ``x = a t^2 / 2`` gives for its acceleration
  (constant-acceleration kinematics; any mechanics textbook).
"""

from __future__ import annotations

import math
import random

import pytest
from test_daemon_support import KESTREL, WREN

from daemon.config import load_config
from daemon.config.plant import plant_params
from daemon.supervisor.encoder_checks import (
    CART_DEAD_DETECT_M,
    CART_FRICTION_MARGIN,
    SPEED_MARGIN,
    EncoderChecks,
    largest_accelerations,
)
from sim_device.plant import state_derivative


@pytest.mark.parametrize("path", [KESTREL, WREN], ids=["kestrel", "wren"])
def test_no_plant_state_accelerates_faster_than_the_glitch_bound(path):
    config = load_config(path)
    params = plant_params(config)
    v_max = SPEED_MARGIN * config.interlocks.max_cart_speed_mps
    w_max = math.radians(config.interlocks.max_pendulum_rate_dps)
    cart_a, pendulum_a = largest_accelerations(params, v_max, w_max)
    rng = random.Random(1)  # the same 20,000 states every run
    worst_cart = worst_pendulum = 0.0
    for _ in range(20_000):
        state = (0.0, rng.uniform(-v_max, v_max), rng.uniform(-math.pi, math.pi), rng.uniform(-w_max, w_max))
        command = rng.choice((-1.0, 1.0)) * params.drive.limit
        _v, a, _w, alpha = state_derivative(params, state, command)
        worst_cart, worst_pendulum = max(worst_cart, abs(a)), max(worst_pendulum, abs(alpha))
    assert worst_cart <= cart_a and worst_pendulum <= pendulum_a
    assert worst_cart > 0.5 * cart_a  # and the bound is not far off


def kestrel_checks() -> tuple[EncoderChecks, float, float, float]:
    config = load_config(KESTREL)
    checks = EncoderChecks.from_config(config)
    dt = checks.limits.dt_s
    q_th = 2.0 * math.pi / config.encoders.pendulum_counts_per_rev
    return checks, dt, q_th, config.interlocks.encoder_flicker_counts


def feed_pendulum(checks: EncoderChecks, dt: float, readings: list[float]) -> list:
    """Feed pendulum readings (radians) with the cart still; the trips, one per sample."""
    trips = []
    for k in range(1, len(readings)):
        omega = (readings[k] - readings[k - 1]) / dt
        trips.append(checks.check(k * dt, 0.0, readings[k], omega, 0.0))
    return trips


def test_the_fastest_pendulum_motion_with_flicker_passes_and_one_more_count_trips():
    checks, dt, q_th, flicker = kestrel_checks()
    alpha = checks.limits.pendulum_jump_radps / dt - (2.0 + 4.0 * flicker) * q_th / dt**2
    # The worst reading error pattern for a second difference: +e, -e, +e, with e = 1/2 + flicker counts.
    error = (0.5 + flicker) * q_th * 0.999
    truth = [math.pi + 0.5 * alpha * (k * dt) ** 2 for k in range(12)]
    readings = [theta + (error if k % 2 else -error) for k, theta in enumerate(truth)]
    assert not any(feed_pendulum(checks, dt, readings))
    checks.pause()
    still = [math.pi] * 6
    jump = checks.limits.pendulum_jump_radps * dt + q_th
    trips = feed_pendulum(checks, dt, [*still, *(theta + jump for theta in still)])
    # A step trips where it happens (and again as the rate falls back, the other half of the step).
    first = next(k for k, trip in enumerate(trips) if trip is not None)
    assert first == len(still) - 1 and trips[first].name == "encoder.pendulum_glitch"


def test_a_frozen_cart_reading_under_a_constant_force_trips_when_the_model_cart_has_gone_1_mm():
    # Wren-2: a force drive (no back-EMF), so from rest the model cart's acceleration is constant
    # while it is slow: a = J (F - 1.5 f_c - b v) / (Mt J - (m l)^2) with the pendulum hanging still.
    config = load_config(WREN)
    params = plant_params(config)
    checks = EncoderChecks.from_config(config)
    dt = checks.limits.dt_s
    force_n = 2.0
    command = force_n + params.drive.dead_band
    ml, jp, mt = params.pendulum_mass_kg * params.com_distance_m, params.pivot_inertia_kgm2, params.moving_mass_kg
    accel = jp * (force_n - CART_FRICTION_MARGIN * params.cart_coulomb_n) / (mt * jp - ml * ml)
    expected_s = math.sqrt(2.0 * CART_DEAD_DETECT_M / accel)
    tripped_s = None
    for k in range(1, 1000):
        trip = checks.check(k * dt, 0.0, math.pi, 0.0, command)
        if trip is not None:
            assert trip.name == "encoder.cart_dead"
            tripped_s = (k - 1) * dt  # the first sample only starts the episode
            break
    # Euler steps and the viscous term make it a little later than the formula; within 3 samples.
    assert tripped_s == pytest.approx(expected_s, abs=3 * dt)


def test_a_lost_sample_at_full_speed_is_no_glitch():
    # The cart at a steady 1.2 m/s, one Telemetry frame lost on the way: the estimator's raw rate
    # of the sample after the gap spans two periods over one period's time (2.4 m/s), and the
    # sample after that is back to 1.2 m/s. Neither is a miscount of the encoder.
    checks, dt, _q_th, _flicker = kestrel_checks()
    speed = 1.2
    times = [k * dt for k in range(1, 40) if k != 20]
    trips, last_x = [], 0.0
    for t in times:
        x = speed * t
        raw_v = (x - last_x) / dt  # what the estimator computes: one period, whatever has passed
        trips.append(checks.check(t, raw_v, math.pi, 0.0, 6.0))
        last_x = x
    assert trips == [None] * len(times)
    # And a real jump right after the gap is still caught, one sample later.
    checks.pause()
    trips = [checks.check(t, speed, math.pi, 0.0, 6.0) for t in times[:19]]
    trips += [checks.check(times[19], 2 * speed, math.pi, 0.0, 6.0)]  # the gap's span
    trips += [checks.check(times[20], speed, math.pi, 0.0, 6.0)]
    jump = checks.limits.cart_jump_mps + 0.1
    tripped = checks.check(times[21], speed + jump, math.pi, 0.0, 6.0)
    assert trips == [None] * 21 and tripped is not None and tripped.name == "encoder.cart_glitch"
