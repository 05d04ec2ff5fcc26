"""Generate protocol/vectors.json and the worked examples of PROTOCOL.md from the codec.

    python -m protocol.make_vectors              # rewrite protocol/vectors.json
    python -m protocol.make_vectors --markdown   # print the PROTOCOL.md examples section

Every malformed case states its expected decoder outcome by hand; generation fails if the
decoder disagrees, so the file never records a behaviour nobody chose.
"""

import argparse
import json
import math
from dataclasses import dataclass
from pathlib import Path

from cobs import cobs as _cobs

from protocol.crc import crc16
from protocol.decoder import FrameDecoder
from protocol.encoder import encode, seal_frame
from protocol.layout import CRC, HEADER, LAYOUTS_BY_CLASS
from protocol.link_stats import COUNTER_NAMES
from protocol.messages import (
    CAP_ESTOP_BUTTON,
    CAP_LIMIT_SWITCHES,
    CAP_SUPPLY_VOLTAGE,
    DRIVE_KIND_VOLTS,
    F_RESET,
    F_SUPPLY,
    MESSAGES_BY_TYPE_ID,
    PROTOCOL_VERSION,
    SCHEMA_FINGERPRINT,
    ST_ARMED,
    ST_WATCHDOG_ACTIVE,
    SW_LIMIT_NEG,
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
    schema_text,
)

VECTORS_PATH = Path(__file__).with_name("vectors.json")
ERROR_COUNTERS = tuple(
    name for name in COUNTER_NAMES if name not in ("frames_tx", "bytes_tx", "bytes_rx")
)

# Demo values of our own; every float is exactly representable in f32 so fields round-trip.
EXAMPLE_MESSAGES: tuple[Message, ...] = (
    DeviceHello(
        seq=0, protocol_version=PROTOCOL_VERSION, schema_fingerprint=SCHEMA_FINGERPRINT,
        device_id="kestrel-1", firmware_major=1, firmware_minor=4, firmware_patch=2,
        sample_rate_hz=500, cart_counts_per_m=40000.0, pendulum_counts_per_rev=4096,
        track_length_m=0.75, drive_limit=12.0, drive_kind=DRIVE_KIND_VOLTS,
        capabilities=CAP_LIMIT_SWITCHES | CAP_SUPPLY_VOLTAGE | CAP_ESTOP_BUTTON,
    ),
    Telemetry(
        seq=1234, t_us=2_468_000, cart_counts=-1500, pendulum_counts=2048,
        switches=SW_LIMIT_NEG, faults=0, status=ST_ARMED | ST_WATCHDOG_ACTIVE,
        drive_applied=-2.5, motor_current_a=math.nan, supply_v=24.25, late_commands=3,
    ),
    FaultReport(seq=1, faults=F_SUPPLY | F_RESET, code=F_SUPPLY, detail=9.5),
    Reply(seq=2, for_type=Configure.TYPE_ID, for_seq=1, result=ReplyResult.ACCEPTED),
    Configure(seq=1, sample_rate_hz=500, watchdog_ms=50),
    Arm(seq=1, arm=1),
    Drive(seq=1234, drive=-2.5, answers_seq=1234),
    Heartbeat(seq=17),
    Stop(seq=3),
    ClearFaults(seq=2),
    Identify(seq=0),
)


# ---- JSON form of messages (shared with the tests) -------------------------------------------


def _json_value(value: object) -> object:
    """f32 fields as JSON numbers; NaN and infinities as the strings "NaN", "Infinity"."""
    if isinstance(value, float) and not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    return int(value) if isinstance(value, int) else value


def message_to_json(message: Message) -> dict[str, object]:
    """``{"type": name, "fields": {...}}`` with every field including seq."""
    return {
        "type": type(message).__name__,
        "fields": {name: _json_value(value) for name, value in zip(message._fields, message)},
    }


def message_from_json(entry: dict[str, object]) -> Message:
    """Inverse of :func:`message_to_json`."""
    by_name = {cls.__name__: cls for cls in MESSAGES_BY_TYPE_ID.values()}
    layout = LAYOUTS_BY_CLASS[by_name[entry["type"]]]
    values = dict(entry["fields"])
    for name, code in zip(layout.field_names, layout.field_codes):
        if code == "f":
            values[name] = float(values[name])
    return layout.cls(**values)


# ---- hand-built malformed streams ------------------------------------------------------------


def _raw(message: Message) -> bytes:
    """The frame before COBS: header, payload, CRC."""
    return _cobs.decode(encode(message)[:-1])


