"""The Poise wire protocol: COBS frames with CRC-16/CCITT-FALSE carrying typed messages.

Specification: protocol/PROTOCOL.md. Test vectors: protocol/vectors.json.
This package depends on nothing else in the repository.
"""

from protocol.cobs_codec import CobsError, cobs_decode, cobs_encode
from protocol.crc import crc16
from protocol.decoder import FrameDecoder, RejectedFrame
from protocol.encoder import encode, encode_drive, encode_telemetry, seal_frame
from protocol.handshake import HandshakeError, check_device_hello, hello_mismatch
from protocol.layout import (
    FLAGS_MAY_IGNORE_MASK,
    FLAGS_MUST_UNDERSTAND_MASK,
    MAX_ENCODED_FRAME_BYTES,
    MAX_FRAME_BYTES,
)
from protocol.link_stats import LinkStats
from protocol.messages import (
    ACKED_MESSAGES,
    ACKED_TYPE_IDS,
    ALL_MESSAGES,
    CAP_ESTOP_BUTTON,
    CAP_LIMIT_SWITCHES,
    CAP_LOCKSTEP,
    CAP_MOTOR_CURRENT,
    CAP_SIMULATED,
    CAP_SUPPLY_VOLTAGE,
    DEVICE_MESSAGES,
    DRIVE_KIND_NEWTONS,
    DRIVE_KIND_VOLTS,
    FAULT_BIT_NAMES,
    F_DRIVER,
    F_ESTOP,
    F_RESET,
    F_SUPPLY,
    F_WATCHDOG,
    HOST_MESSAGES,
    MESSAGES_BY_TYPE_ID,
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
    Telemetry,
)
from protocol.retry import RetryDue, RetryTracker

__all__ = [
    "ACKED_MESSAGES", "ACKED_TYPE_IDS", "ALL_MESSAGES", "CAP_ESTOP_BUTTON", "CAP_LIMIT_SWITCHES",
    "CAP_LOCKSTEP", "CAP_MOTOR_CURRENT", "CAP_SIMULATED", "CAP_SUPPLY_VOLTAGE", "DEVICE_MESSAGES",
    "DRIVE_KIND_NEWTONS", "DRIVE_KIND_VOLTS", "FLAGS_MAY_IGNORE_MASK", "FLAGS_MUST_UNDERSTAND_MASK",
    "FAULT_BIT_NAMES", "F_DRIVER", "F_ESTOP", "F_RESET", "F_SUPPLY", "F_WATCHDOG",
    "HOST_MESSAGES",
    "MAX_ENCODED_FRAME_BYTES", "MAX_FRAME_BYTES", "MESSAGES_BY_TYPE_ID", "PROTOCOL_VERSION",
    "SCHEMA_FINGERPRINT", "ST_ARMED", "ST_LOCKSTEP", "ST_WATCHDOG_ACTIVE", "SW_END_STOP",
    "SW_ESTOP_BUTTON", "SW_LIMIT_NEG", "SW_LIMIT_POS", "UNPROMPTED_HELLO_SEQ",
    "Arm", "ClearFaults", "CobsError", "Configure", "DeviceHello", "Drive", "FaultReport",
    "FrameDecoder", "HandshakeError", "Heartbeat", "Identify", "LinkStats", "Message",
    "RejectedFrame", "Reply", "ReplyResult", "RetryDue", "RetryTracker", "Stop", "Telemetry",
    "check_device_hello", "cobs_decode", "cobs_encode", "crc16", "encode", "encode_drive",
    "encode_telemetry", "hello_mismatch", "seal_frame",
]
