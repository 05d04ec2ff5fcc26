"""The simulated rig's firmware: a device loop that speaks exactly the wire protocol.

It follows protocol/PROTOCOL.md (sections 5-10) as a firmware author would:

- At power-up and after a reset the device sends a DeviceHello, latches
  F_RESET and waits, disarmed and silent, for a Configure. Identify is
  answered with a DeviceHello in every state.
- An accepted Configure (rate 1 .. the hello's sample rate) starts sampling,
  telemetry at seq 0, and the watchdog. Every sample sends one Telemetry.
- A Drive received after sample ``k`` takes effect at sample ``k + 1`` (one
  sample of delay, as on real hardware) and is held until the next Drive;
  ``drive_applied`` is the drive in effect from the sample instant on. A Drive
  answering an older sample than the latest is late: counted, and still
  applied (latest wins). Drives are clamped to ``±drive_limit``; NaN or
  infinite counts as 0. In lockstep only the Drive answering the latest
  sample advances the clock, so no Drive is ever late there.
- Disarmed, the applied drive is zero. Stop, disarm, any newly latched fault
  and the e-stop button cut the drive at once, not at the next sample.
- The watchdog: if no valid Drive or Heartbeat arrives within ``watchdog_ms``
  of device time, the drive is cut, the device disarms and F_WATCHDOG is
  latched. Latched faults refuse Arm until ClearFaults, which clears only
  faults whose cause is gone (F_ESTOP stays while the button is pressed).
- A FaultReport is sent whenever a fault bit becomes latched.
- It counts the Telemetry frames it hands to its transport: ``telemetry_sent``
  since it started, ``stream_telemetry_sent`` since the last accepted Configure
  (the stream a host sees from seq 0), so a test can hold a host's records
  against what the rig really sent.
- Each type of message sent has its own sequence counter (Telemetry's is the
  sample index).
- A well-framed frame (valid COBS, CRC, version and flags) of a type the
  device does not know, or of a known type with a payload of the wrong length,
  is answered with Reply UNKNOWN_TYPE or BAD_PAYLOAD for its type and seq
  (section 7); so is a device-to-host message sent to the device (UNKNOWN_TYPE).
"""

from __future__ import annotations

import asyncio
import math
from collections.abc import Callable
from dataclasses import dataclass

from protocol import FrameDecoder, RejectedFrame, encode, encode_telemetry
from protocol.messages import (
    CAP_ESTOP_BUTTON,
    CAP_LIMIT_SWITCHES,
    CAP_LOCKSTEP,
    CAP_SIMULATED,
    CAP_SUPPLY_VOLTAGE,
    DRIVE_KIND_NEWTONS,
    DRIVE_KIND_VOLTS,
    F_DRIVER,
    F_ESTOP,
    F_RESET,
    F_WATCHDOG,
    PROTOCOL_VERSION,
    SCHEMA_FINGERPRINT,
    ST_ARMED,
    ST_LOCKSTEP,
    ST_WATCHDOG_ACTIVE,
    SW_END_STOP,
    SW_ESTOP_BUTTON,
    SW_LIMIT_NEG,
    SW_LIMIT_POS,
    UNPROMPTED_HELLO_SEQ,
    Arm,
    ClearFaults,
    Configure,
    DeviceHello,
    Drive,
    FaultReport,
    Heartbeat,
    Identify,
    Message,
    Reply,
    ReplyResult,
    Stop,
)
from sim_device.clocks import SampleClock
from sim_device.faults import (
    CartEncoderDead,
    DriverFault,
    EncoderGlitch,
    FaultEvent,
    FaultSchedule,
    Impulse,
    PendulumEncoderDead,
    Reset,
    Stall,
    StuckSwitch,
    SupplySag,
)
from sim_device.plant import Plant, applied_command
from sim_device.sensors import Sensors
from sim_device.track import switch_trip_m
from sim_device.transports import Transport

