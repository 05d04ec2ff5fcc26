"""Interlocks: the last word on every sample, as pure checks of measured values and time.

:meth:`SampleInterlocks.check` runs once per telemetry sample, after the
controller, on raw measurements. It returns ``None`` when nothing trips (the
common path: float comparisons only, no allocation) or the most severe
:class:`Trip`. Checks are evaluated from the most severe action down, so the
first trip found is the one to act on. The only state kept is the start time of
the two "sustained" conditions (saturation, stall); time is always passed in,
never read from a clock, so tests step a virtual clock.

Link health (telemetry timeout, sequence gaps, CRC failures, loop overruns) is
judged by :func:`link_timeout_trip` (called by the watchdog task) and
:class:`LinkErrorMonitor` (fed the link counters and cycle times).

Every trip carries the interlock's name, the action, a one-line reason and the
measured values, so the caller can latch it, zero the drive in the next command
frame and record the event.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from enum import IntEnum, IntFlag
from typing import TYPE_CHECKING

from daemon.supervisor.stop_ramp import stop_lag_s
from protocol.messages import (
    F_DRIVER,
    F_ESTOP,
    F_RESET,
    F_SUPPLY,
    F_WATCHDOG,
    SW_END_STOP,
    SW_ESTOP_BUTTON,
    SW_LIMIT_NEG,
    SW_LIMIT_POS,
)

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

INF = math.inf


class Action(IntEnum):
    """What an interlock asks for, ordered by severity: the larger value wins."""

    NONE = 0
    CONTROLLED_STOP = 1  # IEC 60204-1 stop category 1: decelerate under control, then off
    DRIVE_OFF = 2  # IEC 60204-1 stop category 0: drive off at once


class Checks(IntFlag):
    """Which groups of per-sample checks apply in the present state (flags always do)."""

    NONE = 0
    TRACK = 1  # soft limits and stopping distance (needs a homed position)
    SWITCHES = 2  # limit switches (homing runs onto them on purpose)
    MOTION = 4  # cart speed, saturation, stall plausibility
    PENDULUM_RATE = 8  # everywhere but swing-up
    ENCODERS = 16  # encoder glitches and dead encoders (daemon/supervisor/encoder_checks.py)


@dataclass(frozen=True, slots=True)
class Trip:
    """One interlock trip. ``estop`` marks the rig's own e-stop button (latches ESTOP, not FAULT)."""

    name: str
    action: Action
    reason: str
    values: dict[str, float]
    estop: bool = False


@dataclass(frozen=True, slots=True)
class InterlockLimits:
    """Limits precomputed from the config so the per-sample check does no lookups or unit conversion."""

    soft_limit_m: float
    stop_decel_mps2: float  # the category 1 stop's deceleration
    stop_lag_s: float  # sample to braking at that rate: reaction latency plus the stop loop's lag
    max_cart_speed_mps: float
    max_pendulum_rate_radps: float
    drive_limit: float
    saturation_drive: float
    saturation_time_s: float
    stall_drive: float
    stall_speed_mps: float
    stall_time_s: float
    supply_min_v: float  # -inf when not checked
    supply_max_v: float  # +inf when not checked
    estop_action: Action  # from the configured stop category
    link_timeout_s: float
    loop_stall_s: float
    sample_period_s: float
    overrun_budget_us: float

    @classmethod
    def from_config(cls, config: PoiseConfig) -> InterlockLimits:
        lim = config.interlocks
        period_s = 1.0 / config.sampling.rate_hz
        return cls(
            soft_limit_m=config.soft_limit_m,
            stop_decel_mps2=config.stop.decel_mps2,
            stop_lag_s=stop_lag_s(lim.reaction_latency_s),
            max_cart_speed_mps=lim.max_cart_speed_mps,
            max_pendulum_rate_radps=math.radians(lim.max_pendulum_rate_dps),
            drive_limit=config.drive.limit,
            saturation_drive=lim.saturation_fraction * config.drive.limit,
            saturation_time_s=lim.saturation_time_s,
            stall_drive=lim.stall_drive_fraction * config.drive.limit,
            stall_speed_mps=lim.stall_speed_mps,
            stall_time_s=lim.stall_time_s,
            supply_min_v=-INF if lim.supply_min_v is None else lim.supply_min_v,
            supply_max_v=INF if lim.supply_max_v is None else lim.supply_max_v,
            estop_action=Action.DRIVE_OFF if config.stop.category == 0 else Action.CONTROLLED_STOP,
            link_timeout_s=lim.link_timeout_ms / 1000.0,
            loop_stall_s=lim.loop_stall_ms / 1000.0,
            sample_period_s=period_s,
            overrun_budget_us=(
                period_s * 1e6 if lim.overrun_budget_us is None else lim.overrun_budget_us
            ),
        )


