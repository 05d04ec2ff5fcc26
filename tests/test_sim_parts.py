"""Parts of the simulated rig on their own: sensors, fault schedule and line faults, clocks, pipe."""

from __future__ import annotations

import asyncio
import math
import statistics
import time

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.special import ellipk
from test_plant_simulation import FRICTIONLESS, pivot_inertia

import protocol as p
from sim_device.clocks import LockstepClock, RealTimeClock
from sim_device.faults import (
    DriverFault,
    FaultPlan,
    FaultSchedule,
    FaultyLine,
    Impulse,
    Reset,
    Stall,
)
from sim_device.plant import Plant
from sim_device.sensors import SensorParams, Sensors, wrap_i32
from sim_device.transports import InProcessPipe

DEMO_SENSORS = SensorParams(cart_counts_per_m=173852.0, pendulum_counts_per_rev=4096)

# ---- integration step --------------------------------------------------------------------------


def test_one_rk4_step_per_1_ms_sample_passes_the_plant_accuracy_checks():
    # The rig integrates a 1 kHz sample in a single RK4 step; the plant's own checks must hold
    # there too. Energy with friction off: relative drift < 1e-6 over 60 s. Period released
    # 150 degrees from hanging: T = 4 sqrt(J / (m g l)) K(k), k = sin(theta0 / 2), within 0.1 %
    # (L. D. Landau & E. M. Lifshitz, "Mechanics", 1976, sec. 11 problem 1).
    plant = Plant(FRICTIONLESS, (0.0, 0.2, math.pi - 2.5, 1.0), substeps=1)
    e0 = plant.total_energy()
    worst = 0.0
    for _ in range(60_000):
        plant.step(0.0, 1e-3)
        worst = max(worst, abs(plant.total_energy() - e0))
    assert worst / e0 < 1e-6

    release = math.radians(150.0)
    plant = Plant(FRICTIONLESS, (0.0, 0.0, math.pi - release, 0.0), substeps=1)
    plant.hold_cart(True)
    turns: list[float] = []  # times omega changes sign (the swing's extremes), interpolated
    t_s, omega = 0.0, 0.0
    plant.step(0.0, 1e-3)
    while len(turns) < 5:
        t_s += 1e-3
        previous, omega = omega, plant.state[3]
        plant.step(0.0, 1e-3)
        if previous * omega < 0.0:
            turns.append(t_s - 1e-3 * omega / (omega - previous))
    mgl = FRICTIONLESS.pendulum_mass_kg * FRICTIONLESS.gravity_mps2 * FRICTIONLESS.com_distance_m
    k = math.sin(release / 2)
    exact = 4 * math.sqrt(pivot_inertia(FRICTIONLESS) / mgl) * ellipk(k * k)
    assert (turns[4] - turns[0]) / 2 == pytest.approx(exact, rel=1e-3)


# ---- sensors ---------------------------------------------------------------------------------


@given(
    x_m=st.floats(-0.45, 0.45, allow_nan=False),
    theta_rad=st.floats(-20.0, 20.0, allow_nan=False),
)
def test_quantisation_error_is_at_most_half_a_count(x_m, theta_rad):
    cart, pendulum = Sensors(DEMO_SENSORS).encoder_counts(x_m, theta_rad)
    assert abs(cart - x_m * 173852.0) <= 0.5 + 1e-9
    assert abs(pendulum - (theta_rad - math.pi) * 4096 / (2 * math.pi)) <= 0.5 + 1e-9


def test_counts_follow_the_angle_convention():
    sensors = Sensors(DEMO_SENSORS)
    assert sensors.encoder_counts(0.0, math.pi) == (0, 0)  # powered up at the centre, hanging
    assert sensors.encoder_counts(0.1, math.pi / 2) == (17385, -1024)  # a quarter turn clockwise
    assert sensors.encoder_counts(-0.1, 3 * math.pi) == (-17385, 4096)  # one whole turn on


@given(st.integers(-(1 << 40), 1 << 40))
def test_counters_wrap_like_a_signed_32_bit_register(value):
    # numpy's int32 conversion is two's-complement truncation, as a C int32_t counter wraps.
    assert wrap_i32(value) == int(np.array(value, dtype=np.int64).astype(np.int32))