def _sealed_with_header(message: Message, version: int, flags: int) -> bytes:
    """``message`` framed with a chosen header version and flags byte (valid CRC)."""
    body = _raw(message)[:-2]
    return seal_frame(HEADER.pack(version, flags, body[2], message.seq) + body[HEADER.size:])


@dataclass(frozen=True)
class MalformedCase:
    name: str
    description: str
    stream: bytes
    expected_messages: tuple[Message, ...]
    expected_counters: dict[str, int]  # error counters that must be non-zero; all others 0


def malformed_cases() -> list[MalformedCase]:
    drive_a, drive_b = Drive(10, 1.5, 10), Drive(11, -0.75, 11)
    heartbeat = Heartbeat(5)
    telemetry = EXAMPLE_MESSAGES[1]
    good_crc_raw = _raw(telemetry)
    bad_crc_raw = good_crc_raw[:-2] + CRC.pack(crc16(good_crc_raw[:-2]) ^ 0x0001)
    unknown_body = HEADER.pack(PROTOCOL_VERSION, 0, 0x7F, 9)
    short_drive = _raw(drive_a)[:-3]  # header + payload missing its last byte
    hello = EXAMPLE_MESSAGES[0]
    hello_raw = bytearray(_raw(hello)[:-2])
    hello_raw[HEADER.size + 5] = 0xE9  # first device_id byte: not ASCII
    return [
        MalformedCase(
            "bad_crc", "a Telemetry frame whose CRC low bit is flipped, then a good Drive",
            _cobs.encode(bad_crc_raw) + b"\x00" + encode(drive_a),
            (drive_a,), {"crc_failures": 1, "resyncs": 1, "frames_rx": 1},
        ),
        MalformedCase(
            "truncated", "the first 12 encoded bytes of a Telemetry frame (the sender was cut "
            "off), a delimiter, then a good Heartbeat; the cut happens to leave valid COBS, so "
            "the CRC check rejects it",
            encode(telemetry)[:12] + b"\x00" + encode(heartbeat),
            (heartbeat,), {"crc_failures": 1, "resyncs": 1, "frames_rx": 1},
        ),
        MalformedCase(
            "oversize", "300 bytes of 0x55 without a delimiter, then 0x00, then a good Heartbeat",
            b"\x55" * 300 + b"\x00" + encode(heartbeat),
            (heartbeat,), {"oversize": 1, "resyncs": 1, "frames_rx": 1},
        ),
        MalformedCase(
            "garbage_between_frames", "a Drive, the bytes 13 37 c0 de and a delimiter, a Drive",
            encode(drive_a) + bytes.fromhex("1337c0de") + b"\x00" + encode(drive_b),
            (drive_a, drive_b), {"cobs_errors": 1, "resyncs": 1, "frames_rx": 2},
        ),
        MalformedCase(
            "runt", "a valid COBS block of 3 bytes, shorter than header and CRC, then a Heartbeat",
            _cobs.encode(b"\x01\x02\x03") + b"\x00" + encode(heartbeat),
            (heartbeat,), {"runts": 1, "resyncs": 1, "frames_rx": 1},
        ),
        MalformedCase(
            "empty_frames", "three delimiters in a row (ignored, not errors), then a Heartbeat",
            b"\x00\x00\x00" + encode(heartbeat),
            (heartbeat,), {"frames_rx": 1},
        ),
        MalformedCase(
            "unknown_type", "a well-formed frame of type 0x7F with no payload, then a Heartbeat",
            seal_frame(unknown_body) + encode(heartbeat),
            (heartbeat,), {"unknown_type": 1, "frames_rx": 1},
        ),
        MalformedCase(
            "unknown_must_understand_flag", "a Heartbeat with flags 0x01 (must-understand bit 0, "
            "undefined in version 1): rejected",
            _sealed_with_header(heartbeat, PROTOCOL_VERSION, 0x01),
            (), {"unknown_flags": 1},
        ),
        MalformedCase(
            "may_ignore_flag", "a Heartbeat with flags 0x80 (may-ignore bit 7): accepted",
            _sealed_with_header(heartbeat, PROTOCOL_VERSION, 0x80),
            (heartbeat,), {"frames_rx": 1},
        ),
        MalformedCase(
            "other_protocol_version", "a Heartbeat whose header says protocol version 2",
            _sealed_with_header(heartbeat, 2, 0),
            (), {"bad_version": 1},
        ),
        MalformedCase(
            "payload_too_short", "a Drive frame one payload byte short (valid CRC)",
            seal_frame(short_drive),
            (), {"malformed": 1},
        ),
        MalformedCase(
            "device_id_not_ascii", "a DeviceHello whose device_id starts with byte 0xE9",
            seal_frame(bytes(hello_raw)),
            (), {"malformed": 1},
        ),
        MalformedCase(
            "telemetry_gap", "Telemetry seq 65534, 65535, 0 (a wrap), 3: one gap of 2 lost frames",
            b"".join(encode(telemetry._replace(seq=s)) for s in (65534, 65535, 0, 3)),
            tuple(telemetry._replace(seq=s) for s in (65534, 65535, 0, 3)),
            {"gaps": 1, "lost_frames": 2, "frames_rx": 4},
        ),
    ]


