"""Fault injection for the simulated rig: what goes wrong, when, and on the line.

A :class:`FaultPlan` describes the faults of one run: events at given
simulation times (seconds since the simulator started; equal to device time
until the device is reset) and random line faults at given rates. Everything
random draws from generators seeded from the run's seed, so a run repeats
exactly.

- :class:`FaultSchedule` hands the device the events that are due at each
  sample; the device carries them out (:mod:`sim_device.device`).
- :class:`FaultyLine` wraps a transport and drops or corrupts frames the
  device sends, as a noisy cable would.

Nothing outside the simulated rig knows faults are being injected: the host
sees only what it would see from real hardware.
"""

from __future__ import annotations

import asyncio
import heapq
import itertools
import math
import random
from dataclasses import dataclass, field
from typing import Literal

from sim_device.transports import OnBytes, Transport

__all__ = [
    "CartEncoderDead",
    "DriverFault",
    "EncoderGlitch",
    "FaultEvent",
    "FaultPlan",
    "FaultSchedule",
    "FaultyLine",
    "Impulse",
    "PendulumEncoderDead",
    "Reset",
    "Stall",
    "StuckSwitch",
    "SupplySag",
]

SwitchSide = Literal["neg", "pos"]


@dataclass(frozen=True)
class Stall:
    """The device sends nothing for ``duration_ms`` (it keeps sampling and obeying commands)."""

    duration_ms: float


@dataclass(frozen=True)
class Reset:
    """The device resets: hello again, sequence numbers restart, F_RESET set, disarmed."""


@dataclass(frozen=True)
class EncoderGlitch:
    """One encoder jumps by ``counts`` and stays off by that much (a miscount)."""

    counts: int
    encoder: Literal["cart", "pendulum"] = "pendulum"


@dataclass(frozen=True)
class StuckSwitch:
    """A limit switch reads active from now on, wherever the cart is."""

    side: SwitchSide


@dataclass(frozen=True)
class DriverFault:
    """The motor driver reports a fault (F_DRIVER): the device cuts the drive and disarms."""


@dataclass(frozen=True)
class CartEncoderDead:
    """The cart encoder stops counting (unplugged, or the belt it reads slipped): its count freezes."""


@dataclass(frozen=True)
class PendulumEncoderDead:
    """The pendulum encoder stops counting (unplugged, or its shaft coupling slipped): its count freezes."""


@dataclass(frozen=True)
class SupplySag:
    """The supply voltage the device measures drops to ``supply_v``, short of the device's own lockout."""

    supply_v: float


@dataclass(frozen=True)
class Impulse:
    """Horizontal impulses, N s (+x positive), at the pendulum's centre of mass and on the cart."""

    pendulum_ns: float = 0.0
    cart_ns: float = 0.0


FaultEvent = (
    Stall
    | Reset
    | EncoderGlitch
    | StuckSwitch
    | DriverFault
    | Impulse
    | CartEncoderDead
    | PendulumEncoderDead
    | SupplySag
)


def _check_rate(name: str, value: float) -> None:
    if not 0.0 <= value <= 1.0:
        raise ValueError(f"faults.{name} must be a probability in [0, 1] (got {value!r})")


@dataclass(frozen=True)
class FaultPlan:
    """The faults of one simulated run.

    ``events`` are ``(sim_time_s, event)`` pairs. ``drop_rate`` and
    ``corrupt_rate`` are per-frame probabilities for frames the device sends;
    ``noisy_switch`` chatters: each sample, with probability
    ``noisy_switch_rate``, it reads the opposite of its true state.
    ``initial_angle_rad`` starts the pendulum at that angle (DEVELOPERS.md
    convention) instead of hanging.
    """

    events: tuple[tuple[float, FaultEvent], ...] = ()
    drop_rate: float = 0.0
    corrupt_rate: float = 0.0
    noisy_switch: SwitchSide | None = None
    noisy_switch_rate: float = 0.0
    initial_angle_rad: float | None = None

    def __post_init__(self) -> None:
        _check_rate("drop_rate", self.drop_rate)
        _check_rate("corrupt_rate", self.corrupt_rate)
        _check_rate("noisy_switch_rate", self.noisy_switch_rate)
        if self.noisy_switch not in (None, "neg", "pos"):
            raise ValueError(f"faults.noisy_switch must be 'neg' or 'pos' (got {self.noisy_switch!r})")
        if self.initial_angle_rad is not None and not math.isfinite(self.initial_angle_rad):
            raise ValueError(f"faults.initial_angle_rad must be finite (got {self.initial_angle_rad!r})")
        for at_s, _event in self.events:
            if not (math.isfinite(at_s) and at_s >= 0.0):
                raise ValueError(f"faults.events: time must be >= 0 s (got {at_s!r})")

    @property
    def line_faults(self) -> bool:
        return self.drop_rate > 0.0 or self.corrupt_rate > 0.0


