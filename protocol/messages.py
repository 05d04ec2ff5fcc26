"""The message catalogue of the Poise wire protocol, version 1.

One immutable record class (a ``typing.NamedTuple``) per message type. Every class has ``seq``
(the frame header's sequence number) as its first field, a ``TYPE_ID`` and a ``WIRE`` string
giving the ``struct`` code of each payload field in declaration order (little-endian, no
padding). The byte layout, units and rules are specified in PROTOCOL.md; this module is the
single source the codec and the schema fingerprint are built from.

Why named tuples: the decoder builds one message per telemetry frame, and a named tuple is made
straight from ``struct.unpack``'s tuple (``tuple.__new__(cls, values)``) in a fraction of the
microsecond a frozen dataclass's ``__init__`` takes. Equality is that of records, not of bare
tuples: a message equals only a message of the same class with the same field values
(:func:`_same_message`), so ``Stop(3) != ClearFaults(3)`` and ``Stop(3) != (3,)``.
"""

import zlib
from enum import IntEnum
from typing import NamedTuple

PROTOCOL_VERSION = 1

# switches (Telemetry.switches): inputs as read at the sample instant
SW_LIMIT_NEG = 1
SW_LIMIT_POS = 2
SW_ESTOP_BUTTON = 4
SW_END_STOP = 8  # cart against a hard end stop

# faults (Telemetry.faults, FaultReport.faults): latched until ClearFaults
F_WATCHDOG = 1  # motor cut because no Drive/Heartbeat arrived within watchdog_ms
F_DRIVER = 2
F_SUPPLY = 4
F_RESET = 8  # set after power-up or reset
F_ESTOP = 16  # e-stop button pressed
FAULT_BIT_NAMES = {
    F_WATCHDOG: "F_WATCHDOG", F_DRIVER: "F_DRIVER", F_SUPPLY: "F_SUPPLY", F_RESET: "F_RESET",
    F_ESTOP: "F_ESTOP",
}

# status (Telemetry.status)
ST_ARMED = 1
ST_WATCHDOG_ACTIVE = 2
ST_LOCKSTEP = 4

# capabilities (DeviceHello.capabilities)
CAP_LIMIT_SWITCHES = 1
CAP_MOTOR_CURRENT = 2
CAP_SUPPLY_VOLTAGE = 4
CAP_ESTOP_BUTTON = 8
CAP_SIMULATED = 16
CAP_LOCKSTEP = 32  # simulated only: samples once per Drive (section 8.4); needs CAP_SIMULATED

# DeviceHello.drive_kind
DRIVE_KIND_VOLTS = 0
DRIVE_KIND_NEWTONS = 1


UNPROMPTED_HELLO_SEQ = 0xFFFF
"""Header seq of a DeviceHello sent unprompted (after power-up or reset); a DeviceHello that
answers an Identify carries that Identify's seq instead (PROTOCOL.md section 6)."""


class ReplyResult(IntEnum):
    """Reply.result codes."""

    ACCEPTED = 0
    UNKNOWN_TYPE = 1
    BAD_PAYLOAD = 2
    NOT_NOW = 3  # not allowed in the device's present state
    OUT_OF_RANGE = 4
    FAULT_LATCHED = 5


def _same_message(self: tuple, other: object) -> bool:
    return type(other) is type(self) and tuple.__eq__(self, other)


def _different_message(self: tuple, other: object) -> bool:
    return not (type(other) is type(self) and tuple.__eq__(self, other))


def _message(cls: type[tuple]) -> type[tuple]:
    """Give a message class record equality (equal only to the same class); hashing stays the
    tuple's, which agrees with it."""
    cls.__eq__ = _same_message  # type: ignore[method-assign,assignment]
    cls.__ne__ = _different_message  # type: ignore[method-assign,assignment]
    return cls


# ---- device -> host -------------------------------------------------------------------------


@_message
class DeviceHello(NamedTuple):
    """The device's identity and geometry, sent in answer to Identify."""

    TYPE_ID = 0x01
    WIRE = "B I 16s B B B H f I f f B I"
    seq: int
    protocol_version: int
    schema_fingerprint: int
    device_id: str  # at most 16 ASCII characters, NUL-padded on the wire
    firmware_major: int
    firmware_minor: int
    firmware_patch: int
    sample_rate_hz: int
    cart_counts_per_m: float
    pendulum_counts_per_rev: int
    track_length_m: float
    drive_limit: float
    drive_kind: int
    capabilities: int


