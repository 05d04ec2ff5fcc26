"""Every message type survives encode -> decode unchanged, bit for bit; bad values are named."""

import math
import operator
import struct
import zlib

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import protocol
from protocol import (
    ALL_MESSAGES,
    ClearFaults,
    Drive,
    FrameDecoder,
    Stop,
    Telemetry,
    encode,
    encode_drive,
    encode_telemetry,
)
from protocol.layout import LAYOUTS_BY_CLASS
from protocol.messages import schema_text

_INTEGER_RANGES = {
    "B": (0, 2**8 - 1), "H": (0, 2**16 - 1), "I": (0, 2**32 - 1), "Q": (0, 2**64 - 1),
    "i": (-(2**31), 2**31 - 1),
}
_F32_MAX = struct.unpack("<f", bytes.fromhex("ffff7f7f"))[0]


def _field_strategy(code: str) -> st.SearchStrategy:
    if code in _INTEGER_RANGES:
        return st.integers(*_INTEGER_RANGES[code])
    if code == "f":
        return st.floats(width=32, allow_nan=True, allow_infinity=True)
    return st.text(st.characters(min_codepoint=1, max_codepoint=127), max_size=16)


def _message_strategy(cls) -> st.SearchStrategy:
    layout = LAYOUTS_BY_CLASS[cls]
    field_strategies = {
        name: _field_strategy(code) for name, code in zip(layout.field_names, layout.field_codes)
    }
    return st.builds(cls, seq=st.integers(0, 2**16 - 1), **field_strategies)


def _bitwise(message) -> tuple:
    """Field values with f32 fields as their 4 wire bytes, so NaN == NaN and -0.0 != 0.0."""
    layout = LAYOUTS_BY_CLASS[type(message)]
    values = [message.seq]
    for name, code in zip(layout.field_names, layout.field_codes):
        value = getattr(message, name)
        values.append(struct.pack("<f", value) if code == "f" else value)
    return (type(message), *values)


def _round_trip(message):
    decoder = FrameDecoder()
    decoded = decoder.feed(encode(message))
    assert len(decoded) == 1, decoder.last_error
    return decoded[0]


@pytest.mark.parametrize("cls", ALL_MESSAGES, ids=lambda cls: cls.__name__)
@settings(max_examples=150, deadline=None)
@given(data=st.data())
def test_every_message_type_round_trips_bitwise(cls, data):
    message = data.draw(_message_strategy(cls))
    decoded = _round_trip(message)
    assert type(decoded) is cls
    assert _bitwise(decoded) == _bitwise(message)


def _extreme(cls, pick: int):
    """Every field at its minimum (pick=0) or maximum (pick=1) wire value."""
    layout = LAYOUTS_BY_CLASS[cls]
    values = {}
    for name, code in zip(layout.field_names, layout.field_codes):
        if code in _INTEGER_RANGES:
            values[name] = _INTEGER_RANGES[code][pick]
        elif code == "f":
            values[name] = (-_F32_MAX, _F32_MAX)[pick]
        else:
            values[name] = ("", "~" * 16)[pick]
    return cls(seq=(0, 0xFFFF)[pick], **values)


@pytest.mark.parametrize("pick", [0, 1], ids=["minimum", "maximum"])
@pytest.mark.parametrize("cls", ALL_MESSAGES, ids=lambda cls: cls.__name__)
def test_every_message_type_round_trips_at_extreme_values(cls, pick):
    message = _extreme(cls, pick)
    assert _bitwise(_round_trip(message)) == _bitwise(message)


@pytest.mark.parametrize("value", [math.nan, math.inf, -math.inf, -0.0, 1e-45])
def test_special_floats_keep_their_bits(value):
    message = Telemetry(1, 2, 3, 4, 5, 6, 7, value, value, value, 8)
    assert _bitwise(_round_trip(message)) == _bitwise(message)


@settings(max_examples=300, deadline=None)
@given(
    seq=st.integers(0, 2**16 - 1),
    drive=st.floats(width=32),
    answers_seq=st.integers(0, 2**16 - 1),
)
def test_encode_drive_fast_path_gives_the_same_bytes_as_encode(seq, drive, answers_seq):
    assert encode_drive(seq, drive, answers_seq) == encode(Drive(seq, drive, answers_seq))


