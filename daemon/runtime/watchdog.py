"""The host watchdog: an asyncio task that stops the rig when telemetry stops or the cycle stalls.

It ticks every half link timeout (at most every ``MAX_TICK_S``), and how late
each tick runs is the event loop's lag, kept in a :class:`LagRing` for status,
the dashboard and the recording. Two things trip it while telemetry is
expected:

- ``link.timeout``: no telemetry for the pacing's silence limit
  (:func:`daemon.supervisor.link_timeout_trip`): ``interlocks.link_timeout_ms``
  for a rig on its own clock, a longer wall-clock backstop for a lockstep rig,
  which samples only when the host answers (:mod:`daemon.runtime.pacing`,
  settled at the handshake). Silence is never judged on a tick that itself ran
  late: telemetry that came meanwhile may still be waiting, unread, behind it.
- ``loop.stall``: the watchdog itself ran later than the pacing's stall limit
  (``interlocks.loop_stall_ms``; none in lockstep), which means the event
  loop, and with it the control cycle, was blocked that long.

The device's own watchdog is the backstop for a host that cannot run at all.
Each tick also reports the measured telemetry rate and the device watchdog bit
to the supervisor for the pre-arm checks.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable

from daemon.runtime.cycle import ControlCycle
from daemon.runtime.timing import LagRing
from daemon.supervisor import Action, Supervisor, Trip, link_timeout_trip
from protocol import ST_WATCHDOG_ACTIVE

RATE_WINDOW_S = 0.1
MAX_TICK_S = 0.01  # the lag is sampled at least this often


class RateMeter:
    """The telemetry rate, from rig-time deltas of the stream itself.

    Telemetry.t_us counts from the device's power-up (PROTOCOL.md section 6), usually long
    before this host's Configure, so no rate may be measured against rig time 0: the first
    window starts at the first observation made while telemetry flows, and a new one starts
    whenever the stream stops flowing (a reconnect).
    """

    __slots__ = ("_count", "_t_s", "_wall_s")

    def __init__(self) -> None:
        self._count = 0
        self._t_s: float | None = None  # None: no window open
        self._wall_s = 0.0

    def restart(self) -> None:
        """Telemetry is not flowing (not yet, or lost): the next observation opens a window."""
        self._t_s = None

    def observe(self, wall_s: float, count: int, t_s: float) -> float | None:
        """The rate over the window that ends now, or None while no full window has passed.

        ``count`` is samples received plus samples lost, ``t_s`` the latest sample's rig time;
        call only while telemetry flows."""
        if self._t_s is None:
            self._count, self._t_s, self._wall_s = count, t_s, wall_s
            return None
        if wall_s - self._wall_s < RATE_WINDOW_S or t_s <= self._t_s:
            return None
        rate_hz = (count - self._count) / (t_s - self._t_s)
        self._count, self._t_s, self._wall_s = count, t_s, wall_s
        return rate_hz


async def run_watchdog(
    cycle: ControlCycle,
    supervisor: Supervisor,
    expecting: Callable[[], bool],
    on_trip: Callable[[Trip], None],
    rate_known: asyncio.Event,
    lag: LagRing,
) -> None:
    """Run until cancelled. ``expecting()`` says whether telemetry should be flowing now;
    ``rate_known`` is set once the first telemetry rate has been reported to the supervisor;
    every tick's lateness goes into ``lag``."""
    limits = supervisor.limits
    tick_s = min(MAX_TICK_S, max(0.001, limits.link_timeout_s / 2.0))
    loop = asyncio.get_running_loop()
    due = loop.time() + tick_s
    meter = RateMeter()
    while True:
        await asyncio.sleep(max(0.0, due - loop.time()))
        now = loop.time()
        late_s = now - due
        due = now + tick_s
        lag.note(late_s)
        if not expecting() or not cycle.telemetry_flowing:
            meter.restart()
            continue
        pacing = cycle.pacing
        if late_s > pacing.stall_limit_s:
            on_trip(
                Trip(
                    "loop.stall",
                    Action.DRIVE_OFF,
                    f"the host event loop was blocked for {late_s * 1000:.1f} ms "
                    f"(interlocks.loop_stall_ms = {pacing.stall_limit_s * 1000:g})",
                    {"blocked_s": late_s, "limit_s": pacing.stall_limit_s},
                )
            )
            continue
        if late_s > tick_s:
            # This tick ran late: telemetry that arrived meanwhile may still wait unread behind
            # it. Judge the silence on the next tick, once the cycle's reader has had its turn.
            continue
        last_rx_s = cycle.last_rx_ns * 1e-9
        trip = link_timeout_trip(time.monotonic(), last_rx_s, pacing.silence_limit_s, limits)
        if trip is not None:
            on_trip(trip)
            continue
        rate_hz = meter.observe(now, cycle.samples + cycle.missed, cycle.t_s)
        if rate_hz is not None:
            tm = cycle.last_telemetry
            supervisor.note_link(rate_hz, bool(tm is not None and tm.status & ST_WATCHDOG_ACTIVE))
            rate_known.set()