def test_readings_past_the_32_bit_range_wrap_like_the_counter_registers():
    # A miscount that carries a counter past 2^31 - 1 wraps it, as a C int32_t counter
    # wraps (two's complement; numpy's int32 conversion truncates the same way).
    def as_int32(value: int) -> int:
        return int(np.array(value, dtype=np.int64).astype(np.int32))

    sensors = Sensors(DEMO_SENSORS)
    sensors.glitch("cart", 0x7FFF_FFFF)
    assert sensors.encoder_counts(0.1, math.pi) == (as_int32(17385 + 0x7FFF_FFFF), 0)
    sensors.glitch("pendulum", -0x8000_0000)
    assert sensors.encoder_counts(0.0, math.pi / 2) == (0x7FFF_FFFF, as_int32(-1024 - 0x8000_0000))
    assert sensors.encoder_counts(-0.1, math.pi) == (as_int32(-17385 + 0x7FFF_FFFF), -0x8000_0000)


def test_noise_adds_to_the_quantisation_noise_variance():
    sigma = 2.0
    sensors = Sensors(SensorParams(173852.0, 4096, cart_noise_counts=sigma), seed=11)
    x_m = 0.0123456
    readings = [sensors.encoder_counts(x_m, math.pi)[0] - x_m * 173852.0 for _ in range(40000)]
    # Rounding to the nearest count adds uniform noise of variance 1/12 count^2 to the input's,
    # for an input spread over several counts (B. Widrow and I. Kollar, "Quantization Noise",
    # Cambridge University Press, 2008, ch. 4).
    assert statistics.pvariance(readings) == pytest.approx(sigma**2 + 1 / 12, rel=0.03)
    assert abs(statistics.fmean(readings)) < 0.05


def test_sensor_noise_and_jitter_repeat_for_a_seed():
    params = SensorParams(173852.0, 4096, cart_noise_counts=1.0, pendulum_noise_counts=1.0, jitter_us=30.0)

    def draws(seed: int) -> list:
        sensors = Sensors(params, seed)
        return [(sensors.encoder_counts(0.01, 3.0), sensors.sample_offset_us(1000)) for _ in range(200)]

    assert draws(1) == draws(1)
    assert draws(1) != draws(2)


def test_jitter_has_the_requested_spread_and_never_reorders_samples():
    sensors = Sensors(SensorParams(173852.0, 4096, jitter_us=50.0), seed=3)
    offsets = [sensors.sample_offset_us(2000) for _ in range(20000)]
    assert max(abs(o) for o in offsets) <= 500  # a quarter of the 2000 us period
    assert statistics.pstdev(offsets) == pytest.approx(50.0, rel=0.03)
    assert Sensors(DEMO_SENSORS).sample_offset_us(2000) == 0


@pytest.mark.parametrize(
    ("field", "value", "message"),
    [
        ("cart_counts_per_m", 0.0, "sensors.cart_counts_per_m must be > 0"),
        ("pendulum_counts_per_rev", 2, "sensors.pendulum_counts_per_rev must be >= 4"),
        ("jitter_us", -1.0, "sensors.jitter_us must be >= 0"),
    ],
)
def test_bad_sensor_parameters_are_named(field, value, message):
    values = {"cart_counts_per_m": 1000.0, "pendulum_counts_per_rev": 4096, field: value}
    with pytest.raises(ValueError, match=message):
        SensorParams(**values)


# ---- fault schedule and line faults ----------------------------------------------------------


def test_schedule_releases_events_in_time_order_once():
    schedule = FaultSchedule(FaultPlan(events=((0.5, Reset()), (0.2, Stall(10.0)), (0.2, DriverFault()))))
    schedule.add(0.3, Impulse(pendulum_ns=0.1))
    assert schedule.due(199_999) == []
    assert schedule.due(200_000) == [Stall(10.0), DriverFault()]  # ties in the order added
    assert schedule.due(400_000) == [Impulse(pendulum_ns=0.1)]
    assert schedule.due(10_000_000) == [Reset()]
    assert schedule.due(10_000_000) == [] and schedule.pending == 0


@pytest.mark.parametrize(
    ("plan", "message"),
    [
        ({"drop_rate": 1.5}, "faults.drop_rate must be a probability in \\[0, 1\\]"),
        ({"noisy_switch": "left"}, "faults.noisy_switch must be 'neg' or 'pos'"),
        ({"events": ((-1.0, Reset()),)}, "faults.events: time must be >= 0 s"),
    ],
)
def test_bad_fault_plans_are_named(plan, message):
    with pytest.raises(ValueError, match=message):
        FaultPlan(**plan)