_TELEMETRY_FIELDS = {
    name: _field_strategy(code)
    for name, code in zip(LAYOUTS_BY_CLASS[Telemetry].field_names, LAYOUTS_BY_CLASS[Telemetry].field_codes)
}


@settings(max_examples=300, deadline=None)
@given(seq=st.integers(0, 2**16 - 1), **_TELEMETRY_FIELDS)
def test_encode_telemetry_fast_path_gives_the_same_bytes_as_encode(**fields):
    assert encode_telemetry(**fields) == encode(Telemetry(**fields))


def test_encode_telemetry_reports_a_bad_value_like_encode():
    with pytest.raises(ValueError, match="field cart_counts=2147483648 does not fit i32"):
        encode_telemetry(1, 0, 2**31, 0, 0, 0, 0, 0.0, 0.0, 0.0, 0)


def test_decoded_messages_are_immutable_equal_and_hashable_like_constructed_ones():
    message = Telemetry(9, 2, 3, 4, 5, 6, 7, 1.5, 2.5, 3.5, 8)
    decoded = _round_trip(message)
    assert type(decoded) is Telemetry
    assert operator.eq(decoded, message) and not operator.ne(decoded, message)
    assert hash(decoded) == hash(message)
    assert decoded._replace(seq=10).seq == 10 and decoded._replace(seq=10) != message
    with pytest.raises(AttributeError):
        decoded.seq = 10


def test_messages_equal_only_messages_of_the_same_type():
    # Messages are records: same field values in another message type, or in a bare tuple, are
    # a different value.
    for other in (ClearFaults(3), (3,), Stop(4)):
        assert operator.ne(Stop(3), other) and not operator.eq(Stop(3), other), other
    assert operator.eq(Stop(3), Stop(3)) and not operator.ne(Stop(3), Stop(3))
    assert len({Stop(3), ClearFaults(3), Stop(3)}) == 2


def test_every_message_has_seq_as_its_first_field():
    for cls in ALL_MESSAGES:
        assert cls._fields[0] == "seq", cls.__name__


@pytest.mark.parametrize(
    ("message", "expected"),
    [
        (Drive(70000, 1.0, 1), "cannot encode Drive: field seq=70000 does not fit u16"),
        (Drive(1, 1.0, -1), "cannot encode Drive: field answers_seq=-1 does not fit u16"),
        (Drive(1, 1e39, 1), "cannot encode Drive: field drive=1e+39 does not fit f32"),
        (
            Telemetry(1, -1, 0, 0, 0, 0, 0, 0.0, 0.0, 0.0, 0),
            "cannot encode Telemetry: field t_us=-1 does not fit u64",
        ),
    ],
)
def test_encode_names_the_field_that_does_not_fit(message, expected):
    with pytest.raises(ValueError) as error:
        encode(message)
    assert str(error.value).startswith(expected)


@pytest.mark.parametrize("device_id", ["x" * 17, "rig-é", "a\x00b"])
def test_encode_refuses_a_device_id_that_is_not_short_nul_free_ascii(device_id):
    hello = _extreme(protocol.DeviceHello, 0)._replace(device_id=device_id)
    with pytest.raises(ValueError, match="field device_id"):
        encode(hello)


def test_encode_drive_reports_a_bad_value_like_encode():
    with pytest.raises(ValueError, match="field answers_seq=65536"):
        encode_drive(1, 0.0, 65536)


def test_schema_fingerprint_is_the_crc32_of_the_schema_text():
    # CRC-32 as in zlib is CRC-32/ISO-HDLC; check value 0xCBF43926 for "123456789" per
    # Greg Cook, "Catalogue of parametrised CRC algorithms".
    assert zlib.crc32(b"123456789") == 0xCBF43926
    assert protocol.SCHEMA_FINGERPRINT == zlib.crc32(schema_text().encode("ascii"))


def test_schema_text_changes_when_a_field_type_changes(monkeypatch):
    before = schema_text()
    monkeypatch.setattr(Telemetry, "WIRE", "Q i i B H B f f f I")  # late_commands u16 -> u32
    assert schema_text() != before


def test_acked_messages_are_the_operator_commands():
    assert {cls.__name__ for cls in protocol.ACKED_MESSAGES} == {
        "Configure", "Arm", "Stop", "ClearFaults", "Identify",
    }
