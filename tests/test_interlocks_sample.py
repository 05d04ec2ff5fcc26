"""Per-sample interlocks, link checks and the stop ramp, driven by a virtual clock."""

from __future__ import annotations

import math
from dataclasses import replace

import pytest
from hypothesis import given
from hypothesis import strategies as st
from scipy.integrate import quad

from daemon.config import demo_config_path, parse_config
from daemon.supervisor.interlocks import (
    Action,
    Checks,
    InterlockLimits,
    LinkErrorMonitor,
    SampleInterlocks,
    TokenBucket,
    link_timeout_trip,
    stopping_distance_m,
)
from daemon.supervisor.stop_ramp import StopRamp
from protocol.messages import F_DRIVER, F_ESTOP, F_RESET, SW_END_STOP, SW_ESTOP_BUTTON, SW_LIMIT_POS

ALL = Checks.TRACK | Checks.SWITCHES | Checks.MOTION | Checks.PENDULUM_RATE
NAN = math.nan
MPH = 0.44704  # m/s per mile per hour (exact, by definition of the international mile and hour)


def config(extra: str = ""):
    return parse_config(demo_config_path().read_text() + extra)


def interlocks(extra: str = "") -> SampleInterlocks:
    return SampleInterlocks(InterlockLimits.from_config(config(extra)))


def sample(il: SampleInterlocks, t_s=0.0, checks=ALL, x_m=0.0, v_mps=0.0, omega_radps=0.0, drive=0.0,
           switches=0, faults=0, supply_v=NAN):  # fmt: skip
    return il.check(t_s, checks, x_m, v_mps, omega_radps, drive, switches, faults, supply_v)


# --- track ------------------------------------------------------------------------------------


def test_soft_limit_is_half_the_track_less_switch_and_soft_insets():
    # Demo rig: 0.90 m track, switches 0.03 m in, default soft inset 0.06 m: 0.45 - 0.03 - 0.06.
    assert InterlockLimits.from_config(config()).soft_limit_m == pytest.approx(0.36)


@pytest.mark.parametrize(
    ("mph", "metres"),
    # UK Highway Code, rule 126, "typical stopping distances" table (figures from memory) (thinking + braking), rounded to
    # whole metres (within 1 m: the table's metres are its feet figures, rounded); it is built on 1 ft of thinking distance per mph and mph^2/20 ft of braking, i.e.
    # a reaction time of 0.3048/0.44704 s and a deceleration of 0.44704^2*20/(2*0.3048) m/s^2.
    [(20, 12), (30, 23), (40, 36), (50, 53), (60, 73), (70, 96)],
)
def test_stopping_distance_matches_the_highway_code_table(mph, metres):
    reaction_s = 0.3048 / MPH
    decel_mps2 = MPH**2 * 20 / (2 * 0.3048)
    assert stopping_distance_m(mph * MPH, decel_mps2, reaction_s) == pytest.approx(metres, abs=1.0)
    assert stopping_distance_m(-mph * MPH, decel_mps2, reaction_s) == pytest.approx(metres, abs=1.0)


STOP_AT_6 = "\n[stop]\ndecel_mps2 = 6.0\n"  # a stop of 6 m/s^2 on the demo rig (ours), for round figures


def test_predictive_check_trips_only_when_the_stop_would_not_fit_toward_the_limit():
    il = interlocks(STOP_AT_6)
    # The stop's 6 m/s^2, the demo's 10 ms reaction plus the stop loop's 50 ms lag: at
    # 1.2 m/s the stop needs 1.2 * 0.06 + 1.2^2 / 12 = 0.072 + 0.12 = 0.192 m.
    assert sample(il, x_m=0.16, v_mps=1.2) is None  # 0.20 m of room
    trip = sample(il, x_m=0.18, v_mps=1.2)  # 0.18 m of room
    assert (trip.name, trip.action) == ("track.stopping_distance", Action.CONTROLLED_STOP)
    assert trip.values["needed_m"] == pytest.approx(0.192)
    assert trip.values["room_m"] == pytest.approx(0.18)
    assert sample(il, x_m=0.18, v_mps=-1.2) is None  # moving away: 0.54 m of room
    assert sample(il, x_m=-0.18, v_mps=-1.2).name == "track.stopping_distance"


def test_predictive_check_brakes_at_the_stop_ramps_deceleration():
    # One setting: changing the stop's deceleration changes what the predictive check assumes.
    gentle = interlocks("\n[stop]\ndecel_mps2 = 3.0\n")
    assert gentle.limits.stop_decel_mps2 == 3.0
    # 1.2 * 0.06 + 1.44 / 6 = 0.312 m needed, 0.26 m of room.
    assert sample(gentle, x_m=0.10, v_mps=1.2).name == "track.stopping_distance"
    assert sample(interlocks(STOP_AT_6), x_m=0.10, v_mps=1.2) is None


