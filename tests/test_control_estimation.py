"""Encoder scaling and unwrapping, velocity estimators, and their measured noise/lag trade-off."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from daemon.config import load_config
from daemon.control.encoders import EncoderScaling, wrap_angle
from daemon.control.kalman import SteadyStateKalman, design_kalman
from daemon.control.rig_setup import build_control_set
from daemon.control.velocity_filter import FilteredDifference
from sim_device.plant import Plant, cart_counts, pendulum_counts
from sim_device.sensors import SensorParams, Sensors, wrap_i32

KESTREL = "configs/kestrel-1.toml"


@given(st.floats(min_value=-1e4, max_value=1e4, allow_nan=False))
def test_wrapped_angle_is_in_half_open_interval_and_a_whole_number_of_turns_away(theta):
    wrapped = wrap_angle(theta)
    assert -math.pi < wrapped <= math.pi
    turns = (theta - wrapped) / (2 * math.pi)
    assert turns == pytest.approx(round(turns), abs=1e-9)


def test_wrap_angle_maps_minus_pi_to_pi():
    assert wrap_angle(-math.pi) == pytest.approx(math.pi)
    assert wrap_angle(3 * math.pi) == pytest.approx(math.pi)


def test_pendulum_angle_convention_hanging_is_pi_and_half_a_turn_is_upright():
    scaling = EncoderScaling(1000.0, 4096)
    assert scaling.update(0, 0)[1] == pytest.approx(math.pi)
    assert scaling.update(0, 2048)[1] == pytest.approx(2 * math.pi)
    assert wrap_angle(scaling.update(0, -2048)[1]) == pytest.approx(0.0)


@given(st.integers(min_value=-(2**31), max_value=2**31 - 1),
       st.lists(st.one_of(st.integers(min_value=-(2**20), max_value=2**20),  # typical steps
                          st.integers(min_value=-(2**31) + 1, max_value=2**31 - 1)),  # any valid one
                min_size=1, max_size=200))
def test_counter_unwrapping_follows_a_wrapping_32_bit_counter(start, steps):
    scaling = EncoderScaling(1.0, 4096, start, 0)  # one count per metre: x_m is the unwrapped count
    true = start
    for step in steps:
        true += step
        assert scaling.update(wrap_i32(true), 0)[0] == true


def test_pendulum_angle_survives_many_turns_and_counter_wrap_around():
    cpr = 1 << 24  # a fine encoder, so a few turns cross the signed 32-bit wrap at 128 turns
    theta0 = math.pi + 127.0 * 2 * math.pi
    first = wrap_i32(pendulum_counts(theta0, cpr))
    scaling = EncoderScaling(1000.0, cpr, 0, first)
    offset = theta0 - scaling.update(0, first)[1]  # the encoder powered up 127 turns away
    crossed = False
    for theta in np.linspace(theta0, theta0 + 4.5 * 2 * math.pi, 2000):
        counts = pendulum_counts(theta, cpr)
        crossed = crossed or counts != wrap_i32(counts)
        _x, measured = scaling.update(0, wrap_i32(counts))
        assert measured + offset == pytest.approx(theta, abs=2 * math.pi / cpr)
    assert crossed


def test_cart_position_is_measured_from_the_homed_centre():
    scaling = EncoderScaling(2000.0, 4096)
    scaling.update(1000, 0)
    scaling.set_centre_at(scaling.raw_x_m())
    assert scaling.update(1400, 0)[0] == pytest.approx(0.2)


def test_filtered_difference_lags_a_ramp_by_the_filter_time_constant_plus_half_a_sample():
    dt, fc, slope = 0.002, 20.0, 0.3
    filt = FilteredDifference(fc, dt)
    for k in range(2000):
        rate = filt.update(slope * k * dt)
    assert rate == pytest.approx(slope, rel=1e-9)
    # Steady-state ramp lag of the discrete first-order filter y += a (u - y): (1 - a)/a samples
    # (exact for the recursion, its continuous limit being 1/(2 pi fc)); the backward difference
    # adds half a sample (Franklin, Powell & Workman, "Digital Control of Dynamic Systems", 1998, ch. 6).
    alpha = 1.0 - math.exp(-2 * math.pi * fc * dt)
    lag_s = ((1 - alpha) / alpha + 0.5) * dt
    filt = FilteredDifference(fc, dt)
    for k in range(2000):
        rate = filt.update(0.5 * slope * (k * dt) ** 2)  # rate = slope t; estimate = slope (t - lag)
    assert rate == pytest.approx(slope * (1999 * dt - lag_s), rel=1e-6)


def test_steady_state_kalman_gain_is_the_limit_of_the_riccati_recursion():
    cs = build_control_set(load_config(KESTREL))
    d = cs.design
    gains = design_kalman(d.ad, d.bd, d.dt_s, 1e-5, 2 * math.pi / 4096, 2.0, 10.0)
    # Independent check: iterate the textbook covariance recursion to convergence
    # (Anderson & Moore, "Optimal Filtering", 1979, ch. 4).
    c = np.array([[1.0, 0, 0, 0], [0, 0, 1.0, 0]])
    r = np.diag([1e-10 / 12, (2 * math.pi / 4096) ** 2 / 12])
    g = np.array([[d.dt_s**2 / 2, 0], [d.dt_s, 0], [0, d.dt_s**2 / 2], [0, d.dt_s]])
    q = g @ np.diag([4.0, 100.0]) @ g.T
    p = np.eye(4)
    for _ in range(20000):
        gain = p @ c.T @ np.linalg.inv(c @ p @ c.T + r)
        p = d.ad @ (p - gain @ c @ p) @ d.ad.T + q
    gain = p @ c.T @ np.linalg.inv(c @ p @ c.T + r)
    assert np.array(gains.l) == pytest.approx(gain, rel=1e-6, abs=1e-9)


def test_kalman_filter_tracks_the_linear_model_exactly_without_noise():
    cs = build_control_set(load_config(KESTREL))
    d = cs.design
    kf = SteadyStateKalman(design_kalman(d.ad, d.bd, d.dt_s, 1e-5, 1e-3, 2.0, 10.0))
    s = np.array([0.01, 0.0, 0.02, 0.0])
    kf.reset(tuple(s))
    for k in range(500):
        u = math.sin(0.05 * k)
        s = d.ad @ s + d.bd.reshape(-1) * u
        est = kf.update(s[0], s[2], u)
    assert est == pytest.approx(tuple(s), abs=1e-12)


def lag_samples(estimate: np.ndarray, truth: np.ndarray, longest: int = 40) -> int:
    """Whole-sample shift of ``estimate`` that best matches ``truth`` (least squares)."""
    errors = [np.mean((estimate[shift:] - truth[: len(truth) - shift]) ** 2) for shift in range(longest)]
    return int(np.argmin(errors))


def test_noise_and_lag_figures():
    """Balance Kestrel-1 on the plant model with encoder noise; compare velocity estimators on one stream."""
    config = load_config(KESTREL)
    cs = build_control_set(config)
    rate = config.sampling.rate_hz
    dt = 1.0 / rate
    plant = Plant(cs.params, (0.0, 0.0, 0.0, 0.0), 2)
    sensors = Sensors(SensorParams(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev,
                                   0.5, 0.5), seed=3)
    scaling = EncoderScaling(config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev)
    d = cs.design
    kalman = SteadyStateKalman(design_kalman(d.ad, d.bd, dt, scaling.cart_quantum_m, scaling.pendulum_quantum_rad,
                                             config.estimator.kalman_cart_accel_noise_mps2,
                                             config.estimator.kalman_pendulum_accel_noise_radps2, 0.5))
    kalman.reset((0.0, 0.0, 0.0, 0.0))
    cutoffs = (None, 40.0, 15.0)
    filters = [(FilteredDifference(fc or 1e9, dt), FilteredDifference(fc or 1e9, dt)) for fc in cutoffs]
    for pair in filters:
        pair[0].reset(0.0)
        pair[1].reset(math.pi)
    scaling.update(*sensors.encoder_counts(0.0, 0.0))
    names = ["raw difference", "filtered difference 40 Hz", "filtered difference 15 Hz", "Kalman"]
    est_v = {n: [] for n in names}
    est_w = {n: [] for n in names}
    true_v, true_w = [], []
    pending = applied = 0.0
    steps = round(8.0 / dt)
    balance = cs.balance
    for k in range(steps):
        balance.set_point_m = 0.05 if (k * dt * 1.5) % 1.0 < 0.5 else -0.05
        plant.step(pending, dt)
        applied = pending
        x, v, th, w = plant.state
        xm, thm = scaling.update(*sensors.encoder_counts(x, th))
        for name, (fv, fw) in zip(names, filters, strict=False):
            est_v[name].append(fv.update(xm))
            est_w[name].append(fw.update(thm))
        s = kalman.update(xm, wrap_angle(thm), applied)
        est_v["Kalman"].append(s[1])
        est_w["Kalman"].append(s[3])
        true_v.append(v)
        true_w.append(w)
        pending = balance.update(*s)
    true_v, true_w = np.array(true_v[rate:]), np.array(true_w[rate:])
    figures = {}
    for name in names:
        ev, ew = np.array(est_v[name][rate:]), np.array(est_w[name][rate:])
        figures[name] = (
            float(np.sqrt(np.mean((ev - true_v) ** 2))), lag_samples(ev, true_v) * dt,
            float(np.sqrt(np.mean((ew - true_w) ** 2))), lag_samples(ew, true_w) * dt,
        )
    print("\nestimator                   cart v rms   lag     pendulum w rms   lag")
    for name, (v_rms, v_lag, w_rms, w_lag) in figures.items():
        print(f"{name:26s} {v_rms * 1e3:7.2f} mm/s {v_lag * 1e3:5.1f} ms {w_rms:8.3f} rad/s {w_lag * 1e3:5.1f} ms")
    raw, f40, f15, kal = (figures[n] for n in names)
    # the trade-off: a lower cutoff is quieter on the pendulum but lags more; the Kalman filter beats both
    assert f15[2] < f40[2] < raw[2]
    assert f15[3] > f40[3] > raw[3]
    assert kal[0] < f40[0] and kal[2] < f40[2]
    assert kal[1] <= f40[1] and kal[3] <= f40[3]


def test_homing_offset_moves_the_origin_without_a_velocity_spike():
    config = load_config(KESTREL)
    cs = build_control_set(config)
    estimator = cs.estimator
    estimator.reset(1000, 0)
    for k in range(1, 200):
        state = estimator.update(1000 + 20 * k, 0, 0.0)  # steady motion, 20 counts per sample
    speed = state[1]
    estimator.scaling.set_centre_at(estimator.scaling.raw_x_m())
    x, v, _th, _w = estimator.update(1000 + 20 * 200, 0, 0.0)
    assert x == pytest.approx(20 / config.encoders.cart_counts_per_m, abs=1e-12)
    assert v == pytest.approx(speed, rel=1e-6)


def test_restarting_after_homing_far_from_the_centre_starts_at_rest():
    # As the cycle ends homing: the new centre is declared, then the estimator restarts from the
    # same readings in the new origin. A cart at rest must read at rest, not as having jumped by
    # the homing offset in one sample.
    config = load_config(KESTREL)
    estimator = build_control_set(config).estimator
    estimator.reset(52_000, 0)
    estimator.scaling.set_centre_at(estimator.scaling.raw_x_m())
    estimator.reset(52_000, 0)
    for _ in range(5):
        x, v, _th, _w = estimator.update(52_000, 0, 0.0)
        assert (x, v) == (0.0, 0.0)


def falling_through_the_kalman_region(drive: float, samples: int = 400):
    """Kestrel-1 on the plant model (no sensor noise), released 2 deg from upright with a constant
    drive: yields (kalman_active, true state, estimate) per sample while the pendulum falls out
    of the Kalman filter's region."""
    config = load_config(KESTREL)
    cs = build_control_set(config)
    per_m, per_rev = config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev
    dt = 1.0 / config.sampling.rate_hz
    plant = Plant(cs.params, (0.0, 0.0, math.radians(2.0), 0.0), 2)
    estimator = cs.estimator
    estimator.reset(cart_counts(0.0, per_m), pendulum_counts(math.radians(2.0), per_rev))
    for _ in range(samples):
        plant.step(drive, dt)
        x, _v, th, _w = plant.state
        estimate = estimator.update(cart_counts(x, per_m), pendulum_counts(th, per_rev), drive)
        yield estimator.kalman_active, plant.state, estimate


