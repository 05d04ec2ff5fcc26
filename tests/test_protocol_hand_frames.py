"""Frames assembled by hand from PROTOCOL.md's tables, byte by byte, against the codec.

The generated vectors (vectors.json) come from the codec itself; these bytes do
not. Each is written out with its derivation from the frame layout (section 3),
the message tables (section 6) and COBS (section 2). The CRC is the bitwise
CRC-16/CCITT-FALSE written out below from its catalogue parameters (Greg Cook,
"Catalogue of parametrised CRC algorithms": width 16, poly 0x1021, init 0xFFFF,
not reflected, xorout 0), not the codec's table-driven one.
"""

from __future__ import annotations

import math

from protocol import FrameDecoder, encode
from protocol.messages import Drive, Heartbeat, Telemetry


def crc_le(frame: bytes) -> bytes:
    """CRC-16/CCITT-FALSE of the frame so far, bit by bit, stored low byte first (section 3)."""
    crc = 0xFFFF
    for byte in frame:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) & 0xFFFF if crc & 0x8000 else (crc << 1) & 0xFFFF
    return bytes((crc & 0xFF, crc >> 8))


def test_the_bitwise_crc_gives_the_catalogue_check_value():
    assert crc_le(b"123456789") == bytes((0xB1, 0x29))  # check value 0x29B1 (Cook's catalogue)


# Drive answering telemetry 300 with +1.0 V, the host's 5th Drive (header seq 5).
#   version 01, flags 00, type 12 (Drive), seq 5 = 05 00 (u16 little-endian)
#   drive +1.0 as IEEE 754 binary32 = 0x3F800000 -> 00 00 80 3f (little-endian)
#   answers_seq 300 = 0x012C -> 2c 01
DRIVE_RAW = bytes.fromhex("01 00 12 05 0000 00 80 3f2c 01")
DRIVE_FRAME = DRIVE_RAW + crc_le(DRIVE_RAW)


def cobs_by_hand(frame: bytes) -> bytes:
    """Split at each zero byte; each block is prefixed by its length + 1 (Cheshire and Baker 1999).

    Only used on frames shorter than 254 bytes, so no 0xFF blocks arise.
    """
    out = b""
    for block in frame.split(b"\x00"):
        out += bytes((len(block) + 1,)) + block
    return out + b"\x00"


def test_a_drive_frame_written_out_by_hand_is_what_the_codec_encodes():
    assert len(DRIVE_FRAME) == 13  # PROTOCOL.md section 6, 0x12 Drive: "Frame 13 bytes"
    assert encode(Drive(seq=5, drive=1.0, answers_seq=300)) == cobs_by_hand(DRIVE_FRAME)


def test_cobs_by_hand_of_the_drive_frame():
    # 01 00 | 12 05 00 | 00 | 00 80 3f 2c 01 <crc>: blocks of 1, 2, 0, 0 then the rest
    blocks = DRIVE_FRAME.split(b"\x00")
    assert [len(b) for b in blocks[:4]] == [1, 2, 0, 0]
    wire = cobs_by_hand(DRIVE_FRAME)
    assert wire[:7] == bytes.fromhex("02 01 03 12 05 01 01")
    assert b"\x00" not in wire[:-1]


def test_a_heartbeat_is_seven_bytes_with_no_payload():
    raw = bytes.fromhex("01 00 13 2a 00")  # type 13, seq 42
    frame = raw + crc_le(raw)
    assert encode(Heartbeat(seq=42)) == cobs_by_hand(frame)


def test_a_telemetry_frame_assembled_by_hand_decodes_to_its_fields():
    # seq 7; t_us 1,000,000 = 0x0F4240 (u64 LE); cart -1 = ff ff ff ff (i32 two's complement);
    # pendulum 4096 = 0x1000 -> 00 10 00 00; switches 0x02; faults 0x0000; status 0x01;
    # drive_applied -12.0 = 0xC1400000 -> 00 00 40 c1; motor current NaN = 0x7FC00000 ->
    # 00 00 c0 7f; supply 24.0 = 0x41C00000 -> 00 00 c0 41; late commands 65535 -> ff ff.
    raw = bytes.fromhex(
        "01 00 02 07 00"
        "40 42 0f 00 00 00 00 00"
        "ff ff ff ff"
        "00 10 00 00"
        "02"
        "00 00"
        "01"
        "00 00 40 c1"
        "00 00 c0 7f"
        "00 00 c0 41"
        "ff ff"
    )
    frame = raw + crc_le(raw)
    assert len(frame) == 41  # section 6, 0x02 Telemetry: "Frame 41 bytes"
    (message,) = FrameDecoder().feed(cobs_by_hand(frame))
    assert isinstance(message, Telemetry)
    assert (message.seq, message.t_us, message.cart_counts, message.pendulum_counts) == (
        7,
        1_000_000,
        -1,
        4096,
    )
    assert (message.switches, message.faults, message.status) == (0x02, 0, 0x01)
    assert message.drive_applied == -12.0 and math.isnan(message.motor_current_a)
    assert (message.supply_v, message.late_commands) == (24.0, 65535)


def test_one_flipped_crc_bit_in_a_hand_made_frame_is_rejected():
    bad = DRIVE_FRAME[:-1] + bytes((DRIVE_FRAME[-1] ^ 0x01,))
    decoder = FrameDecoder()
    assert decoder.feed(cobs_by_hand(bad)) == []
    assert decoder.counters.crc_failures == 1
