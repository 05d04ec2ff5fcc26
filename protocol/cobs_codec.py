"""COBS byte stuffing (Cheshire & Baker, "Consistent Overhead Byte Stuffing", IEEE/ACM ToN 1999).

Thin wrappers over the ``cobs`` C extension so the rest of the protocol package, and callers,
see one error type (:class:`CobsError`) instead of the extension's own.
"""

from cobs import cobs as _cobs


class CobsError(ValueError):
    """Raised by :func:`cobs_decode` for bytes that are not a valid COBS encoding."""


def cobs_encode(data: bytes) -> bytes:
    """COBS-encode ``data``; the result contains no 0x00 and carries no delimiter."""
    return _cobs.encode(data)


def cobs_decode(data: bytes) -> bytes:
    """Decode one COBS block given without its 0x00 delimiter."""
    try:
        return _cobs.decode(data)
    except _cobs.DecodeError as error:
        raise CobsError(str(error)) from None
