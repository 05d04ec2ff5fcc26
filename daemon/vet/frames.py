"""Host frames built byte by byte, including the malformed ones a conformance check sends.

The codec (:func:`protocol.encode`) only makes well-formed frames; a check of how the device
treats a bad CRC, another version, an unknown flag bit or an unknown type (PROTOCOL.md
sections 3 and 7) needs the header and CRC under its own control.
"""

from __future__ import annotations

from cobs import cobs

from protocol.crc import crc16
from protocol.layout import CRC, HEADER
from protocol.messages import PROTOCOL_VERSION


def raw_frame(
    type_id: int,
    seq: int,
    payload: bytes = b"",
    *,
    version: int = PROTOCOL_VERSION,
    flags: int = 0,
    crc_xor: int = 0,
) -> bytes:
    """COBS(header | payload | CRC) 0x00, the CRC XORed with ``crc_xor`` (non-zero: a bad CRC)."""
    body = HEADER.pack(version, flags, type_id, seq) + payload
    crc = crc16(body) ^ crc_xor
    return cobs.encode(body + CRC.pack(crc)) + b"\x00"