@_message
class Telemetry(NamedTuple):
    """One sample; header seq is the sample index (wraps at 65536)."""

    TYPE_ID = 0x02
    WIRE = "Q i i B H B f f f H"
    seq: int
    t_us: int
    cart_counts: int
    pendulum_counts: int
    switches: int
    faults: int
    status: int
    drive_applied: float
    motor_current_a: float  # NaN = not fitted
    supply_v: float  # NaN = not fitted
    late_commands: int  # wrapping count of Drive frames that arrived after their sample


@_message
class FaultReport(NamedTuple):
    """Sent when a fault flag becomes latched."""

    TYPE_ID = 0x03
    WIRE = "H H f"
    seq: int
    faults: int
    code: int
    detail: float


@_message
class Reply(NamedTuple):
    """The device's answer to an acknowledged host command."""

    TYPE_ID = 0x04
    WIRE = "B H B"
    seq: int
    for_type: int
    for_seq: int
    result: int  # a ReplyResult code


# ---- host -> device -------------------------------------------------------------------------


@_message
class Configure(NamedTuple):
    """Set the sample rate and watchdog timeout; (re)starts telemetry at seq 0."""

    TYPE_ID = 0x10
    WIRE = "H H"
    seq: int
    sample_rate_hz: int
    watchdog_ms: int


@_message
class Arm(NamedTuple):
    """Arm (arm=1) or disarm (arm=0) the motor drive."""

    TYPE_ID = 0x11
    WIRE = "B"
    seq: int
    arm: int


@_message
class Drive(NamedTuple):
    """The drive command answering telemetry ``answers_seq`` (volts or newtons); latest wins."""

    TYPE_ID = 0x12
    WIRE = "f H"
    seq: int
    drive: float
    answers_seq: int


@_message
class Heartbeat(NamedTuple):
    """Keeps the device watchdog fed while the host sends no Drive."""

    TYPE_ID = 0x13
    WIRE = ""
    seq: int


@_message
class Stop(NamedTuple):
    """Zero drive at once and disarm."""

    TYPE_ID = 0x14
    WIRE = ""
    seq: int


@_message
class ClearFaults(NamedTuple):
    """Clear latched fault flags whose cause is gone; never arms."""

    TYPE_ID = 0x15
    WIRE = ""
    seq: int


@_message
class Identify(NamedTuple):
    """Ask the device for its DeviceHello."""

    TYPE_ID = 0x16
    WIRE = ""
    seq: int


Message = (
    DeviceHello
    | Telemetry
    | FaultReport
    | Reply
    | Configure
    | Arm
    | Drive
    | Heartbeat
    | Stop
    | ClearFaults
    | Identify
)

DEVICE_MESSAGES: tuple[type[Message], ...] = (DeviceHello, Telemetry, FaultReport, Reply)
HOST_MESSAGES: tuple[type[Message], ...] = (
    Configure, Arm, Drive, Heartbeat, Stop, ClearFaults, Identify,
)
ALL_MESSAGES: tuple[type[Message], ...] = DEVICE_MESSAGES + HOST_MESSAGES
MESSAGES_BY_TYPE_ID: dict[int, type[Message]] = {cls.TYPE_ID: cls for cls in ALL_MESSAGES}

# Traffic classes: these host commands are answered (Reply, or DeviceHello for Identify) and
# retried by the host until answered; Drive and Heartbeat are latest-wins, never answered.
ACKED_MESSAGES: frozenset[type[Message]] = frozenset({Configure, Arm, Stop, ClearFaults, Identify})
ACKED_TYPE_IDS: frozenset[int] = frozenset(cls.TYPE_ID for cls in ACKED_MESSAGES)


def payload_fields(cls: type[Message]) -> list[tuple[str, str]]:
    """(field name, struct code) of each payload field of ``cls``, in wire order."""
    names = list(cls._fields[1:])  # the first field, seq, lives in the header
    codes = cls.WIRE.split()
    if len(names) != len(codes):
        raise TypeError(f"{cls.__name__}: {len(names)} payload fields but WIRE has {len(codes)}")
    return list(zip(names, codes))


def schema_text() -> str:
    """The canonical text the schema fingerprint is the CRC-32 of (spelled out in PROTOCOL.md).

    One line per message type in ascending type id: ``0x02 Telemetry t_us:Q cart_counts:i ...``
    with a trailing newline on every line.
    """
    lines = []
    for cls in sorted(ALL_MESSAGES, key=lambda c: c.TYPE_ID):
        parts = [f"0x{cls.TYPE_ID:02x}", cls.__name__]
        parts += [f"{name}:{code}" for name, code in payload_fields(cls)]
        lines.append(" ".join(parts) + "\n")
    return "".join(lines)


SCHEMA_FINGERPRINT: int = zlib.crc32(schema_text().encode("ascii"))
