"""Fuzz the frame decoder: random streams and bit-flipped frames never break it or fool it."""

import random

from protocol import (
    MAX_ENCODED_FRAME_BYTES,
    Drive,
    FrameDecoder,
    Heartbeat,
    Telemetry,
    cobs_decode,
    crc16,
    encode,
)
from protocol.make_vectors import EXAMPLE_MESSAGES

CASES = 100_000
VALID_FRAMES = [encode(message) for message in EXAMPLE_MESSAGES] + [
    encode(Telemetry(s, 1000 * s, -s, 3 * s, 0, 0, 1, 0.25 * s, 1.0, 24.0, 0)) for s in range(40)
]


def _frames_with_valid_crc(stream: bytes) -> int:
    """Delimited chunks of ``stream`` that are valid COBS with a matching CRC, counted here."""
    count = 0
    for chunk in stream.split(b"\x00"):
        try:
            raw = cobs_decode(chunk)
        except ValueError:
            continue
        if len(raw) >= 7 and crc16(raw[:-2]) == int.from_bytes(raw[-2:], "little"):
            count += 1
    return count


def test_random_streams_never_raise_and_the_frame_after_them_is_recovered():
    rng = random.Random(20240611)
    rejected = []
    decoder = FrameDecoder(on_rejected=rejected.append)
    for case in range(CASES):
        length = rng.randrange(600) if case % 100 == 0 else rng.randrange(48)
        garbage = rng.randbytes(length)
        if rng.random() < 0.5:  # make zeros common, so many short chunks reach the decoder
            garbage = bytes(b if rng.random() < 0.8 else 0 for b in garbage)
        frame = rng.choice(VALID_FRAMES)
        stream = garbage + b"\x00" + frame
        cut = rng.randrange(len(stream) + 1)
        messages = decoder.feed(stream[:cut]) + decoder.feed(stream[cut:])
        assert messages and encode(messages[-1]) == frame, (case, garbage.hex())
        if len(messages) > 1:  # something inside the garbage was accepted: it must be genuine
            assert len(messages) - 1 <= _frames_with_valid_crc(garbage), (case, garbage.hex())
        assert decoder.pending_bytes == 0
    counters = decoder.counters
    assert min(counters.cobs_errors, counters.runts, counters.crc_failures, counters.oversize) > 0
    # only well-framed refusals (counted as unknown type or malformed) reach on_rejected
    assert len(rejected) == counters.unknown_type + counters.malformed


def test_bit_flipped_frames_are_never_accepted_altered_and_never_hide_the_next_frame():
    rng = random.Random(8675309)
    decoder = FrameDecoder()
    follower = encode(Heartbeat(1))
    for case in range(CASES):
        frame = rng.choice(VALID_FRAMES)
        flipped = bytearray(frame)
        for _ in range(rng.choice((1, 1, 2, 3))):
            position = rng.randrange(len(frame) - 1)  # never the delimiter
            flipped[position] ^= 1 << rng.randrange(8)
        messages = decoder.feed(bytes(flipped) + follower)
        encoded = [encode(m) for m in messages]
        assert encoded[-1:] == [follower], case
        assert all(e == frame for e in encoded[:-1]), (case, bytes(flipped).hex())
    counters = decoder.counters
    rejected = counters.crc_failures + counters.cobs_errors + counters.runts
    assert rejected + counters.unknown_type + counters.malformed > CASES * 0.99


def test_memory_stays_bounded_for_a_megabyte_without_delimiter():
    decoder = FrameDecoder()
    junk = bytes(range(1, 256)) * 4112  # ~1 MB, no 0x00
    for start in range(0, len(junk), 4096):
        assert decoder.feed(junk[start:start + 4096]) == []
        assert decoder.pending_bytes <= MAX_ENCODED_FRAME_BYTES
    assert decoder.feed(b"\x00" + encode(Drive(1, 0.5, 1))) == [Drive(1, 0.5, 1)]
    assert decoder.counters.oversize == 1
    oversize_entry = decoder.counters.rx_frames[0]  # kept truncated in the ring
    assert len(oversize_entry[1]) == MAX_ENCODED_FRAME_BYTES and oversize_entry[2] == 4096


def test_feed_accepts_any_bytes_like_input():
    frame = encode(Heartbeat(3))
    for data in (frame, bytearray(frame), memoryview(frame)):
        assert FrameDecoder().feed(data) == [Heartbeat(3)]