class Recorder:
    """The far end of a link: keeps what was written."""

    def __init__(self) -> None:
        self.frames: list[bytes] = []
        self.tx_bytes_dropped = 0
        self.where = "recorder"

    def write(self, data: bytes) -> None:
        self.frames.append(data)


def test_faulty_line_drops_at_its_rate_and_garbles_one_byte():
    frame = p.encode(p.Telemetry(1, 2000, 5, -7, 0, 0, 0, 0.5, math.nan, math.nan, 0))
    inner = Recorder()
    line = FaultyLine(inner, drop_rate=0.1, corrupt_rate=0.2, seed=9)
    for _ in range(10000):
        line.write(frame)
    # Binomial(10000, 0.1): standard deviation 30; this seed lies well within 4 of them.
    assert abs(line.frames_dropped - 1000) < 120
    assert len(inner.frames) == 10000 - line.frames_dropped
    garbled = [f for f in inner.frames if f != frame]
    assert len(garbled) == line.frames_corrupted
    assert all(sum(a != b for a, b in zip(f, frame)) == 1 for f in garbled)
    decoder = p.FrameDecoder()
    accepted = [m for f in garbled for m in decoder.feed(b"\x00" + f)]
    assert accepted == []  # CRC-16 catches every single-byte error (Peterson and Brown, 1961)


# ---- clocks ----------------------------------------------------------------------------------


async def test_lockstep_takes_one_sample_per_command_then_free_runs_when_the_host_is_silent():
    loop = asyncio.get_running_loop()
    clock = LockstepClock(grace_s=0.02)
    samples: list[int] = []
    three_more = loop.create_future()

    def take_sample() -> None:
        samples.append(clock.free_run_spells)
        if len(samples) == 8 and not three_more.done():
            three_more.set_result(None)

    clock.start(loop, take_sample, 0.001)
    for _ in range(4):
        clock.command_received()
    assert samples == [0] * 5  # the first sample at start, then one per command
    await asyncio.wait_for(three_more, 10.0)  # nobody commands: the wall clock paces it
    assert len(samples) >= 8 and set(samples[5:]) == {1}  # one free-running spell
    clock.stop()
    taken = len(samples)
    clock.command_received()
    assert len(samples) == taken  # stopped: commands take no samples


async def test_real_time_clock_gives_up_catching_up_after_a_long_hold_up():
    loop = asyncio.get_running_loop()
    clock = RealTimeClock(max_catch_up=50)
    taken: list[int] = []
    done = loop.create_future()

    def take_sample() -> None:
        taken.append(clock.slips)
        if len(taken) == 3:
            time.sleep(0.2)  # the process is held up for 200 periods: beyond catching up
        if len(taken) == 10 and not done.done():
            done.set_result(None)

    clock.start(loop, take_sample, 0.001)
    await asyncio.wait_for(done, 10.0)
    clock.stop()
    assert taken[:3] == [0, 0, 0] and clock.slips == 1


# ---- in-process pipe -------------------------------------------------------------------------


async def test_pipe_delivers_in_order_and_keeps_bytes_for_an_end_not_yet_open():
    loop = asyncio.get_running_loop()
    pipe = InProcessPipe(burst=3)  # a small burst: delivery spans several loop callbacks
    received: list[bytes] = []
    echoed: list[bytes] = []
    all_echoed = loop.create_future()

    def on_device(data: bytes) -> None:
        echoed.append(data)
        if len(echoed) == 10:
            all_echoed.set_result(None)

    def on_host(data: bytes) -> None:
        received.append(data)
        pipe.host_end.write(data)  # answering from inside a delivery does not recurse

    pipe.device_end.open(loop, on_device)
    for index in range(10):
        pipe.device_end.write(bytes([index]))  # the host end is not open yet
    pipe.host_end.open(loop, on_host)
    await asyncio.wait_for(all_echoed, 5.0)
    assert received == echoed == [bytes([i]) for i in range(10)]
    pipe.host_end.close()
    pipe.device_end.write(b"lost")
    assert pipe.device_end.tx_bytes_dropped == 4