__all__ = ["FIRMWARE_VERSION", "SAMPLE_RATE_RANGE_HZ", "DeviceIdentity", "SimulatedDevice"]

FIRMWARE_VERSION = (1, 0, 0)
SAMPLE_RATE_RANGE_HZ = (1, 10000)
NAN = math.nan
_SWITCH_BITS = {"neg": SW_LIMIT_NEG, "pos": SW_LIMIT_POS}


@dataclass(frozen=True)
class DeviceIdentity:
    """What the device says about itself in its DeviceHello, and its power-up settings."""

    device_id: str
    sample_rate_hz: int
    watchdog_ms: int
    has_estop_button: bool = True

    def __post_init__(self) -> None:
        if not 1 <= len(self.device_id) <= 16 or not self.device_id.isascii():
            raise ValueError(f"device_id must be 1-16 ASCII characters (got {self.device_id!r})")
        low, high = SAMPLE_RATE_RANGE_HZ
        if not low <= self.sample_rate_hz <= high:
            raise ValueError(f"sample_rate_hz must be {low}..{high} (got {self.sample_rate_hz})")


class SimulatedDevice:
    """The device state machine, driven by received bytes and by its sample clock.

    ``sim_time_us`` counts simulated time since the simulator started and is
    never reset; fault events are scheduled on it. The device's own time
    (Telemetry.t_us) restarts at a device reset. ``uptime_us`` is how long the device
    had been powered up when the simulator started (its first t_us): real firmware counts
    t_us from power-up, usually long before the host's Configure (PROTOCOL.md section 6).

    Each sample interval is integrated in the fewest RK4 sub-steps that keep
    every step at or below ``max_step_us`` (set on each accepted Configure).
    """

    def __init__(
        self,
        identity: DeviceIdentity,
        plant: Plant,
        sensors: Sensors,
        transport: Transport,
        clock: SampleClock,
        schedule: FaultSchedule,
        max_step_us: int = 1000,
        uptime_us: int = 0,
    ):
        if max_step_us < 1:
            raise ValueError(f"max_step_us must be >= 1 (got {max_step_us!r})")
        if not 0 <= uptime_us < 1 << 63:
            raise ValueError(f"uptime_us must be 0 .. 2**63 - 1 (got {uptime_us!r})")
        self.max_step_us = max_step_us
        self.identity = identity
        self.plant = plant
        self.sensors = sensors
        self.transport = transport
        self.clock = clock
        self.schedule = schedule
        drive = plant.params.drive
        self._drive_params = drive
        self._drive_limit = drive.limit
        self._hello_fields = self._hello_payload()
        self._loop: asyncio.AbstractEventLoop | None = None
        self.sim_time_us = 0
        self.estop_pressed = False
        self.stuck_switches = 0
        self.resets = 0
        self.telemetry_sent = 0
        self.stream_telemetry_sent = 0
        # Told (fault bit, detail) whenever a fault becomes latched, e.g. to log it.
        self.on_fault_latched: Callable[[int, float], None] | None = None
        supply_v = sensors.params.supply_v
        self.supply_v = NAN if supply_v is None else supply_v  # as measured; NaN: not fitted
        self._jittery = sensors.jittery
        self._chattering = schedule.chattering
        self._switch_trip_m = switch_trip_m(plant.params.track)
        self._base_status = ST_WATCHDOG_ACTIVE | (ST_LOCKSTEP if clock.lockstep else 0)

        self._power_up()
        self.t_us = uptime_us

    # -- life cycle ----------------------------------------------------------------

    def _power_up(self) -> None:
        """The state after power-up or a reset (the plant and the encoders carry on)."""
        self.decoder = FrameDecoder(on_rejected=self._on_rejected)
        self.configured = False
        self.armed = False
        self.faults = F_RESET | (F_ESTOP if self.estop_pressed else 0)
        self.sample_rate_hz = self.identity.sample_rate_hz
        self.watchdog_ms = self.identity.watchdog_ms
        self.drive_output = 0.0
        self._pending_drive: float | None = None
        self.late_commands = 0
        self.t_us = 0
        self._sample_seq = -1
        self._tx_seqs: dict[type[Message], int] = {}
        self._period_us = 0
        self._nominal_next_us = 0
        self._last_feed_us = 0
        self._stall_until_us = 0
        self._first_sample = False

    def start(self, loop: asyncio.AbstractEventLoop) -> None:
        """Open the transport and say hello."""
        self._loop = loop
        self.transport.open(loop, self.on_bytes)
        self._send(encode(self._hello()))

    def close(self) -> None:
        self.clock.stop()
        self.transport.close()

    def reset(self) -> None:
        """A device reset: sampling stops, state returns to power-up, hello again."""
        self.clock.stop()
        self.resets += 1
        self._power_up()
        self._send(encode(self._hello()))

    # -- outgoing ------------------------------------------------------------------

    def _send(self, frame: bytes) -> None:
        if self.sim_time_us < self._stall_until_us:
            return
        self.transport.write(frame)

    def _next_seq(self, message_type: type[Message]) -> int:
        """The next header seq for ``message_type`` (one counter per type sent, section 5)."""
        seq = self._tx_seqs.get(message_type, 0)
        self._tx_seqs[message_type] = (seq + 1) & 0xFFFF
        return seq

    def _hello_payload(self) -> tuple:
        params = self.plant.params
        sensors = self.sensors.params
        capabilities = CAP_SIMULATED | (CAP_LOCKSTEP if self.clock.lockstep else 0)
        if params.track.has_limit_switches:
            capabilities |= CAP_LIMIT_SWITCHES
        if self.identity.has_estop_button:
            capabilities |= CAP_ESTOP_BUTTON
        if sensors.supply_v is not None:
            capabilities |= CAP_SUPPLY_VOLTAGE
        kind = DRIVE_KIND_VOLTS if params.drive.kind == "voltage" else DRIVE_KIND_NEWTONS
        return (
            PROTOCOL_VERSION,
            SCHEMA_FINGERPRINT,
            self.identity.device_id,
            *FIRMWARE_VERSION,
            self.identity.sample_rate_hz,
            sensors.cart_counts_per_m,
            sensors.pendulum_counts_per_rev,
            params.track.length_m,
            params.drive.limit,
            kind,
            capabilities,
        )

    def _hello(self, seq: int = UNPROMPTED_HELLO_SEQ) -> DeviceHello:
        """The hello: ``seq`` is the answered Identify's, or the unprompted hello's (section 6)."""
        return DeviceHello(seq, *self._hello_fields)

    def _reply(self, command: Message, result: ReplyResult) -> None:
        self._answer(command.TYPE_ID, command.seq, result)

    def _answer(self, for_type: int, for_seq: int, result: ReplyResult) -> None:
        self._send(encode(Reply(self._next_seq(Reply), for_type, for_seq, int(result))))

    def _latch_fault(self, bit: int, detail: float) -> None:
        """Latch fault ``bit``, cut the drive at once, disarm, and report it."""
        self.armed = False
        self.drive_output = 0.0
        self._pending_drive = None
        if self.faults & bit:
            return
        self.faults |= bit
        self._send(encode(FaultReport(self._next_seq(FaultReport), self.faults, bit, detail)))
        if self.on_fault_latched is not None:
            self.on_fault_latched(bit, detail)

    # -- incoming ------------------------------------------------------------------

    def on_bytes(self, data: bytes) -> None:
        """Act on every message in ``data``.

        A Drive comes once per sample, so it is handled here inline; in lockstep the one
        answering the latest sample has the clock take the next sample at once.
        """
        for message in self.decoder.feed(data):
            if type(message) is not Drive:
                self._on_command(message)
                continue
            if not self.configured:
                continue
            _seq, drive, answers_seq = message
            limit = self._drive_limit
            if not -limit <= drive <= limit:  # to clamp, or NaN or infinite (taken as 0)
                drive = applied_command(self._drive_params, drive) if math.isfinite(drive) else 0.0
            self._pending_drive = drive
            self._last_feed_us = self.t_us
            behind = (self._sample_seq - answers_seq) & 0xFFFF
            if behind == 0:
                self.clock.command_received()
            elif behind < 0x8000:
                self.late_commands = (self.late_commands + 1) & 0xFFFF

    def _on_rejected(self, frame: RejectedFrame) -> None:
        """A well-framed frame the decoder refused for its type or payload length."""
        self._answer(frame.type_id, frame.seq, frame.result)

    def _on_command(self, message: Message) -> None:
        kind = type(message)
        if kind is Heartbeat:
            self._last_feed_us = self.t_us
        elif kind is Configure:
            self._on_configure(message)
        elif kind is Arm:
            self._on_arm(message)
        elif kind is Stop:
            self.armed = False
            self.drive_output = 0.0
            self._pending_drive = None
            self._reply(message, ReplyResult.ACCEPTED)
        elif kind is ClearFaults:
            self.faults &= F_ESTOP if self.estop_pressed else 0
            self._reply(message, ReplyResult.FAULT_LATCHED if self.faults else ReplyResult.ACCEPTED)
        elif kind is Identify:
            self._send(encode(self._hello(message.seq)))
        else:
            self._reply(message, ReplyResult.UNKNOWN_TYPE)  # a device-to-host message sent to us

    def _on_configure(self, message: Configure) -> None:
        rate = message.sample_rate_hz
        if self.armed:
            self._reply(message, ReplyResult.NOT_NOW)
            return
        if not 1 <= rate <= self.identity.sample_rate_hz or message.watchdog_ms < 1:
            self._reply(message, ReplyResult.OUT_OF_RANGE)
            return
        self.sample_rate_hz = rate
        self.watchdog_ms = message.watchdog_ms
        self._reply(message, ReplyResult.ACCEPTED)
        self.clock.stop()
        self.configured = True
        self._period_us = round(1e6 / rate)
        self.plant.substeps = self._substeps_per_sample(self._period_us)
        self._sample_seq = -1
        self.stream_telemetry_sent = 0
        self._first_sample = True
        self._last_feed_us = self.t_us
        assert self._loop is not None, "start() the device before it receives commands"
        self.clock.start(self._loop, self.take_sample, 1.0 / rate)

    def _substeps_per_sample(self, period_us: int) -> int:
        """RK4 sub-steps for one sample interval, the longest one jitter allows included."""
        longest_us = period_us + self.sensors.max_sample_offset_us(period_us)
        return max(1, -(-longest_us // self.max_step_us))

    def _on_arm(self, message: Arm) -> None:
        if message.arm not in (0, 1):
            self._reply(message, ReplyResult.OUT_OF_RANGE)
        elif message.arm == 0:
            self.armed = False
            self.drive_output = 0.0
            self._pending_drive = None
            self._reply(message, ReplyResult.ACCEPTED)
        elif not self.configured:
            self._reply(message, ReplyResult.NOT_NOW)
        elif self.faults:
            self._reply(message, ReplyResult.FAULT_LATCHED)
        else:
            self.armed = True
            self._reply(message, ReplyResult.ACCEPTED)

    # -- the sample ----------------------------------------------------------------

    def take_sample(self) -> None:
        """One sample: integrate to the sample instant, run faults and watchdog, latch, report.

        In lockstep this runs once per Drive received, so it is the simulator's speed limit:
        the Telemetry frame is put together here (same bytes as ``encode(Telemetry(...))``)
        from the plant's state attributes, with no helper calls beyond the plant's step, the
        encoder reading and the frame encoder; fault events and jitter cost nothing unless
        there are any.
        """
        if self._first_sample:
            self._first_sample = False
            self._nominal_next_us = self.t_us
        else:
            self._nominal_next_us = sample_us = self._nominal_next_us + self._period_us
            if self._jittery:
                sample_us += self.sensors.sample_offset_us(self._period_us)
            dt_us = sample_us - self.t_us
            if dt_us > 0:
                self.plant.step(self.drive_output, dt_us * 1e-6)
                self.t_us += dt_us
                self.sim_time_us += dt_us
                if self.sim_time_us >= self.sensors.next_block_us:
                    self.sensors.start_block(self.sim_time_us)
        if self.sim_time_us >= self.schedule.next_at_us:
            for event in self.schedule.due(self.sim_time_us):
                self.apply_fault(event)
                if not self.configured:  # a reset: this sample never happened
                    return
        t_us = self.t_us
        if t_us - self._last_feed_us > self.watchdog_ms * 1000:
            self._latch_fault(F_WATCHDOG, (t_us - self._last_feed_us) * 1e-3)
        if not self.armed:
            self.drive_output = 0.0
        elif self._pending_drive is not None:
            self.drive_output = self._pending_drive
        self._pending_drive = None
        self._sample_seq = seq = (self._sample_seq + 1) & 0xFFFF

        plant = self.plant
        x_m = plant.x_m
        cart, pendulum = self.sensors.encoder_counts(x_m, plant.theta_rad)
        switches = self.stuck_switches
        if x_m <= -self._switch_trip_m:  # the limit switches (sim_device.track)
            switches |= SW_LIMIT_NEG
        if x_m >= self._switch_trip_m:
            switches |= SW_LIMIT_POS
        if self._chattering:
            switches ^= self.schedule.chatter()
        if plant.end_stop_touched:
            switches |= SW_END_STOP
        if self.estop_pressed:
            switches |= SW_ESTOP_BUTTON
        frame = encode_telemetry(
            seq,
            t_us,
            cart,
            pendulum,
            switches,
            self.faults,
            self._base_status | ST_ARMED if self.armed else self._base_status,
            self.drive_output,
            NAN,
            self.supply_v,
            self.late_commands,
        )
        if self.sim_time_us >= self._stall_until_us:  # as _send
            self.transport.write(frame)
            self.telemetry_sent += 1
            self.stream_telemetry_sent += 1

    # -- faults and the operator's button ------------------------------------------

    def apply_fault(self, event: FaultEvent) -> None:
        """Carry out one injected fault now."""
        if isinstance(event, Impulse):
            self.plant.apply_impulse(pendulum_ns=event.pendulum_ns, cart_ns=event.cart_ns)
        elif isinstance(event, Stall):
            self._stall_until_us = self.sim_time_us + round(event.duration_ms * 1000)
        elif isinstance(event, Reset):
            self.reset()
        elif isinstance(event, EncoderGlitch):
            self.sensors.glitch(event.encoder, event.counts)
        elif isinstance(event, StuckSwitch):
            self.stuck_switches |= _SWITCH_BITS[event.side]
        elif isinstance(event, DriverFault):
            self._latch_fault(F_DRIVER, NAN)
        elif isinstance(event, CartEncoderDead):
            self.sensors.stop_cart_counting(self.plant.x_m)
        elif isinstance(event, PendulumEncoderDead):
            self.sensors.stop_pendulum_counting(self.plant.theta_rad)
        elif isinstance(event, SupplySag):
            self.supply_v = event.supply_v
        else:
            raise TypeError(f"unknown fault event {event!r}")

    def press_estop(self) -> None:
        """The rig's e-stop button goes down: drive cut at once, F_ESTOP latched."""
        self.estop_pressed = True
        self._latch_fault(F_ESTOP, NAN)

    def release_estop(self) -> None:
        """The button comes up; F_ESTOP stays latched until ClearFaults."""
        self.estop_pressed = False