def test_beyond_the_soft_limit_is_a_controlled_stop_and_names_the_position():
    trip = sample(interlocks(), x_m=-0.37)
    assert (trip.name, trip.action) == ("track.soft_limit", Action.CONTROLLED_STOP)
    assert trip.values["x_m"] == -0.37
    assert "-0.370 m" in trip.reason


DEMO_LIMITS = InterlockLimits.from_config(config())


@given(
    st.floats(-0.7, 0.7),
    st.floats(-6.0, 6.0),
    st.one_of(st.just(DEMO_LIMITS.soft_limit_m), st.floats(-0.1, 0.6), st.floats(0.0, 1e-12)),
    st.floats(0.5, 50.0),
    st.floats(0.0, 0.5),
    st.floats(0.1, 5.0),
)
def test_track_and_cart_speed_checks_trip_exactly_where_their_rules_say(
    x_m, v_mps, soft_limit_m, decel_mps2, lag_s, max_speed_mps
):
    # The rules as the issue states them, in order of the check: beyond the soft limit; the stop
    # (v lag + v^2 / 2a) not fitting in the room left toward the limit ahead; faster than the limit.
    # Limits are drawn too (a soft limit of zero or below included), since the check skips these
    # rules inside an envelope it works out from them.
    lim = replace(
        DEMO_LIMITS, soft_limit_m=soft_limit_m, stop_decel_mps2=decel_mps2, stop_lag_s=lag_s,
        max_cart_speed_mps=max_speed_mps,
    )
    room_m = lim.soft_limit_m - x_m if v_mps > 0 else lim.soft_limit_m + x_m
    expected = None
    if abs(x_m) > lim.soft_limit_m:
        expected = "track.soft_limit"
    elif v_mps != 0 and abs(v_mps) * lim.stop_lag_s + v_mps**2 / (2 * lim.stop_decel_mps2) > room_m:
        expected = "track.stopping_distance"
    elif abs(v_mps) > lim.max_cart_speed_mps:
        expected = "cart.overspeed"
    trip = sample(SampleInterlocks(lim), x_m=x_m, v_mps=v_mps)
    assert (trip.name if trip else None) == expected


@pytest.mark.parametrize(
    ("soft_limit_m", "v_mps", "expected"),
    [(-0.04, 0.0, "track.soft_limit"), (0.0, 0.01, "track.stopping_distance"), (0.0, 0.0, None)],
)
def test_with_no_room_inside_the_soft_limits_the_cart_at_the_centre_is_not_calm(soft_limit_m, v_mps, expected):
    # A track too short for its insets: the soft limits meet (or cross) at the centre.
    trip = sample(SampleInterlocks(replace(DEMO_LIMITS, soft_limit_m=soft_limit_m)), x_m=0.0, v_mps=v_mps)
    assert (trip.name if trip else None) == expected


def test_the_calm_envelope_holds_a_balance_run_and_ends_where_the_stop_still_fits_twice():
    il = interlocks(STOP_AT_6)
    assert il.calm_x_m == pytest.approx(0.18)  # half the demo rig's 0.36 m soft limit
    # 0.06 s lag, 6 m/s^2: v * 0.06 + v^2 / 12 = 0.09 m (a quarter of the soft limit)
    assert il.calm_v_mps * 0.06 + il.calm_v_mps**2 / 12 == pytest.approx(0.09)
    assert sample(il, x_m=il.calm_x_m, v_mps=il.calm_v_mps) is None
    assert sample(il, x_m=-il.calm_x_m, v_mps=-il.calm_v_mps) is None


def test_limit_switch_and_end_stop_switch_the_drive_off():
    il = interlocks()
    assert sample(il, switches=SW_LIMIT_POS).action is Action.DRIVE_OFF
    assert "positive limit switch" in sample(il, switches=SW_LIMIT_POS).reason
    # Homing runs onto the switches, so they are masked there; the hard end stop never is.
    assert sample(il, checks=Checks.MOTION, switches=SW_LIMIT_POS) is None
    assert sample(il, checks=Checks.NONE, switches=SW_END_STOP).name == "track.end_stop"


def test_the_most_severe_action_wins_when_several_trip_at_once():
    il = interlocks()
    # Past the soft limit (controlled stop), overspeed (controlled stop) and on the switch (drive off).
    trip = sample(il, x_m=0.40, v_mps=2.0, switches=SW_LIMIT_POS)
    assert trip.action is Action.DRIVE_OFF
    assert trip.name == "track.limit_switch"


# --- speed ------------------------------------------------------------------------------------


def test_cart_overspeed_trips_above_the_limit_only():
    il = interlocks()
    assert sample(il, v_mps=-1.5, checks=Checks.MOTION) is None
    trip = sample(il, v_mps=-1.51, checks=Checks.MOTION)
    assert (trip.name, trip.values["v_mps"]) == ("cart.overspeed", -1.51)


