"""CRC-16/CCITT-FALSE, the frame check of the Poise wire protocol.

Parameters (Greg Cook, "Catalogue of parametrised CRC algorithms", entry CRC-16/IBM-3740,
alias CRC-16/CCITT-FALSE): width 16, poly 0x1021, init 0xFFFF, refin false, refout false,
xorout 0x0000, check 0x29B1. ``binascii.crc_hqx`` implements exactly this polynomial without
reflection; seeding it with 0xFFFF gives the catalogue algorithm at C speed.
"""

from binascii import crc_hqx

CRC_INIT = 0xFFFF


def crc16(data: bytes) -> int:
    """Return the CRC-16/CCITT-FALSE of ``data`` as an int in 0..0xFFFF."""
    return crc_hqx(data, CRC_INIT)