def stopping_distance_m(speed_mps: float, decel_mps2: float, reaction_s: float) -> float:
    """Distance to stop from ``speed_mps``: travel during the reaction time, then v^2/(2a)."""
    speed = abs(speed_mps)
    return speed * reaction_s + speed * speed / (2.0 * decel_mps2)


#: Device fault bits that mean the drive cannot be trusted, with the interlock name for each.
_DEVICE_FAULTS = (
    (F_DRIVER, "device.driver"),
    (F_SUPPLY, "device.supply"),
    (F_WATCHDOG, "device.watchdog"),
)
_ESTOP_BITS_SWITCHES = SW_ESTOP_BUTTON
_ESTOP_BITS_FAULTS = F_ESTOP
_LIMIT_SWITCHES = SW_LIMIT_NEG | SW_LIMIT_POS
# Plain ints for the hot path: IntFlag arithmetic costs microseconds per operation.
_TRACK = int(Checks.TRACK)
_SWITCHES = int(Checks.SWITCHES)
_MOTION = int(Checks.MOTION)
_PENDULUM_RATE = int(Checks.PENDULUM_RATE)


class SampleInterlocks:
    """The per-sample interlock check; holds only the start times of sustained conditions.

    The calm envelope (``calm_x_m``, ``calm_v_mps``, derived from the limits) is where the cart
    spends a balance run: within half the soft limit of the centre, at a speed below the
    overspeed limit from which the stop needs at most a quarter of the soft limit. Inside it no
    soft-limit, stopping-distance or overspeed check can trip, so :meth:`check` skips them
    there; outside it (or on NaN) it runs them all.
    """

    __slots__ = ("_saturated_since_s", "_stalled_since_s", "calm_v_mps", "calm_x_m", "limits")

    def __init__(self, limits: InterlockLimits):
        self.limits = limits
        self._saturated_since_s = INF
        self._stalled_since_s = INF
        room_m = limits.soft_limit_m
        if not room_m > 0.0:  # no room at all (or NaN): no envelope, every check runs
            self.calm_x_m = self.calm_v_mps = -1.0
            return
        self.calm_x_m = room_m / 2  # room toward either limit: at least room_m / 2
        # The speed whose stopping distance is room_m / 4: the positive root of
        # v lag + v^2 / (2 a) = room_m / 4, written without the cancellation of -b + sqrt(...).
        decel, lag = limits.stop_decel_mps2, limits.stop_lag_s
        denominator = lag + math.sqrt(lag * lag + room_m / (2.0 * decel))
        stop_fits_mps = (room_m / 2) / denominator if denominator > 0.0 else 0.0  # 0: room underflowed
        self.calm_v_mps = min(stop_fits_mps, limits.max_cart_speed_mps)

    def reset_timers(self) -> None:
        """Forget sustained conditions (call when a new controller takes over)."""
        self._saturated_since_s = INF
        self._stalled_since_s = INF

    def saturated_for_s(self, t_s: float) -> float:
        return max(0.0, t_s - self._saturated_since_s)

    def stalled_for_s(self, t_s: float) -> float:
        return max(0.0, t_s - self._stalled_since_s)

    def check(
        self,
        t_s: float,
        checks: int,
        x_m: float,
        v_mps: float,
        omega_radps: float,
        drive: float,
        switches: int,
        faults: int,
        supply_v: float,
    ) -> Trip | None:
        """The most severe trip for this sample, or ``None``.

        ``drive`` is the controller's requested command (before clamping);
        ``supply_v`` is NaN when the rig does not report it; ``checks`` is a
        :class:`Checks` mask for the present state.

        Written for the common case, as it runs every sample: the rig's flags are
        looked at only when one is set, and the track and cart-speed checks only
        outside the calm envelope (see the class docstring).
        """
        lim = self.limits
        motion = checks & _MOTION
        # Sustained conditions: update the start times first, whatever trips below.
        if motion:
            drive_abs = abs(drive)
            if drive_abs >= lim.saturation_drive:
                if self._saturated_since_s == INF:
                    self._saturated_since_s = t_s
            else:
                self._saturated_since_s = INF
            if drive_abs >= lim.stall_drive and abs(v_mps) < lim.stall_speed_mps:
                if self._stalled_since_s == INF:
                    self._stalled_since_s = t_s
            else:
                self._stalled_since_s = INF
        else:
            self._saturated_since_s = self._stalled_since_s = INF

        # Drive off at once.
        if switches or faults:
            trips = flag_trips(lim, checks, x_m, v_mps, switches, faults)
            if trips:
                return trips[0]
        if supply_v < lim.supply_min_v or supply_v > lim.supply_max_v:  # NaN (not reported): False
            return supply_trip(lim, supply_v)
        if t_s - self._stalled_since_s > lim.stall_time_s:
            return Trip(
                "drive.plausibility",
                Action.DRIVE_OFF,
                f"drive {drive:.2f} held {t_s - self._stalled_since_s:.2f} s with the cart not moving",
                {"drive": drive, "v_mps": v_mps, "held_s": t_s - self._stalled_since_s},
            )
        # Controlled stop.
        if not (abs(x_m) <= self.calm_x_m and abs(v_mps) <= self.calm_v_mps):
            trip = self._track_or_speed_trip(checks, x_m, v_mps)
            if trip is not None:
                return trip
        if motion and t_s - self._saturated_since_s > lim.saturation_time_s:
            return Trip(
                "drive.saturation",
                Action.CONTROLLED_STOP,
                f"drive saturated for {t_s - self._saturated_since_s:.2f} s",
                {
                    "drive": drive,
                    "held_s": t_s - self._saturated_since_s,
                    "limit_s": lim.saturation_time_s,
                },
            )
        if checks & _PENDULUM_RATE and abs(omega_radps) > lim.max_pendulum_rate_radps:
            return Trip(
                "pendulum.overspeed",
                Action.CONTROLLED_STOP,
                f"pendulum rate {math.degrees(abs(omega_radps)):.0f} deg/s above "
                f"{math.degrees(lim.max_pendulum_rate_radps):.0f} deg/s",
                {"omega_radps": omega_radps, "limit_radps": lim.max_pendulum_rate_radps},
            )
        return None

    def _track_or_speed_trip(self, checks: int, x_m: float, v_mps: float) -> Trip | None:
        """Soft limit, stopping distance (with ``Checks.TRACK``) and cart overspeed (``Checks.MOTION``)."""
        lim = self.limits
        if checks & _TRACK:
            soft_m = lim.soft_limit_m
            if abs(x_m) > soft_m:
                return Trip(
                    "track.soft_limit",
                    Action.CONTROLLED_STOP,
                    f"cart at {x_m:+.3f} m beyond the soft limit ±{soft_m:.3f} m",
                    {"x_m": x_m, "v_mps": v_mps, "limit_m": soft_m},
                )
            if v_mps != 0.0:
                room_m = soft_m - x_m if v_mps > 0.0 else soft_m + x_m
                needed_m = stopping_distance_m(v_mps, lim.stop_decel_mps2, lim.stop_lag_s)
                if needed_m > room_m:
                    return Trip(
                        "track.stopping_distance",
                        Action.CONTROLLED_STOP,
                        f"needs {needed_m:.3f} m to stop at {v_mps:+.3f} m/s, {room_m:.3f} m left",
                        {"x_m": x_m, "v_mps": v_mps, "needed_m": needed_m, "room_m": room_m},
                    )
        if checks & _MOTION and abs(v_mps) > lim.max_cart_speed_mps:
            return Trip(
                "cart.overspeed",
                Action.CONTROLLED_STOP,
                f"cart speed {abs(v_mps):.3f} m/s above {lim.max_cart_speed_mps:g} m/s",
                {"v_mps": v_mps, "limit_mps": lim.max_cart_speed_mps},
            )
        return None