def test_pendulum_rate_is_not_checked_during_swing_up():
    il = interlocks()
    fast = math.radians(1300.0)
    assert (
        sample(il, omega_radps=fast, checks=Checks.TRACK | Checks.SWITCHES | Checks.MOTION) is None
    )
    assert sample(il, omega_radps=fast).name == "pendulum.overspeed"


# --- drive ------------------------------------------------------------------------------------


def test_saturation_trips_only_once_sustained_beyond_the_configured_time():
    il = interlocks()  # demo: 12 V limit, 0.98 -> 11.76 V, 1.0 s
    t = 0.0
    while t <= 1.0:
        assert sample(il, t_s=t, v_mps=0.5, drive=12.0) is None, t
        t += 0.002
    trip = sample(il, t_s=1.004, v_mps=0.5, drive=-12.0)
    assert (trip.name, trip.action) == ("drive.saturation", Action.CONTROLLED_STOP)
    assert trip.values["held_s"] == pytest.approx(1.004)


def test_one_unsaturated_sample_restarts_the_saturation_timer():
    il = interlocks()
    assert sample(il, t_s=0.0, v_mps=0.5, drive=12.0) is None
    assert sample(il, t_s=0.9, v_mps=0.5, drive=5.0) is None
    assert sample(il, t_s=1.5, v_mps=0.5, drive=12.0) is None
    assert sample(il, t_s=2.6, v_mps=0.5, drive=12.0).name == "drive.saturation"


def test_sustained_drive_with_no_cart_motion_switches_the_drive_off():
    il = interlocks()  # demo: 6 V (half the limit) with |v| < 5 mm/s for 0.5 s
    assert sample(il, t_s=0.0, drive=7.0, v_mps=0.001) is None
    assert sample(il, t_s=0.5, drive=7.0, v_mps=0.001) is None
    trip = sample(il, t_s=0.502, drive=7.0, v_mps=0.001)
    assert (trip.name, trip.action) == ("drive.plausibility", Action.DRIVE_OFF)
    il.reset_timers()
    assert sample(il, t_s=0.504, drive=7.0, v_mps=0.001) is None
    assert sample(il, t_s=2.0, drive=7.0, v_mps=0.3) is None  # moving: plausible


def test_supply_range_is_checked_only_where_reported():
    il = interlocks("\n[interlocks]\nsupply_min_v = 10.5\nsupply_max_v = 13.5\n")
    assert sample(il, supply_v=NAN) is None
    assert sample(il, supply_v=12.0) is None
    trip = sample(il, supply_v=9.8)
    assert (trip.name, trip.action, trip.values["supply_v"]) == (
        "drive.supply",
        Action.DRIVE_OFF,
        9.8,
    )
    assert sample(il, supply_v=14.0).name == "drive.supply"
    assert sample(interlocks(), supply_v=3.0) is None  # no range configured


def test_supply_range_must_be_ordered():
    with pytest.raises(Exception, match="interlocks: supply_min_v .* must be below supply_max_v"):
        config("\n[interlocks]\nsupply_min_v = 14\nsupply_max_v = 13\n")


def test_device_flags_trip_in_every_state_driver_fault_before_the_power_up_flag():
    # F_RESET stays latched from power-up until an operator reset: a fault the rig reports while
    # it is held must still be the one acted on (and shown).
    il = interlocks()
    assert sample(il, checks=Checks.NONE, faults=F_DRIVER).name == "device.driver"
    assert sample(il, checks=Checks.NONE, faults=F_DRIVER | F_RESET).name == "device.driver"
    assert sample(il, checks=Checks.NONE, faults=F_RESET).name == "device.reset"


# --- e-stop button ----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("category", "action"), [(0, Action.DRIVE_OFF), (1, Action.CONTROLLED_STOP)]
)
@pytest.mark.parametrize(("switches", "faults"), [(SW_ESTOP_BUTTON, 0), (0, F_ESTOP)])
def test_rig_button_is_an_estop_with_the_configured_stop_category(
    category, action, switches, faults
):
    # IEC 60204-1:2016, 9.2.2: category 0 removes power at once; category 1 stops under power, then removes it.
    il = interlocks(f"\n[stop]\ncategory = {category}\n")
    trip = sample(il, checks=Checks.NONE, switches=switches, faults=faults | F_DRIVER)
    assert (trip.name, trip.estop, trip.action) == ("estop.button", True, action)


# --- link -------------------------------------------------------------------------------------


def test_link_timeout_after_the_configured_milliseconds():
    limits = InterlockLimits.from_config(config())  # the default 30 ms, at 500 Hz
    assert link_timeout_trip(10.030, 10.0, limits.link_timeout_s, limits) is None
    trip = link_timeout_trip(10.032, 10.0, limits.link_timeout_s, limits)
    assert (trip.name, trip.action) == ("link.timeout", Action.DRIVE_OFF)
    assert "32.0 ms (16.0 sample periods)" in trip.reason


