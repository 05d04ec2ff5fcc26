"""CRC-16/CCITT-FALSE and COBS against published check values and examples."""

import pytest

from protocol import CobsError, cobs_decode, cobs_encode, crc16


def test_crc16_check_value_of_123456789_is_0x29b1():
    # Greg Cook, "Catalogue of parametrised CRC algorithms", CRC-16/IBM-3740 (CRC-16/CCITT-FALSE):
    # check = 0x29B1
    assert crc16(b"123456789") == 0x29B1


def test_crc16_of_empty_input_is_the_initial_value():
    # Same catalogue entry: init 0xFFFF, xorout 0x0000, so no input leaves the register as is.
    assert crc16(b"") == 0xFFFF


def _bitwise_crc16_ccitt_false(data: bytes) -> int:
    """The textbook shift-register form (poly 0x1021, init 0xFFFF, MSB first), as in PROTOCOL.md."""
    crc = 0xFFFF
    for byte in data:
        crc ^= byte << 8
        for _ in range(8):
            crc = ((crc << 1) ^ 0x1021) if crc & 0x8000 else crc << 1
            crc &= 0xFFFF
    return crc


@pytest.mark.parametrize("data", [b"\x00", b"\xff" * 7, bytes(range(256)), b"Poise frame"])
def test_crc16_matches_the_bitwise_algorithm_of_the_spec(data):
    assert crc16(data) == _bitwise_crc16_ccitt_false(data)


# Wikipedia, "Consistent Overhead Byte Stuffing", table "Encoding examples" (examples 1-11; listed
# from memory, each entry also follows by hand from the rules of Cheshire & Baker, "Consistent
# Overhead Byte Stuffing", IEEE/ACM ToN 1999). Encoded forms are given here without the 0x00
# delimiter the table appends.
_SEQ_01_FE = bytes(range(0x01, 0xFF))  # 254 non-zero bytes
COBS_EXAMPLES = [
    ("lone zero", b"\x00", "01 01"),
    ("two zeros", b"\x00\x00", "01 01 01"),
    ("zero, byte, zero", bytes.fromhex("001100"), "01 02 11 01"),
    ("embedded zero", bytes.fromhex("11220033"), "03 11 22 02 33"),
    ("no zero", bytes.fromhex("11223344"), "05 11 22 33 44"),
    ("trailing zeros", bytes.fromhex("11000000"), "02 11 01 01 01"),
    ("run of 254 non-zero", _SEQ_01_FE, "ff " + _SEQ_01_FE.hex(" ")),
    ("zero then 254 non-zero", b"\x00" + _SEQ_01_FE, "01 ff " + _SEQ_01_FE.hex(" ")),
    ("run of 255 non-zero", bytes(range(0x01, 0x100)), "ff " + _SEQ_01_FE.hex(" ") + " 02 ff"),
    (
        "254 non-zero then zero",
        bytes(range(0x02, 0x100)) + b"\x00",
        "ff " + bytes(range(0x02, 0x100)).hex(" ") + " 01 01",
    ),
    (
        "253 non-zero, zero, byte",
        bytes(range(0x03, 0x100)) + b"\x00\x01",
        "fe " + bytes(range(0x03, 0x100)).hex(" ") + " 02 01",
    ),
]


COBS_IDS = [example[0] for example in COBS_EXAMPLES]


@pytest.mark.parametrize(("name", "data", "encoded_hex"), COBS_EXAMPLES, ids=COBS_IDS)
def test_cobs_encodes_the_published_examples(name, data, encoded_hex):
    assert cobs_encode(data) == bytes.fromhex(encoded_hex)


@pytest.mark.parametrize(("name", "data", "encoded_hex"), COBS_EXAMPLES, ids=COBS_IDS)
def test_cobs_decodes_the_published_examples(name, data, encoded_hex):
    assert cobs_decode(bytes.fromhex(encoded_hex)) == data


@pytest.mark.parametrize(
    "bad", [b"\x05\x11\x22", b"\x02\x00\x01"], ids=["code past end", "zero inside"]
)
def test_cobs_decode_rejects_invalid_input_with_cobs_error(bad):
    with pytest.raises(CobsError):
        cobs_decode(bad)
