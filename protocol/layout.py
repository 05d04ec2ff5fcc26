"""Byte layout of frames: the header and per-type precompiled structs.

A frame before COBS is ``version u8 | flags u8 | type u8 | seq u16 | payload | crc u16``,
all little-endian, the CRC-16/CCITT-FALSE covering every byte before it.
"""

import struct
from dataclasses import dataclass

from protocol.messages import ALL_MESSAGES, Message, payload_fields

HEADER = struct.Struct("<BBBH")
HEADER_SIZE = HEADER.size  # 5
CRC = struct.Struct("<H")
CRC_SIZE = CRC.size  # 2
MIN_FRAME_BYTES = HEADER_SIZE + CRC_SIZE
MAX_FRAME_BYTES = 254  # decoded; its COBS encoding then fits in 255 bytes plus the delimiter
MAX_ENCODED_FRAME_BYTES = MAX_FRAME_BYTES + 1

# flags byte: a reader must reject a frame with a must-understand bit it does not know, and
# may ignore unknown may-ignore bits. Version 1 defines no flag bits at all.
FLAGS_MUST_UNDERSTAND_MASK = 0x0F
FLAGS_MAY_IGNORE_MASK = 0xF0
KNOWN_MUST_UNDERSTAND_FLAGS = 0x00

TEXT_CODE = "16s"


@dataclass(frozen=True, slots=True)
class Layout:
    """Everything needed to encode or decode one message type."""

    cls: type[Message]
    type_id: int
    field_names: tuple[str, ...]
    field_codes: tuple[str, ...]
    body: struct.Struct  # header + payload, for encoding
    frame: struct.Struct  # whole decoded frame; unpacks to (seq, *payload fields)
    frame_size: int
    text_indexes: tuple[int, ...]  # positions in (seq, *fields) of NUL-padded ASCII fields


def _layout(cls: type[Message]) -> Layout:
    pairs = payload_fields(cls)
    codes = "".join(code for _, code in pairs)
    body = struct.Struct("<BBBH" + codes)
    return Layout(
        cls=cls,
        type_id=cls.TYPE_ID,
        field_names=tuple(name for name, _ in pairs),
        field_codes=tuple(code for _, code in pairs),
        body=body,
        frame=struct.Struct("<3xH" + codes + "2x"),
        frame_size=body.size + CRC_SIZE,
        text_indexes=tuple(1 + i for i, (_, code) in enumerate(pairs) if code == TEXT_CODE),
    )


LAYOUTS_BY_CLASS: dict[type[Message], Layout] = {cls: _layout(cls) for cls in ALL_MESSAGES}
LAYOUTS_BY_TYPE_ID: dict[int, Layout] = {lay.type_id: lay for lay in LAYOUTS_BY_CLASS.values()}
