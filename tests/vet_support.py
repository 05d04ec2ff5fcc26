"""Broken simulated devices for tests/test_vet_command.py: each breaks one clause of
protocol/PROTOCOL.md in one way, so the test can show `poise vet` fails exactly that clause.

Two kinds of breakage, both on the real simulated device on a real pty:

- a state-machine fault: the device object's class is swapped for a subclass of
  :class:`SimulatedDevice` overriding one method (the rig builds its device itself, so the
  subclass is put in place after construction; it adds behaviour, no state of its own);
- a wrong field on the wire: :class:`Rewriting` sits between the device and its pty and
  changes one field of the messages the device sends.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from cobs import cobs

from daemon.config import demo_config_path, load_config
from daemon.config.plant import rig_spec
from protocol import (
    CAP_LOCKSTEP,
    CAP_SIMULATED,
    F_WATCHDOG,
    ST_ARMED,
    ST_WATCHDOG_ACTIVE,
    DeviceHello,
    FrameDecoder,
    Heartbeat,
    Message,
    Reply,
    ReplyResult,
    Stop,
    Telemetry,
    encode,
)
from protocol.crc import crc16
from sim_device.device import SimulatedDevice
from sim_device.rig import SimulatedRig
from sim_device.transports import PtyTransport, Transport

LOCKSTEP_GRACE_S = 0.05  # the silent phases of a check cost this, not the simulator's 0.5 s


class Rewriting(Transport):
    """A transport passing every frame the device sends through ``rewrite`` (one message in,
    one out); the device writes whole frames, so each write decodes on its own."""

    def __init__(self, inner: Transport, rewrite: Callable[[Message], Message]):
        self.inner = inner
        self.rewrite = rewrite

    @property
    def where(self) -> str:
        return self.inner.where

    def open(self, loop, on_bytes) -> None:
        self.inner.open(loop, on_bytes)

    def write(self, data: bytes) -> None:
        self.inner.write(b"".join(encode(self.rewrite(m)) for m in FrameDecoder().feed(data)))

    def close(self) -> None:
        self.inner.close()

    def unread_bytes(self) -> int:
        return self.inner.unread_bytes()


def _hello_seq(m: Message) -> Message:
    return m._replace(seq=0xFFFF) if type(m) is DeviceHello and m.seq == 0 else m


def _fingerprint(m: Message) -> Message:
    return m._replace(schema_fingerprint=0x12345678) if type(m) is DeviceHello else m


def _lockstep_alone(m: Message) -> Message:
    return m._replace(capabilities=m.capabilities & ~CAP_SIMULATED | CAP_LOCKSTEP) \
        if type(m) is DeviceHello else m


def _no_watchdog_status(m: Message) -> Message:
    return m._replace(status=m.status & ~ST_WATCHDOG_ACTIVE) if type(m) is Telemetry else m


def _moves_disarmed(m: Message) -> Message:
    if type(m) is Telemetry and not m.status & ST_ARMED:
        return m._replace(drive_applied=0.5)
    return m


def _result_swap(old: ReplyResult, new: ReplyResult) -> Callable[[Message], Message]:
    def swap(m: Message) -> Message:
        return m._replace(result=int(new)) if type(m) is Reply and m.result == old else m
    return swap


class IgnoresCrc(SimulatedDevice):
    """Takes frames with a wrong CRC: mends every CRC before decoding."""

    def on_bytes(self, data: bytes) -> None:
        mended = []
        for chunk in data.split(b"\x00"):
            try:
                raw = cobs.decode(chunk)
            except cobs.DecodeError:
                mended.append(chunk)
                continue
            if len(raw) >= 7:
                raw = raw[:-2] + crc16(raw[:-2]).to_bytes(2, "little")
                chunk = cobs.encode(raw)
            mended.append(chunk)
        super().on_bytes(b"\x00".join(mended))


class LosesFrameAfterOverrun(SimulatedDevice):
    """After a run of more than 255 bytes without 0x00 it also drops the next frame."""

    def on_bytes(self, data: bytes) -> None:
        chunks = data.split(b"\x00")
        kept = []
        drop_next = False
        for chunk in chunks:
            if drop_next and chunk:
                drop_next = False
                chunk = b""
            elif len(chunk) > 255:
                drop_next = True
            kept.append(chunk)
        super().on_bytes(b"\x00".join(kept))


class ArmChecksFaultsFirst(SimulatedDevice):
    """Answers Arm FAULT_LATCHED before checking it is configured (wrong order, section 9.2)."""

    def _on_arm(self, message) -> None:
        if message.arm == 1 and self.faults:
            self._reply(message, ReplyResult.FAULT_LATCHED)
        else:
            super()._on_arm(message)


class ArmTakesAnyValue(SimulatedDevice):
    """Takes Arm(2) as Arm(1) instead of answering OUT_OF_RANGE."""

    def _on_arm(self, message) -> None:
        super()._on_arm(message._replace(arm=min(message.arm, 1)))


class ArmsFaulted(SimulatedDevice):
    """Arms whatever faults are latched."""

    def _on_arm(self, message) -> None:
        if message.arm == 1 and self.configured:
            self.armed = True
            self._reply(message, ReplyResult.ACCEPTED)
        else:
            super()._on_arm(message)


class TakesWatchdogZero(SimulatedDevice):
    """Accepts watchdog_ms 0 (as 1 ms) instead of answering OUT_OF_RANGE."""

    def _on_configure(self, message) -> None:
        super()._on_configure(message._replace(watchdog_ms=max(1, message.watchdog_ms)))


class SkipsASample(SimulatedDevice):
    """Telemetry seq jumps from 100 to 102."""

    def take_sample(self) -> None:
        super().take_sample()
        if self._sample_seq == 100:
            self._sample_seq += 1


class SlowClock(SimulatedDevice):
    """Samples 10 % slower than configured (its t_us says so)."""

    def _on_configure(self, message) -> None:
        super()._on_configure(message)
        if self.configured and 1 <= message.sample_rate_hz <= self.identity.sample_rate_hz:
            self._period_us = round(1.1e6 / self.sample_rate_hz)


class Jittery(SimulatedDevice):
    """Sample intervals alternate 1.7 and 0.3 periods."""

    def take_sample(self) -> None:
        if not self._first_sample and self._period_us:
            shift = 0.7 if self._sample_seq % 2 else -0.7
            self._nominal_next_us += round(shift * self._period_us)
        super().take_sample()


class FastClock(SimulatedDevice):
    """Samples twice as often as its t_us says (its clock runs at half speed)."""

    def _on_configure(self, message) -> None:
        super()._on_configure(message)
        if self.configured and self._sample_seq == 0:  # accepted: the stream has begun
            self.clock.stop()
            self.clock.start(self._loop, self.take_sample, 0.5 / self.sample_rate_hz)


class NoLateCounting(SimulatedDevice):
    def on_bytes(self, data: bytes) -> None:
        late = self.late_commands
        super().on_bytes(data)
        self.late_commands = late


class NoWatchdog(SimulatedDevice):
    def _latch_fault(self, bit: int, detail: float) -> None:
        if bit == F_WATCHDOG:
            self._last_feed_us = self.t_us
            return
        super()._latch_fault(bit, detail)


class IgnoresHeartbeat(SimulatedDevice):
    def _on_command(self, message) -> None:
        if type(message) is not Heartbeat:
            super()._on_command(message)


class ForgetsWatchdogFault(SimulatedDevice):
    """F_WATCHDOG clears by itself once Drives feed the watchdog again."""

    def take_sample(self) -> None:
        if self.faults & F_WATCHDOG and self.t_us - self._last_feed_us < self.watchdog_ms * 500:
            self.faults &= ~F_WATCHDOG
        super().take_sample()


class DisarmIgnored(SimulatedDevice):
    def _on_arm(self, message) -> None:
        if message.arm == 0 and self.armed:
            self._reply(message, ReplyResult.ACCEPTED)
        else:
            super()._on_arm(message)


class StopIgnored(SimulatedDevice):
    def _on_command(self, message) -> None:
        if type(message) is Stop:
            self._reply(message, ReplyResult.ACCEPTED)
        else:
            super()._on_command(message)


class SharedSeqCounter(SimulatedDevice):
    """One seq counter for Reply and FaultReport instead of one per type (section 5)."""

    def _next_seq(self, message_type) -> int:
        return super()._next_seq(Message)


class ClockRestartsOnConfigure(SimulatedDevice):
    def take_sample(self) -> None:
        if self._first_sample:
            self.t_us = self._last_feed_us = 0
        super().take_sample()


BROKEN_CLASSES: dict[str, type[SimulatedDevice]] = {
    "rejected_frames": IgnoresCrc,
    "resync": LosesFrameAfterOverrun,
    "arm_unconfigured": ArmChecksFaultsFirst,
    "arm_faulted": ArmsFaulted,
    "arm": ArmTakesAnyValue,
    "configure_range": TakesWatchdogZero,
    "telemetry_seq": SkipsASample,
    "rate": SlowClock,
    "jitter": Jittery,
    "device_clock": FastClock,
    "late": NoLateCounting,
    "watchdog": NoWatchdog,
    "heartbeat": IgnoresHeartbeat,
    "fault_latch": ForgetsWatchdogFault,
    "disarm": DisarmIgnored,
    "stop": StopIgnored,
    "seq_counters": SharedSeqCounter,
    "reconfigure": ClockRestartsOnConfigure,
}
BROKEN_WIRE: dict[str, Callable[[Message], Message]] = {
    "hello_seq": _hello_seq,
    "version": _fingerprint,
    "capabilities": _lockstep_alone,
    "configure": _no_watchdog_status,
    "disarmed_zero": _moves_disarmed,
    "unknown_type": _result_swap(ReplyResult.UNKNOWN_TYPE, ReplyResult.BAD_PAYLOAD),
    "bad_payload": _result_swap(ReplyResult.BAD_PAYLOAD, ReplyResult.UNKNOWN_TYPE),
}
NO_CLAMP = "clamp"  # the one breakage made by a setting: a drive limit far above the hello's


def demo_rig(broken: str | None = None, *, lockstep: bool = True) -> SimulatedRig:
    """The demo rig on a new pty, broken for clause ``broken`` (None: a conforming one)."""
    spec = rig_spec(load_config(demo_config_path()))
    transport: Transport = PtyTransport()
    if broken in BROKEN_WIRE:
        transport = Rewriting(transport, BROKEN_WIRE[broken])
    rig = SimulatedRig(spec, transport, lockstep=lockstep, lockstep_grace_s=LOCKSTEP_GRACE_S)
    if broken in BROKEN_CLASSES:
        rig.device.__class__ = BROKEN_CLASSES[broken]
    elif broken == NO_CLAMP:
        rig.device._drive_limit = math.inf
    return rig


def broken_clauses() -> list[str]:
    """Every clause with a broken device, in the report's order."""
    from daemon.vet import CLAUSES

    names = set(BROKEN_CLASSES) | set(BROKEN_WIRE) | {NO_CLAMP}
    return [key for key, _section, _name in CLAUSES if key in names]

