"""Encoding messages into whole wire frames (COBS-encoded, with the trailing 0x00 delimiter)."""

import struct
from binascii import crc_hqx

from cobs import cobs as _cobs

from protocol.crc import CRC_INIT
from protocol.layout import CRC, LAYOUTS_BY_CLASS, TEXT_CODE, Layout
from protocol.messages import PROTOCOL_VERSION, Drive, Message, Telemetry

DELIMITER = b"\x00"
TEXT_FIELD_BYTES = 16

_DRIVE_BODY = LAYOUTS_BY_CLASS[Drive].body
_DRIVE_TYPE_ID = Drive.TYPE_ID
_TELEMETRY_BODY = LAYOUTS_BY_CLASS[Telemetry].body
_TELEMETRY_TYPE_ID = Telemetry.TYPE_ID
_crc_pack = CRC.pack
_cobs_encode = _cobs.encode


def seal_frame(body: bytes) -> bytes:
    """Append the CRC to a header+payload ``body``, COBS-encode it and add the delimiter."""
    return _cobs_encode(body + _crc_pack(crc_hqx(body, CRC_INIT))) + DELIMITER


def encode_drive(seq: int, drive: float, answers_seq: int) -> bytes:
    """Fast path for the per-sample Drive frame; same bytes as ``encode(Drive(...))``."""
    try:
        body = _DRIVE_BODY.pack(PROTOCOL_VERSION, 0, _DRIVE_TYPE_ID, seq, drive, answers_seq)
    except (struct.error, OverflowError):
        return encode(Drive(seq, drive, answers_seq))  # raises the descriptive ValueError
    return _cobs_encode(body + _crc_pack(crc_hqx(body, CRC_INIT))) + DELIMITER


def encode_telemetry(
    seq: int,
    t_us: int,
    cart_counts: int,
    pendulum_counts: int,
    switches: int,
    faults: int,
    status: int,
    drive_applied: float,
    motor_current_a: float,
    supply_v: float,
    late_commands: int,
) -> bytes:
    """Fast path for the per-sample Telemetry frame; same bytes as ``encode(Telemetry(...))``."""
    try:
        body = _TELEMETRY_BODY.pack(
            PROTOCOL_VERSION, 0, _TELEMETRY_TYPE_ID, seq, t_us, cart_counts, pendulum_counts,
            switches, faults, status, drive_applied, motor_current_a, supply_v, late_commands,
        )
    except (struct.error, OverflowError):
        return encode(Telemetry(  # raises the descriptive ValueError
            seq, t_us, cart_counts, pendulum_counts, switches, faults, status, drive_applied,
            motor_current_a, supply_v, late_commands,
        ))
    return _cobs_encode(body + _crc_pack(crc_hqx(body, CRC_INIT))) + DELIMITER


def encode(message: Message) -> bytes:
    """Encode ``message`` as a whole frame including the trailing 0x00 delimiter.

    Raises ValueError naming the message type and field when a value does not fit its wire type.
    """
    layout = LAYOUTS_BY_CLASS.get(type(message))
    if layout is None:
        raise TypeError(f"cannot encode {type(message).__name__}: not a protocol message")
    values = list(message)  # seq, then the payload fields in wire order
    for index in layout.text_indexes:
        values[index] = _text_to_wire(layout, index, values[index])
    try:
        body = layout.body.pack(PROTOCOL_VERSION, 0, layout.type_id, *values)
    except (struct.error, OverflowError):
        raise ValueError(_describe_bad_field(layout, values)) from None
    return seal_frame(body)


def _text_to_wire(layout: Layout, index: int, text: str) -> bytes:
    name = layout.field_names[index - 1]
    try:
        raw = text.encode("ascii")
    except (UnicodeEncodeError, AttributeError):
        raise ValueError(
            f"cannot encode {layout.cls.__name__}: field {name}={text!r} is not an ASCII string"
        ) from None
    if len(raw) > TEXT_FIELD_BYTES or b"\x00" in raw:
        raise ValueError(
            f"cannot encode {layout.cls.__name__}: field {name}={text!r} must be at most "
            f"{TEXT_FIELD_BYTES} characters without NUL"
        )
    return raw


_WIRE_TYPE_NAMES = {
    "B": "u8", "H": "u16", "I": "u32", "Q": "u64", "b": "i8", "h": "i16", "i": "i32",
    "q": "i64", "f": "f32", TEXT_CODE: "16-byte ASCII",
}


def _describe_bad_field(layout: Layout, values: list[object]) -> str:
    """Name the first field whose value ``struct`` refuses (seq first, then the payload)."""
    names = ("seq",) + layout.field_names
    codes = ("H",) + layout.field_codes
    for name, code, value in zip(names, codes, values):
        try:
            struct.pack("<" + code, value)
        except (struct.error, OverflowError) as error:
            return (
                f"cannot encode {layout.cls.__name__}: field {name}={value!r} does not fit "
                f"{_WIRE_TYPE_NAMES[code]} ({error})"
            )
    return f"cannot encode {layout.cls.__name__}: values {values!r} do not fit the layout"