def test_leaving_the_kalman_region_hands_over_to_the_filtered_differences_without_a_jump():
    samples = list(falling_through_the_kalman_region(3.0))
    exit_k = next(k for k, (active, _s, _e) in enumerate(samples) if not active)
    assert exit_k > 100  # the pendulum fell out of the region after a while inside it
    for _active, (_x, v, _th, w), (_xe, ve, _the, we) in samples[exit_k - 10:exit_k + 20]:
        # one pendulum count per sample is 0.77 rad/s of raw difference; both estimators stay
        # well inside that on either side of the hand-over (tolerances common practice, no source)
        assert we == pytest.approx(w, abs=0.3)
        assert ve == pytest.approx(v, abs=0.01)


def test_homing_while_the_kalman_filter_runs_moves_the_origin_and_nothing_else():
    config = load_config(KESTREL)
    homed, plain = build_control_set(config).estimator, build_control_set(config).estimator
    per_m, per_rev = config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev
    readings = [(cart_counts(0.001 * k, per_m), pendulum_counts(0.01 * math.sin(0.1 * k), per_rev))
                for k in range(300)]
    for estimator in (homed, plain):
        estimator.reset(*readings[0])
    for k, (cart, pendulum) in enumerate(readings[1:], 1):
        if k == 100:
            homed.scaling.set_centre_at(-0.2)  # x_m = raw + 0.2 from here on
        a, b = homed.update(cart, pendulum, 1.0), plain.update(cart, pendulum, 1.0)
        assert homed.kalman_active and plain.kalman_active
        shift_m = -homed.scaling.cart_offset_counts * homed.scaling.cart_quantum_m  # 0.2 m to a count
        assert a[0] == pytest.approx(b[0] + shift_m, abs=1e-9)
        assert a[1:] == pytest.approx(b[1:], rel=1e-9, abs=1e-12)
