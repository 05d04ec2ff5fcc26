"""protocol/vectors.json and the worked examples of PROTOCOL.md agree with the codec."""

import json
import re
import struct
from pathlib import Path

import pytest

from protocol import FrameDecoder, ReplyResult, cobs_decode, crc16, encode
from protocol.layout import LAYOUTS_BY_CLASS
from protocol.make_vectors import ERROR_COUNTERS, message_from_json, vectors_json
from protocol.messages import MESSAGES_BY_TYPE_ID, SCHEMA_FINGERPRINT, schema_text

PROTOCOL_DIR = Path(__file__).resolve().parent.parent / "protocol"
VECTORS = json.loads((PROTOCOL_DIR / "vectors.json").read_text(encoding="utf-8"))
SPEC = (PROTOCOL_DIR / "PROTOCOL.md").read_text(encoding="utf-8")
GARBAGE = bytes.fromhex("ff 13 37 00 00 c0 de 42 00")  # ends in a delimiter, so frames survive


def test_committed_vectors_equal_the_regenerated_ones():
    assert (PROTOCOL_DIR / "vectors.json").read_text(encoding="utf-8") == vectors_json(), (
        "vectors.json is stale: run python -m protocol.make_vectors"
    )


def test_vectors_cover_every_message_type():
    assert {entry["type_id"] for entry in VECTORS["messages"]} == set(MESSAGES_BY_TYPE_ID)


def _wire_bits(message) -> bytes:
    return encode(message)  # bitwise comparison: NaN fields compare equal


def _feed_in_pieces(stream: bytes, piece: int | None) -> tuple[list, FrameDecoder]:
    decoder = FrameDecoder()
    if piece is None:
        return decoder.feed(stream), decoder
    messages = []
    for start in range(0, len(stream), piece):
        messages += decoder.feed(stream[start:start + piece])
    return messages, decoder