def flag_trips(
    lim: InterlockLimits, checks: int, x_m: float, v_mps: float, switches: int, faults: int
) -> list[Trip]:
    """Every trip the rig's switch and fault flags call for, the most severe first.

    The per-sample check acts on the first; the pre-arm checks report them all.
    """
    trips = []
    if switches & _ESTOP_BITS_SWITCHES or faults & _ESTOP_BITS_FAULTS:
        trips.append(Trip(
            "estop.button",
            lim.estop_action,
            "e-stop button pressed on the rig (or its latch not yet cleared)",
            {"switches": float(switches), "faults": float(faults)},
            estop=True,
        ))
    for bit, name in _DEVICE_FAULTS:
        if faults & bit:
            trips.append(Trip(
                name, Action.DRIVE_OFF, f"rig reports fault {name}", {"faults": float(faults)}
            ))
    if faults & F_RESET:  # after the faults: held from power-up until a reset, it must hide none
        trips.append(Trip(
            "device.reset", Action.DRIVE_OFF,
            "the rig has powered up or reset since its faults were last cleared (F_RESET)",
            {"faults": float(faults)},
        ))
    if switches & SW_END_STOP:
        trips.append(Trip(
            "track.end_stop", Action.DRIVE_OFF, "cart against a hard end stop",
            {"x_m": x_m, "v_mps": v_mps},
        ))
    if checks & _SWITCHES and switches & _LIMIT_SWITCHES:
        side = "negative" if switches & SW_LIMIT_NEG else "positive"
        trips.append(Trip(
            "track.limit_switch", Action.DRIVE_OFF, f"{side} limit switch hit",
            {"x_m": x_m, "v_mps": v_mps},
        ))
    return trips


