"""The C firmware's codec against the protocol's published test vectors.

Sources: protocol/vectors.json (every message type as field values, frame before COBS and
bytes on the wire; malformed streams with the messages and counters a receiver must reach),
and the CRC-16/CCITT-FALSE check value 0x29B1 for ASCII "123456789" from G. Cook,
"Catalogue of parametrised CRC algorithms", entry CRC-16/IBM-3740 (alias CRC-16/CCITT-FALSE).
"""

import json
import math
import struct
from pathlib import Path

import pytest

from tests.firmware_support import build, run

VECTORS = json.loads(
    (Path(__file__).resolve().parent.parent / "protocol" / "vectors.json").read_text()
)
TYPE_IDS = {m["type"]: m["type_id"] for m in VECTORS["messages"]}


def _rx(hex_stream: str) -> tuple[list[dict], list[str], dict[str, int]]:
    """Feed a stream to a fresh C receiver: (decoded messages, rejected lines, counters)."""
    lines = run(build("codec_driver"), f"rx {hex_stream}\n").splitlines()
    messages, rejected, counters = [], [], {}
    for line in lines:
        words = line.split()
        if words[0] == "msg":
            fields = dict(word.split("=", 1) for word in words[4:])
            messages.append(
                {"type_id": int(words[1]), "raw": words[2], "wire": words[3], "fields": fields}
            )
        elif words[0] == "rejected":
            rejected.append(line)
        elif words[0] == "counters":
            counters = {k: int(v) for k, v in (word.split("=") for word in words[1:])}
    return messages, rejected, counters


def _same_value(expected: object, printed: str) -> bool:
    """Compare a vector's field value with the driver's printed one, floats as f32."""
    if expected == "NaN":
        return printed == "NaN"
    if expected in ("Infinity", "-Infinity") or isinstance(expected, str):
        return printed == expected
    if isinstance(expected, float):
        value = float(printed)
        return not math.isnan(value) and struct.pack("<f", expected) == struct.pack("<f", value)
    return int(printed) == expected


def _assert_fields(expected: dict, printed: dict) -> None:
    assert set(printed) == set(expected), "the driver printed other fields than the vector has"
    for name, value in expected.items():
        assert _same_value(value, printed[name]), f"{name}: expected {value}, C gave {printed[name]}"


def test_crc_check_value() -> None:
    out = run(build("codec_driver"), "crc " + b"123456789".hex() + "\n")
    assert out.strip() == "crc " + VECTORS["crc_check"]["crc16"][2:].upper()


@pytest.mark.parametrize("vector", VECTORS["messages"], ids=lambda v: v["type"])
def test_vector_decodes_and_reencodes(vector: dict) -> None:
    messages, rejected, counters = _rx(vector["frame_hex"])
    assert rejected == []
    assert len(messages) == 1
    message = messages[0]
    assert message["type_id"] == vector["type_id"]
    _assert_fields(vector["fields"], message["fields"])
    assert message["raw"] == vector["raw_hex"]
    assert message["wire"] == vector["frame_hex"]
    assert counters["frames_rx"] == 1
    assert sum(counters.values()) == 1


@pytest.mark.parametrize("vector", VECTORS["malformed"], ids=lambda v: v["name"])
def test_malformed_stream(vector: dict) -> None:
    messages, _rejected, counters = _rx(vector["stream_hex"])
    assert [m["type_id"] for m in messages] == [
        TYPE_IDS[m["type"]] for m in vector["expected_messages"]
    ]
    for got, expected in zip(messages, vector["expected_messages"]):
        _assert_fields(expected["fields"], got["fields"])
    expected_counters = {name: 0 for name in VECTORS["counters"]}
    expected_counters.update(vector["expected_counters"])
    assert counters == expected_counters


def test_well_framed_refusals_carry_the_header() -> None:
    """Unknown type and wrong length are answered (PROTOCOL.md section 7), with their seq."""
    by_name = {v["name"]: v for v in VECTORS["malformed"]}
    _m, unknown, _c = _rx(by_name["unknown_type"]["stream_hex"])
    _m, short, _c = _rx(by_name["payload_too_short"]["stream_hex"])
    assert unknown == ["rejected 127 9 1"]  # UNKNOWN_TYPE
    assert short == ["rejected 18 10 2"]  # BAD_PAYLOAD
