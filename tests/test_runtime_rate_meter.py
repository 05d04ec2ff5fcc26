"""The host's telemetry rate measurement against a device clock that counts from power-up.

PROTOCOL.md section 6 defines Telemetry.t_us as microseconds since the device's power-up, so a
rig switched on minutes before the host's Configure starts its stream at a large t_us; the rate
must come from deltas within the stream (an uptime clock is common practice, no source beyond
the protocol's own definition).
"""

from __future__ import annotations

from daemon.runtime.watchdog import RATE_WINDOW_S, RateMeter

UPTIME_S = 300.0  # powered up five minutes before Configure
RATE_HZ = 500


def test_first_window_starts_at_the_stream_not_at_rig_time_zero():
    meter = RateMeter()
    meter.restart()  # the watchdog's first ticks: no telemetry yet
    assert meter.observe(0.0, 1, UPTIME_S) is None  # first sample seen: the window opens
    samples = round(RATE_WINDOW_S * RATE_HZ)
    rate = meter.observe(RATE_WINDOW_S, 1 + samples, UPTIME_S + samples / RATE_HZ)
    assert rate is not None and abs(rate - RATE_HZ) < 1e-6 * RATE_HZ


def test_a_reconnect_opens_a_new_window():
    meter = RateMeter()
    meter.observe(0.0, 0, 10.0)
    meter.restart()  # link lost; the device reset, the cycle moved its epoch on
    assert meter.observe(1.0, 50, 400.0) is None
    rate = meter.observe(1.0 + RATE_WINDOW_S, 100, 400.1)
    assert rate is not None and abs(rate - 500.0) < 1e-6


def test_no_rate_before_a_full_window():
    meter = RateMeter()
    meter.observe(0.0, 0, 1.0)
    assert meter.observe(RATE_WINDOW_S / 2, 25, 1.05) is None