def supply_trip(lim: InterlockLimits, supply_v: float) -> Trip | None:
    """The trip for a supply voltage outside its range; None inside it or when not reported (NaN)."""
    if not (supply_v < lim.supply_min_v or supply_v > lim.supply_max_v):  # NaN compares False
        return None
    return Trip(
        "drive.supply",
        Action.DRIVE_OFF,
        f"supply {supply_v:.2f} V outside {lim.supply_min_v:g}..{lim.supply_max_v:g} V",
        {"supply_v": supply_v, "min_v": lim.supply_min_v, "max_v": lim.supply_max_v},
    )


def link_timeout_trip(
    now_s: float, last_rx_s: float, limit_s: float, limits: InterlockLimits
) -> Trip | None:
    """Trip when no telemetry has arrived for ``limit_s`` (the pacing's silence limit)."""
    silent_s = now_s - last_rx_s
    if silent_s <= limit_s:
        return None
    return Trip(
        "link.timeout",
        Action.DRIVE_OFF,
        f"no telemetry for {silent_s * 1000:.1f} ms ({silent_s / limits.sample_period_s:.1f} sample periods)",
        {"silent_s": silent_s, "limit_s": limit_s},
    )


class TokenBucket:
    """Counts events that drain away at ``rate_per_s``; full beyond ``burst``.

    The token-bucket rule of RFC 2697 (committed rate and burst size), turned
    round: events fill the bucket, time empties it.
    """

    __slots__ = ("_last_t_s", "burst", "level", "rate_per_s")

    def __init__(self, rate_per_s: float, burst: float):
        self.rate_per_s = rate_per_s
        self.burst = burst
        self.level = 0.0
        self._last_t_s = -INF

    def add(self, t_s: float, events: float) -> bool:
        """Add ``events`` at time ``t_s``; True when the bucket now holds more than ``burst``."""
        if self._last_t_s != -INF:
            self.level = max(0.0, self.level - self.rate_per_s * (t_s - self._last_t_s))
        self._last_t_s = t_s
        self.level += events
        return self.level > self.burst


class LinkErrorMonitor:
    """Sequence gaps, CRC failures and loop overruns judged against their allowed rates."""

    __slots__ = ("_crc_seen", "_gaps_seen", "crc", "gaps", "limits", "overruns")

    def __init__(self, config: PoiseConfig):
        lim = config.interlocks
        self.limits = InterlockLimits.from_config(config)
        self.gaps = TokenBucket(lim.gap_rate_per_s, lim.link_error_burst)
        self.crc = TokenBucket(lim.crc_rate_per_s, lim.link_error_burst)
        # overrun_share of the samples, sustained over a second, fills the bucket.
        overruns_per_s = lim.overrun_share * config.sampling.rate_hz
        self.overruns = TokenBucket(overruns_per_s, overruns_per_s)
        self._gaps_seen = 0
        self._crc_seen = 0

    def note_counters(self, t_s: float, gaps_total: int, crc_failures_total: int) -> Trip | None:
        """Feed the link's cumulative counters; trips when either rate is exceeded."""
        new_gaps = gaps_total - self._gaps_seen
        new_crc = crc_failures_total - self._crc_seen
        self._gaps_seen = gaps_total
        self._crc_seen = crc_failures_total
        if self.gaps.add(t_s, new_gaps):
            return self._rate_trip("link.gaps", "sequence gaps", self.gaps, gaps_total)
        if self.crc.add(t_s, new_crc):
            return self._rate_trip("link.crc", "CRC failures", self.crc, crc_failures_total)
        return None

    def note_cycle(self, t_s: float, cycle_us: float) -> Trip | None:
        """Feed one cycle's time (frame in to command out); trips on repeated overruns."""
        if cycle_us <= self.limits.overrun_budget_us:
            return None
        if self.overruns.add(t_s, 1.0):
            return Trip(
                "loop.overrun",
                Action.CONTROLLED_STOP,
                f"control cycle over its {self.limits.overrun_budget_us:g} us budget too often "
                f"(last {cycle_us:.0f} us)",
                {
                    "cycle_us": cycle_us,
                    "budget_us": self.limits.overrun_budget_us,
                    "bucket": self.overruns.level,
                },
            )
        return None

    @staticmethod
    def _rate_trip(name: str, what: str, bucket: TokenBucket, total: int) -> Trip:
        return Trip(
            name,
            Action.DRIVE_OFF,
            f"{what} above {bucket.rate_per_s:g}/s (burst {bucket.burst:g})",
            {"total": float(total), "bucket": bucket.level, "rate_per_s": bucket.rate_per_s},
        )
