"""Interlock limits and the stop behaviour.

Rates of link errors and loop overruns are judged with a token bucket: each
event adds one, the bucket drains at ``*_rate_per_s`` and the interlock trips
when it holds more than the burst size. A steady trickle below the rate never
trips; a burst larger than the burst size trips at once.
"""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from daemon.config.base import Section


class InterlockSettings(Section):
    # Track
    soft_limit_inset_m: float = Field(
        default=0.06, ge=0.0, le=1.0, description="soft limits this far inside the switches"
    )
    # The predictive stopping-distance check brakes at stop.decel_mps2, the deceleration the
    # category 1 stop really applies (one setting, so a trip can always stop in the room it saw).
    reaction_latency_s: float = Field(
        default=0.01,
        ge=0.0,
        le=1.0,
        description="worst-case time from sample to braking, on top of the stop loop's own lag",
    )
    # Speed
    max_cart_speed_mps: float = Field(default=1.5, gt=0.0, le=20.0)
    max_pendulum_rate_dps: float = Field(
        default=1200.0, gt=0.0, le=20000.0, description="checked in every mode except swing-up"
    )
    # Drive
    saturation_fraction: float = Field(
        default=0.98,
        gt=0.0,
        le=1.0,
        description="|drive| at or above this share of drive.limit is saturated",
    )
    saturation_time_s: float = Field(
        default=1.0, gt=0.0, le=60.0, description="trip if saturated longer"
    )
    stall_drive_fraction: float = Field(
        default=0.5,
        gt=0.0,
        le=1.0,
        description="plausibility: drive at or above this share of drive.limit",
    )
    stall_speed_mps: float = Field(
        default=0.005, gt=0.0, le=1.0, description="plausibility: ...with cart speed below this"
    )
    stall_time_s: float = Field(
        default=0.5, gt=0.0, le=60.0, description="plausibility: ...for longer"
    )
    # Encoders: the glitch check allows each reading this much beyond its rounding to a count
    # (daemon/supervisor/encoder_checks.py derives the bounds from the plant).
    encoder_flicker_counts: float = Field(
        default=2.0,
        ge=0.0,
        le=1000.0,
        description="counts a reading may be off beyond quantisation (edge jitter, noise)",
    )
    supply_min_v: float | None = Field(
        default=None, ge=0.0, le=1000.0, description="unset: not checked"
    )
    supply_max_v: float | None = Field(
        default=None, gt=0.0, le=1000.0, description="unset: not checked"
    )
    # Link and loop
    # A silent host or link leaves the last drive command applied until a watchdog acts; the
    # config check (daemon/config/timeouts.py) refuses timeouts under which the cart, at
    # max_cart_speed_mps, could run past the room between the soft limits and the end stops.
    link_timeout_ms: float = Field(
        default=30.0,
        ge=1.0,
        le=5000.0,
        description="trip if no telemetry arrives for this long (at least 3 sample periods)",
    )
    loop_stall_ms: float = Field(
        default=30.0,
        ge=1.0,
        le=5000.0,
        description="trip if the daemon's event loop (and with it the control cycle) is held this long",
    )
    gap_rate_per_s: float = Field(
        default=5.0, gt=0.0, le=10000.0, description="sequence gaps tolerated per second"
    )
    crc_rate_per_s: float = Field(
        default=5.0, gt=0.0, le=10000.0, description="CRC failures tolerated per second"
    )
    link_error_burst: int = Field(
        default=10, ge=1, le=100000, description="bucket size for gaps and CRC failures"
    )
    # A cycle overruns when its command goes out later than the budget after its frame came in
    # (by default one sample period: the device would apply it a sample late). An ordinary
    # desktop kernel pre-empts the daemon now and then, so single overruns are expected; a
    # host that cannot keep up overruns on a large share of its samples.
    overrun_budget_us: float | None = Field(
        default=None,
        gt=0.0,
        le=1e6,
        description="a cycle (frame in to command out) longer than this overruns; unset: one sample period",
    )
    overrun_share: float = Field(
        default=0.05,
        gt=0.0,
        le=0.5,
        description="trip when more than this share of a second's samples overran",
    )

    # Pre-arm checks
    prearm_rate_tolerance: float = Field(
        default=0.05,
        gt=0.0,
        le=0.5,
        description="measured sample rate within this share of sampling.rate_hz",
    )
    prearm_hanging_tolerance_deg: float = Field(
        default=3.0,
        gt=0.0,
        le=45.0,
        description="pendulum this close to hanging before swing-up or excite",
    )
    prearm_still_rate_dps: float = Field(
        default=5.0, gt=0.0, le=360.0, description="...and turning slower than this"
    )

    @model_validator(mode="after")
    def _supply_range_ordered(self) -> InterlockSettings:
        low, high = self.supply_min_v, self.supply_max_v
        if low is not None and high is not None and low >= high:
            raise ValueError(f"supply_min_v ({low}) must be below supply_max_v ({high})")
        return self


class StopSettings(Section):
    category: Literal[0, 1] = Field(default=1, description="IEC 60204-1 stop category")
    # The category 1 ramp's deceleration, and the braking the predictive stopping-distance
    # interlock counts on. The velocity loop following the ramp may ask the drive for up to twice
    # this (daemon/supervisor/stop_ramp.py), so it must stay within what the drive gives at its
    # limit in every state. Left out, it is derived as the config is loaded (daemon/config/derived.py):
    # the most the drive surely gives, bounded by what the track needs; Kestrel-1 gets 18.57 m/s^2
    # (its drive brakes at 37.9 or more at 12 V) and Wren-2 7.84 (16.0 or more at 10 N). Given,
    # poise run, session and check-config refuse it if the drive cannot give it
    # (daemon/control/stop_capability.py, on the plant model).
    decel_mps2: float | None = Field(
        default=None,
        gt=0.0,
        le=100.0,
        description="category 1 stop deceleration; the stopping-distance interlock assumes it; "
        "derived from the drive and the track when left out",
    )
    stopped_speed_mps: float = Field(
        default=0.01, gt=0.0, le=1.0, description="the cart counts as stopped below this speed"
    )
    ramp_timeout_s: float = Field(
        default=1.0,
        ge=0.0,
        le=30.0,
        description="drive off if the cart has not stopped this long after the ramp ends",
    )
    after_fall: Literal["retry", "idle"] = Field(
        default="retry",
        description="after a fall: swing up again (up to catch.retries times) or go idle",
    )