def derived_seed(seed: int, stream: str) -> int:
    """A seed for one independent random stream (``"sensors"``, ``"line"``, ...) of a run."""
    return random.Random(f"{seed}:{stream}").getrandbits(64)


_NOTHING_DUE: list[FaultEvent] = []  # never appended to


@dataclass(order=True)
class _Entry:
    at_us: int
    order: int
    event: FaultEvent = field(compare=False)


class FaultSchedule:
    """Events waiting for their simulation time, plus the random switch chatter."""

    def __init__(self, plan: FaultPlan, seed: int = 0):
        self._heap: list[_Entry] = []
        self._order = itertools.count()
        self.next_at_us: float = math.inf  # sim time of the earliest pending event; inf if none
        for at_s, event in plan.events:
            self.add(at_s, event)
        self._noisy_bit = {"neg": 1, "pos": 2, None: 0}[plan.noisy_switch]
        self._noisy_rate = plan.noisy_switch_rate
        self._rng = random.Random(derived_seed(seed, "switch"))

    def add(self, at_s: float, event: FaultEvent) -> None:
        """Schedule ``event`` at simulation time ``at_s`` (a past time means the next sample)."""
        if not math.isfinite(at_s):
            raise ValueError(f"fault time must be finite (got {at_s!r})")
        heapq.heappush(self._heap, _Entry(round(at_s * 1e6), next(self._order), event))
        self.next_at_us = self._heap[0].at_us

    def due(self, sim_time_us: int) -> list[FaultEvent]:
        """The events whose time has come, in time order (ties in the order they were added)."""
        heap = self._heap
        if not heap or heap[0].at_us > sim_time_us:
            return _NOTHING_DUE
        events = []
        while heap and heap[0].at_us <= sim_time_us:
            events.append(heapq.heappop(heap).event)
        self.next_at_us = heap[0].at_us if heap else math.inf
        return events

    @property
    def pending(self) -> int:
        return len(self._heap)

    @property
    def chattering(self) -> bool:
        return self._noisy_bit != 0 and self._noisy_rate > 0.0

    def chatter(self) -> int:
        """Switch bits to invert in this sample's reading (0 when nothing chatters)."""
        if self._noisy_bit and self._rng.random() < self._noisy_rate:
            return self._noisy_bit
        return 0


class FaultyLine(Transport):
    """A transport whose outgoing frames are sometimes lost or garbled.

    The device writes one whole frame per ``write``; each is dropped with
    probability ``drop_rate`` or else, with probability ``corrupt_rate``, has
    one byte XORed with a random non-zero mask. Incoming bytes pass untouched.
    """

    def __init__(self, inner: Transport, drop_rate: float, corrupt_rate: float, seed: int):
        _check_rate("drop_rate", drop_rate)
        _check_rate("corrupt_rate", corrupt_rate)
        self.inner = inner
        self.drop_rate = drop_rate
        self.corrupt_rate = corrupt_rate
        self.frames_dropped = 0
        self.frames_corrupted = 0
        self._rng = random.Random(derived_seed(seed, "line"))

    @property
    def where(self) -> str:
        return self.inner.where

    @property
    def tx_bytes_dropped(self) -> int:  # type: ignore[override]
        return self.inner.tx_bytes_dropped

    def open(self, loop: asyncio.AbstractEventLoop, on_bytes: OnBytes) -> None:
        self.inner.open(loop, on_bytes)

    def write(self, data: bytes) -> None:
        rng = self._rng
        if rng.random() < self.drop_rate:
            self.frames_dropped += 1
            return
        if data and rng.random() < self.corrupt_rate:
            garbled = bytearray(data)
            garbled[rng.randrange(len(garbled))] ^= rng.randrange(1, 256)
            data = bytes(garbled)
            self.frames_corrupted += 1
        self.inner.write(data)

    def unread_bytes(self) -> int:
        return self.inner.unread_bytes()

    def close(self) -> None:
        self.inner.close()