def decoder_outcome(stream: bytes) -> tuple[list[Message], dict[str, int]]:
    """Feed ``stream`` whole to a fresh decoder: messages, and the non-zero error counters."""
    decoder = FrameDecoder()
    messages = decoder.feed(stream)
    counters = decoder.counters.counters()
    return messages, {name: counters[name] for name in ERROR_COUNTERS if counters[name]}


def _same_messages(a: list[Message], b: list[Message]) -> bool:
    return [encode(m) for m in a] == [encode(m) for m in b]  # bitwise, so NaN compares equal


# ---- outputs ---------------------------------------------------------------------------------


def build_vectors() -> dict[str, object]:
    """The whole content of vectors.json."""
    messages = []
    for message in EXAMPLE_MESSAGES:
        frame = encode(message)
        entry = message_to_json(message)
        entry["type_id"] = type(message).TYPE_ID
        entry["raw_hex"] = _raw(message).hex()
        entry["frame_hex"] = frame.hex()
        messages.append(entry)
    malformed = []
    for case in malformed_cases():
        decoded, counters = decoder_outcome(case.stream)
        if not _same_messages(decoded, list(case.expected_messages)):
            raise AssertionError(f"vector {case.name}: decoder gave {decoded}")
        if counters != case.expected_counters:
            raise AssertionError(f"vector {case.name}: decoder counted {counters}")
        malformed.append({
            "name": case.name,
            "description": case.description,
            "stream_hex": case.stream.hex(),
            "expected_messages": [message_to_json(m) for m in case.expected_messages],
            "expected_counters": case.expected_counters,
        })
    return {
        "about": (
            "Test vectors for the Poise wire protocol (see PROTOCOL.md). 'messages': each "
            "message type with its field values, the frame before COBS ('raw_hex': header, "
            "payload, CRC) and the exact bytes on the wire ('frame_hex', delimiter included). "
            "'malformed': byte streams fed whole to a fresh decoder, with the messages it must "
            "return and the counters that must be non-zero (every other counter stays 0). "
            "f32 NaN/infinities appear as the strings \"NaN\", \"Infinity\", \"-Infinity\"."
        ),
        "protocol_version": PROTOCOL_VERSION,
        "schema_fingerprint": f"0x{SCHEMA_FINGERPRINT:08X}",
        "schema_text": schema_text(),
        "crc_check": {"input_ascii": "123456789", "crc16": f"0x{crc16(b'123456789'):04X}"},
        "counters": list(ERROR_COUNTERS),
        "messages": messages,
        "malformed": malformed,
    }


def vectors_json() -> str:
    return json.dumps(build_vectors(), indent=2) + "\n"


def examples_markdown() -> str:
    """The worked examples section of PROTOCOL.md (parsed back by the tests)."""
    blocks = []
    for message in EXAMPLE_MESSAGES:
        layout = LAYOUTS_BY_CLASS[type(message)]
        raw = _raw(message)
        header, payload, crc = raw[:HEADER.size], raw[HEADER.size:-2], raw[-2:]
        parts = [header.hex(" "), payload.hex(" "), crc.hex(" ")] if payload else [
            header.hex(" "), crc.hex(" ")
        ]
        blocks.append(
            f"#### Example: {type(message).__name__} (0x{layout.type_id:02X})\n\n"
            f"fields: `{json.dumps(message_to_json(message)['fields'])}`\n\n"
            "```text\n"
            f"raw:   {' | '.join(parts)}\n"
            f"frame: {encode(message).hex(' ')}\n"
            "```\n"
        )
    return "\n".join(blocks)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--markdown", action="store_true", help="print the PROTOCOL.md examples")
    args = parser.parse_args()
    if args.markdown:
        print(examples_markdown(), end="")
    else:
        VECTORS_PATH.write_text(vectors_json(), encoding="utf-8")
        print(f"wrote {VECTORS_PATH}")


if __name__ == "__main__":
    main()