def test_token_bucket_allows_the_burst_and_the_rate_but_not_more():
    # Worked by hand from the token-bucket rule (RFC 2697, committed burst size and rate).
    bucket = TokenBucket(rate_per_s=5.0, burst=10)
    assert not bucket.add(0.0, 10)
    assert bucket.add(0.0, 1)
    steady = TokenBucket(rate_per_s=5.0, burst=10)
    assert not any(steady.add(i * 0.25, 1) for i in range(4000))  # 4 per second for 1000 s
    fast = TokenBucket(rate_per_s=5.0, burst=10)
    # 6 per second: the level grows by 1 per second, so it passes 10 about 10 s in.
    first = next(i / 6 for i in range(1000) if fast.add(i / 6, 1))
    assert 9.0 < first < 11.0


def test_gaps_and_crc_failures_above_their_rates_trip_from_the_cumulative_counters():
    monitor = LinkErrorMonitor(config())  # 5/s, burst 10
    assert monitor.note_counters(0.0, gaps_total=10, crc_failures_total=0) is None
    trip = monitor.note_counters(0.001, gaps_total=12, crc_failures_total=0)
    assert (trip.name, trip.action) == ("link.gaps", Action.DRIVE_OFF)
    monitor = LinkErrorMonitor(config())
    assert monitor.note_counters(0.0, gaps_total=0, crc_failures_total=4) is None
    assert (
        monitor.note_counters(2.0, gaps_total=0, crc_failures_total=14) is None
    )  # drained 10 in 2 s
    assert monitor.note_counters(2.0, gaps_total=0, crc_failures_total=25).name == "link.crc"


def test_overruns_on_more_than_the_allowed_share_of_samples_trip_a_controlled_stop():
    monitor = LinkErrorMonitor(config())  # 500 Hz: budget one period (2000 us), share 5 %
    assert all(monitor.note_cycle(i * 0.002, 1900.0) is None for i in range(1000))
    # Every overrun adds one to a bucket of 25 (5 % of 500) that drains 25 per second: a run of
    # overruns back to back fills it on the 27th (each sample drains 0.05 of the ones before).
    results = [monitor.note_cycle(2.0 + i * 0.002, 2500.0) for i in range(27)]
    assert results[:26] == [None] * 26
    assert (results[26].name, results[26].action) == ("loop.overrun", Action.CONTROLLED_STOP)


def test_occasional_overruns_below_the_allowed_share_never_trip():
    monitor = LinkErrorMonitor(config())
    # One sample in 25 late (4 %, a pre-empted desktop process) for ten seconds.
    late = [monitor.note_cycle(i * 0.002, 5000.0 if i % 25 == 0 else 50.0) for i in range(5000)]
    assert late == [None] * 5000


# --- stop ramp --------------------------------------------------------------------------------


def test_stop_ramp_starts_at_the_measured_velocity_and_reaches_zero_at_v_over_a():
    ramp = StopRamp(t0_s=2.0, v0_mps=-0.6, decel_mps2=3.0, stopped_speed_mps=0.01, timeout_s=1.0)
    assert ramp.velocity_setpoint(2.0) == -0.6
    assert ramp.velocity_setpoint(2.1) == pytest.approx(-0.3)
    assert ramp.duration_s == pytest.approx(0.2)
    assert ramp.velocity_setpoint(2.2 + 1e-9) == 0.0
    assert ramp.velocity_setpoint(5.0) == 0.0


def test_stop_ramp_distance_equals_the_integral_of_its_set_point():
    # Constant deceleration: s = v0^2 / (2a) (Halliday, Resnick & Walker, Fundamentals of Physics,
    # ch. 2, equations of motion with constant acceleration); checked by numerical integration.
    for v0 in (0.8, -1.3):
        ramp = StopRamp(0.0, v0, 2.5, 0.01, 1.0)
        integral, _ = quad(ramp.velocity_setpoint, 0.0, 2.0, points=[ramp.duration_s])
        assert ramp.distance_m == pytest.approx(integral, rel=1e-9)
        assert abs(ramp.distance_m) == pytest.approx(v0 * v0 / 5.0)


def test_stop_ramp_completes_only_after_the_ramp_and_once_the_cart_has_stopped():
    ramp = StopRamp(0.0, 0.3, 3.0, 0.01, 0.5)  # 0.1 s ramp
    assert not ramp.complete(0.05, 0.0)
    assert not ramp.complete(0.1, 0.02)
    assert ramp.complete(0.1, 0.005)
    assert not ramp.overdue(0.6)
    assert ramp.overdue(0.61)
