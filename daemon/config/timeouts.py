"""How long a silent link or host may leave the last drive applied, and whether the track allows it.

When telemetry stops reaching the daemon, or the daemon stops answering, the
rig keeps applying the last drive command until one of two watchdogs acts:

- the daemon's, ``interlocks.link_timeout_ms`` after the last telemetry frame
  (it then sends Stop; the device keeps being fed heartbeats until then, so a
  link that fails only from rig to host is stopped by this one), and
- the device's, ``sampling.device_watchdog_ms`` after the last command frame
  (it cuts the motor on its own; this is the one that acts when the daemon is
  blocked, killed or its port is gone).

So the drive can stay on for up to ``T = max(link_timeout_ms,
device_watchdog_ms)`` with nobody in control. At the highest speed the
interlocks allow (``interlocks.max_cart_speed_mps``) the cart covers
``d = v_max T`` in that time; this must fit in the room the cart has beyond
its soft limits before it meets a hard end stop
(``interlocks.soft_limit_inset_m + track.switch_inset_m``). The bound is
simple on purpose: it takes the top speed right at the soft limit (the
stopping-distance interlock keeps the real speed there lower) and leaves out
what the drive adds or friction takes during ``T``.

Timeouts in milliseconds are set for an ordinary desktop kernel, whose
scheduling hiccups run to a few milliseconds and occasionally past ten; a
real-time kernel (PREEMPT_RT, with ``poise run`` at real-time priority) holds
its latency well under a millisecond and can take 3–5 sample periods.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

#: The link timeout must span at least this many sample periods (one late frame is not a dead link).
MIN_TIMEOUT_PERIODS = 3


def unattended_time_s(config: PoiseConfig) -> float:
    """The longest the last drive command can stay applied with nobody in control."""
    return max(config.interlocks.link_timeout_ms, config.sampling.device_watchdog_ms) / 1000.0


def unattended_travel_m(config: PoiseConfig) -> float:
    """How far the cart can run at its top allowed speed before a watchdog acts."""
    return config.interlocks.max_cart_speed_mps * unattended_time_s(config)


def overrun_room_m(config: PoiseConfig) -> float:
    """Room beyond each soft limit before the hard end stop."""
    return config.interlocks.soft_limit_inset_m + config.track.switch_inset_m


def timeout_problems(config: PoiseConfig) -> list[str]:
    """One line per timeout that does not suit the rig (empty when all do)."""
    problems = []
    period_ms = 1000.0 / config.sampling.rate_hz
    lim = config.interlocks
    if lim.link_timeout_ms < MIN_TIMEOUT_PERIODS * period_ms:
        problems.append(
            f"interlocks.link_timeout_ms: {lim.link_timeout_ms:g} ms is under {MIN_TIMEOUT_PERIODS} "
            f"sample periods ({MIN_TIMEOUT_PERIODS * period_ms:g} ms at sampling.rate_hz = "
            f"{config.sampling.rate_hz})"
        )
    travel_m, room_m = unattended_travel_m(config), overrun_room_m(config)
    if travel_m > room_m:
        time_ms = unattended_time_s(config) * 1000.0
        problems.append(
            f"interlocks.link_timeout_ms / sampling.device_watchdog_ms: with nobody in control for "
            f"up to {time_ms:g} ms the cart can run {travel_m * 1000:.0f} mm at "
            f"interlocks.max_cart_speed_mps = {lim.max_cart_speed_mps:g}, more than the "
            f"{room_m * 1000:.0f} mm beyond the soft limits (interlocks.soft_limit_inset_m + "
            f"track.switch_inset_m); shorten the timeouts, lower the speed limit or widen the insets"
        )
    return problems
