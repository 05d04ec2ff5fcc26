"""Pre-arm checks: the health a rig must show before a command that starts motion.

:func:`prearm_failures` reports every failing check at once, each with a stable
id, so the operator fixes them all in one go. The checks look at the same
measurements and limits the interlocks watch continuously.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from daemon.control.encoders import wrap_angle
from daemon.operator_commands import MOTION_COMMANDS, Command
from daemon.supervisor.interlocks import Checks, InterlockLimits, flag_trips, supply_trip

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

_NEEDS_HOMED = MOTION_COMMANDS - {Command.HOME}
_NEEDS_HANGING = frozenset({Command.SWING_UP, Command.EXCITE})


@dataclass(frozen=True, slots=True)
class Health:
    """What the supervisor knows about the rig when a motion command arrives."""

    link_connected: bool
    link_rate_hz: float
    device_watchdog_active: bool
    config_problems: tuple[str, ...]
    homed: bool
    x_m: float
    theta_rad: float
    omega_radps: float
    switches: int
    faults: int
    supply_v: float  # NaN when not reported


@dataclass(frozen=True, slots=True)
class CheckFailure:
    id: str
    text: str

    def __str__(self) -> str:
        return f"{self.id}: {self.text}"


@dataclass(frozen=True, slots=True)
class PrecheckLimits:
    interlocks: InterlockLimits  # the flag and supply checks are the interlocks' own
    rate_hz: float
    rate_tolerance: float
    soft_limit_m: float
    hanging_tolerance_rad: float
    still_rate_radps: float
    catch_angle_rad: float
    catch_rate_radps: float

    @classmethod
    def from_config(cls, config: PoiseConfig) -> PrecheckLimits:
        lim = config.interlocks
        return cls(
            interlocks=InterlockLimits.from_config(config),
            rate_hz=float(config.sampling.rate_hz),
            rate_tolerance=lim.prearm_rate_tolerance,
            soft_limit_m=config.soft_limit_m,
            hanging_tolerance_rad=math.radians(lim.prearm_hanging_tolerance_deg),
            still_rate_radps=math.radians(lim.prearm_still_rate_dps),
            catch_angle_rad=math.radians(config.catch.angle_deg),
            catch_rate_radps=math.radians(config.catch.rate_dps),
        )


def prearm_failures(command: Command, health: Health, limits: PrecheckLimits) -> list[CheckFailure]:
    """Every check that fails for ``command``; an empty list means go."""
    if command not in MOTION_COMMANDS:
        return []
    h = health
    failures: list[CheckFailure] = []

    def fail(check_id: str, text: str) -> None:
        failures.append(CheckFailure(check_id, text))

    if not h.link_connected:
        fail("link.connected", "rig not connected")
    elif abs(h.link_rate_hz - limits.rate_hz) > limits.rate_tolerance * limits.rate_hz:
        fail("link.rate", f"telemetry at {h.link_rate_hz:.1f} Hz, configured {limits.rate_hz:g} Hz")
    if not h.device_watchdog_active:
        fail("device.watchdog", "the rig's watchdog is not active")
    for problem in h.config_problems:
        fail("config.valid", problem)
    # The rig's flags and supply, judged by the very interlocks that watch them while it runs
    # (limit switches only where the cart must be homed: homing runs onto them).
    switch_checks = int(Checks.SWITCHES) if command in _NEEDS_HOMED else 0
    for trip in flag_trips(limits.interlocks, switch_checks, h.x_m, 0.0, h.switches, h.faults):
        fail(trip.name, trip.reason)
    supply = supply_trip(limits.interlocks, h.supply_v)
    if supply is not None:
        fail(supply.name, supply.reason)
    if command in _NEEDS_HOMED:
        if not h.homed:
            fail("cart.homed", "cart not homed")
        elif abs(h.x_m) > limits.soft_limit_m:
            fail(
                "track.soft_limit", f"cart at {h.x_m:+.3f} m, outside ±{limits.soft_limit_m:.3f} m"
            )
    if command in _NEEDS_HANGING:
        off_rad = abs(wrap_angle(h.theta_rad - math.pi))
        if off_rad > limits.hanging_tolerance_rad or abs(h.omega_radps) > limits.still_rate_radps:
            fail(
                "pendulum.hanging_still",
                f"pendulum {math.degrees(off_rad):.1f} deg from hanging, "
                f"turning {math.degrees(h.omega_radps):.1f} deg/s",
            )
    if command is Command.BALANCE:
        angle_rad = wrap_angle(h.theta_rad)
        if abs(angle_rad) > limits.catch_angle_rad or abs(h.omega_radps) > limits.catch_rate_radps:
            fail(
                "pendulum.in_catch_window",
                f"pendulum {math.degrees(angle_rad):+.1f} deg from upright, turning "
                f"{math.degrees(h.omega_radps):.0f} deg/s: hold it near upright to catch",
            )
    return failures
