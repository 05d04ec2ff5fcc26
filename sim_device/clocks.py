"""When the simulated rig takes its samples: paced by the wall clock, or by the host.

:class:`RealTimeClock` behaves like the timer interrupt of real firmware: one
sample every period of wall-clock time. :class:`LockstepClock` takes one sample
per drive command the host sends, as fast as the host answers, so a run is
deterministic and long sessions take seconds. If the host goes quiet in
lockstep, the clock falls back to real-time pacing after a wall-clock grace
period, so the device watchdog still trips in device time.

A clock only decides *when*; the device keeps its own sample count and time.

Real-time pacing is only as even as the event loop's timers: Poise's
commands run in :mod:`daemon.runtime.event_loop`, whose timers fire to the
microsecond (asyncio's default loop on Linux rounds each wait up to a whole
millisecond).
"""

from __future__ import annotations

import asyncio
from abc import ABC, abstractmethod
from collections.abc import Callable

__all__ = ["LockstepClock", "RealTimeClock", "SampleClock"]

TakeSample = Callable[[], None]


class SampleClock(ABC):
    """Calls ``take_sample`` whenever the device is due to take a sample."""

    lockstep: bool

    @abstractmethod
    def start(self, loop: asyncio.AbstractEventLoop, take_sample: TakeSample, period_s: float) -> None:
        """Take the first sample now and keep sampling at ``period_s`` until :meth:`stop`."""

    @abstractmethod
    def command_received(self) -> None:
        """A valid drive command has arrived from the host."""

    @abstractmethod
    def stop(self) -> None:
        """Take no more samples until the next :meth:`start`."""


class RealTimeClock(SampleClock):
    """One sample per period of the event loop's monotonic clock.

    A late loop catches up by taking the missed samples back to back (device
    time stays uniform); if it falls more than ``max_catch_up`` samples behind
    it gives up on those, restarts the schedule from now and counts a slip.
    """

    lockstep = False

    def __init__(self, max_catch_up: int = 50):
        self.max_catch_up = max_catch_up
        self.slips = 0
        self._handle: asyncio.TimerHandle | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._take_sample: TakeSample | None = None
        self._period_s = 0.0
        self._next_due = 0.0

    def start(self, loop: asyncio.AbstractEventLoop, take_sample: TakeSample, period_s: float) -> None:
        self.start_at(loop, take_sample, period_s, loop.time())

    def start_at(
        self, loop: asyncio.AbstractEventLoop, take_sample: TakeSample, period_s: float, first_due: float
    ) -> None:
        """Like :meth:`start`, with the first sample due at loop time ``first_due``."""
        self.stop()
        self._loop, self._take_sample, self._period_s = loop, take_sample, period_s
        self._next_due = first_due
        if first_due <= loop.time():
            self._fire()
        else:
            self._handle = loop.call_at(first_due, self._fire)

    def _fire(self) -> None:
        loop, take_sample = self._loop, self._take_sample
        assert loop is not None and take_sample is not None
        self._handle = None
        now = loop.time()
        behind = int((now - self._next_due) / self._period_s)
        if behind > self.max_catch_up:
            self.slips += 1
            self._next_due = now
        while self._next_due <= now:
            take_sample()
            if self._take_sample is None:  # the sample stopped the clock (e.g. a device reset)
                return
            self._next_due += self._period_s
        self._handle = loop.call_at(self._next_due, self._fire)

    def command_received(self) -> None:
        """Commands do not pace a real-time clock."""

    def stop(self) -> None:
        if self._handle is not None:
            self._handle.cancel()
            self._handle = None
        self._take_sample = None


class LockstepClock(SampleClock):
    """One sample per drive command; real-time pacing while the host is silent.

    The silence check runs every ``grace_s`` of wall-clock time and costs
    nothing per sample: a command counter is compared with its value at the
    previous check. So free running starts between one and two grace periods
    after the last command, and stops at the next command.
    """

    lockstep = True

    def __init__(self, grace_s: float = 0.5):
        if not grace_s > 0.0:
            raise ValueError(f"lockstep grace_s must be > 0 (got {grace_s!r})")
        self.grace_s = grace_s
        self.free_run_spells = 0
        self._free_run = RealTimeClock()
        self._free_running = False
        self._commands = 0
        self._commands_at_check = 0
        self._check: asyncio.TimerHandle | None = None
        self._loop: asyncio.AbstractEventLoop | None = None
        self._take_sample: TakeSample | None = None
        self._period_s = 0.0

    def start(self, loop: asyncio.AbstractEventLoop, take_sample: TakeSample, period_s: float) -> None:
        self.stop()
        self._loop, self._take_sample, self._period_s = loop, take_sample, period_s
        self._commands_at_check = self._commands
        self._check = loop.call_later(self.grace_s, self._check_silence)
        take_sample()

    def _check_silence(self) -> None:
        assert self._loop is not None and self._take_sample is not None
        if self._commands == self._commands_at_check and not self._free_running:
            self._free_running = True
            self.free_run_spells += 1
            first_due = self._loop.time() + self._period_s
            self._free_run.start_at(self._loop, self._take_sample, self._period_s, first_due)
        self._commands_at_check = self._commands
        self._check = self._loop.call_later(self.grace_s, self._check_silence)

    def command_received(self) -> None:
        self._commands += 1
        if self._take_sample is None:
            return
        if self._free_running:
            self._free_run.stop()
            self._free_running = False
        self._take_sample()

    def stop(self) -> None:
        if self._check is not None:
            self._check.cancel()
            self._check = None
        self._free_run.stop()
        self._free_running = False
        self._take_sample = None