def _halves(stream: bytes) -> list[bytes]:
    return [stream[: len(stream) // 2], stream[len(stream) // 2:]]


SPLITS = {"whole": None, "byte by byte": 1, "7-byte pieces": 7}


@pytest.mark.parametrize("entry", VECTORS["messages"], ids=lambda e: e["type"])
def test_message_vector_frame_is_what_the_encoder_produces(entry):
    message = message_from_json(entry)
    frame = bytes.fromhex(entry["frame_hex"])
    assert encode(message) == frame
    raw = bytes.fromhex(entry["raw_hex"])
    assert cobs_decode(frame[:-1]) == raw
    assert crc16(raw[:-2]) == int.from_bytes(raw[-2:], "little")


@pytest.mark.parametrize("split", SPLITS)
@pytest.mark.parametrize("entry", VECTORS["messages"], ids=lambda e: e["type"])
def test_message_vector_decodes_fed_in_any_pieces(entry, split):
    frame = bytes.fromhex(entry["frame_hex"])
    messages, decoder = _feed_in_pieces(frame, SPLITS[split])
    assert [_wire_bits(m) for m in messages] == [frame]
    assert decoder.counters.frames_rx == 1


@pytest.mark.parametrize("entry", VECTORS["messages"], ids=lambda e: e["type"])
def test_message_vector_decodes_fed_in_halves(entry):
    frame = bytes.fromhex(entry["frame_hex"])
    decoder = FrameDecoder()
    assert decoder.feed(_halves(frame)[0]) == []
    assert [_wire_bits(m) for m in decoder.feed(_halves(frame)[1])] == [frame]


@pytest.mark.parametrize("split", SPLITS)
def test_all_message_vectors_survive_garbage_before_between_and_after(split):
    frames = [bytes.fromhex(entry["frame_hex"]) for entry in VECTORS["messages"]]
    stream = GARBAGE + GARBAGE.join(frames) + GARBAGE[:-1]  # trailing garbage left unterminated
    messages, decoder = _feed_in_pieces(stream, SPLITS[split])
    assert [_wire_bits(m) for m in messages] == frames
    assert decoder.counters.frames_rx == len(frames)
    assert decoder.counters.resyncs > 0


def _check_outcome(case, messages, decoder):
    expected = [message_from_json(entry) for entry in case["expected_messages"]]
    assert [_wire_bits(m) for m in messages] == [_wire_bits(m) for m in expected]
    counters = decoder.counters.counters()
    for name in ERROR_COUNTERS:
        assert counters[name] == case["expected_counters"].get(name, 0), name


@pytest.mark.parametrize("split", SPLITS)
@pytest.mark.parametrize("case", VECTORS["malformed"], ids=lambda c: c["name"])
def test_malformed_vector_gives_the_stated_outcome_fed_in_any_pieces(case, split):
    stream = bytes.fromhex(case["stream_hex"])
    messages, decoder = _feed_in_pieces(stream, SPLITS[split])
    _check_outcome(case, messages, decoder)
    assert decoder.counters.bytes_rx == len(stream)


@pytest.mark.parametrize("case", VECTORS["malformed"], ids=lambda c: c["name"])
def test_malformed_vector_gives_the_stated_outcome_fed_in_halves(case):
    stream = bytes.fromhex(case["stream_hex"])
    decoder = FrameDecoder()
    messages = decoder.feed(_halves(stream)[0]) + decoder.feed(_halves(stream)[1])
    _check_outcome(case, messages, decoder)


@pytest.mark.parametrize("case", VECTORS["malformed"], ids=lambda c: c["name"])
def test_only_well_framed_refusals_reach_on_rejected_with_their_header(case):
    # PROTOCOL.md section 7: a well-framed frame of an unknown type is answered UNKNOWN_TYPE, of
    # a wrong length BAD_PAYLOAD; frames failing COBS, CRC, version or flags checks are only
    # counted (their header cannot be trusted). In every vector the refused frame comes first.
    stream = bytes.fromhex(case["stream_hex"])
    rejected = []
    FrameDecoder(on_rejected=rejected.append).feed(stream)
    counts = case["expected_counters"]
    assert [r.result for r in rejected] == (
        [ReplyResult.UNKNOWN_TYPE] * counts.get("unknown_type", 0)
        + [ReplyResult.BAD_PAYLOAD] * counts.get("malformed", 0)
    )
    if rejected:
        header = cobs_decode(stream.split(b"\x00")[0])
        assert [(r.type_id, r.seq) for r in rejected] == [(header[2], int.from_bytes(header[3:5], "little"))]


def test_vectors_header_matches_the_code():
    assert VECTORS["schema_fingerprint"] == f"0x{SCHEMA_FINGERPRINT:08X}"
    assert VECTORS["schema_text"] == schema_text()
    # Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/IBM-3740: check 0x29B1
    assert VECTORS["crc_check"] == {"input_ascii": "123456789", "crc16": "0x29B1"}


# ---- PROTOCOL.md ------------------------------------------------------------------------------

_EXAMPLE = re.compile(
    r"#### Example: (\w+) \(0x([0-9A-F]{2})\)\n\nfields: `(\{.*?\})`\n\n```text\n"
    r"raw:\s+([0-9a-f |]+)\nframe:\s+([0-9a-f ]+)\n```"
)
_MESSAGE_SECTION = re.compile(
    r"^### 0x([0-9A-F]{2}) (\w+)\n(.*?)(?=^### |^## )", re.MULTILINE | re.DOTALL
)
_TABLE_ROW = re.compile(r"^\| (\d+) \| (\d+) \| (\w+(?:\[16\])?) \| `(\w+)` \|", re.MULTILINE)
_TYPE_NAMES = {
    "B": "u8", "H": "u16", "I": "u32", "Q": "u64", "i": "i32", "f": "f32", "16s": "char[16]",
}


def test_spec_has_a_worked_example_of_every_message_type_matching_the_encoder():
    examples = _EXAMPLE.findall(SPEC)
    assert sorted(name for name, *_ in examples) == sorted(c.__name__ for c in LAYOUTS_BY_CLASS)
    for name, type_hex, fields_json, raw_hex, frame_hex in examples:
        message = message_from_json({"type": name, "fields": json.loads(fields_json)})
        assert type(message).TYPE_ID == int(type_hex, 16)
        frame = encode(message)
        assert frame == bytes.fromhex(frame_hex), name
        assert cobs_decode(frame[:-1]) == bytes.fromhex(raw_hex.replace("|", "")), name


def test_spec_field_tables_match_the_wire_layout():
    sections = {name: body for _, name, body in _MESSAGE_SECTION.findall(SPEC)}
    for cls, layout in LAYOUTS_BY_CLASS.items():
        assert f"### 0x{layout.type_id:02X} {cls.__name__}" in SPEC
        rows = _TABLE_ROW.findall(sections[cls.__name__])
        expected, offset = [], 5
        for name, code in zip(layout.field_names, layout.field_codes):
            size = struct.calcsize("<" + code)
            expected.append((str(offset), str(size), _TYPE_NAMES[code], name))
            offset += size
        assert rows == expected, cls.__name__
        section_text = sections[cls.__name__].replace("\n", " ").lower()
        assert f"frame {layout.frame_size} bytes" in section_text


def test_spec_states_the_schema_fingerprint_and_its_text():
    assert f"the fingerprint is **0x{SCHEMA_FINGERPRINT:08X}**" in SPEC
    assert "```text\n" + schema_text() + "```" in SPEC
