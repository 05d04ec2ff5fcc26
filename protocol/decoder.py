"""Incremental frame decoder: bytes in, typed messages out; never raises on any byte input."""

from binascii import crc_hqx
from collections.abc import Callable
from typing import NamedTuple

from cobs import cobs as _cobs

from protocol.crc import CRC_INIT
from protocol.layout import (
    FLAGS_MUST_UNDERSTAND_MASK,
    HEADER_SIZE,
    KNOWN_MUST_UNDERSTAND_FLAGS,
    LAYOUTS_BY_TYPE_ID,
    MAX_ENCODED_FRAME_BYTES,
    MIN_FRAME_BYTES,
)
from protocol.link_stats import LinkStats
from protocol.messages import (
    PROTOCOL_VERSION,
    SCHEMA_FINGERPRINT,
    DeviceHello,
    Message,
    ReplyResult,
    Telemetry,
)

_UNKNOWN_FLAGS_MASK = FLAGS_MUST_UNDERSTAND_MASK & ~KNOWN_MUST_UNDERSTAND_FLAGS
_HELLO_TYPE_ID = DeviceHello.TYPE_ID
_HELLO_PREFIX_BYTES = HEADER_SIZE + 5  # header + protocol_version u8 + schema_fingerprint u32
_cobs_decode = _cobs.decode
_CobsDecodeError = _cobs.DecodeError
_new_message = tuple.__new__  # builds a message (a named tuple) from struct.unpack's tuple

# type id -> (frame size, unpack of the whole frame to (seq, *fields), class, text positions)
_FRAME_TYPES: dict[int, tuple[int, Callable[[bytes], tuple], type[Message], tuple[int, ...]]] = {
    type_id: (layout.frame_size, layout.frame.unpack, layout.cls, layout.text_indexes)
    for type_id, layout in LAYOUTS_BY_TYPE_ID.items()
}


class RejectedFrame(NamedTuple):
    """A frame that passed the COBS, CRC, version and flags checks but was still refused.

    Its header can be trusted, so a device answers it with ``Reply(for_type=type_id,
    for_seq=seq, result=result)`` (PROTOCOL.md section 7): ``UNKNOWN_TYPE`` for a type this
    side does not know, ``BAD_PAYLOAD`` for a known type with a payload of the wrong length
    (or a text field that is not ASCII).
    """

    type_id: int
    seq: int
    result: ReplyResult


OnRejected = Callable[[RejectedFrame], None]


class FrameDecoder:
    """Split a byte stream at 0x00 delimiters and decode each frame into a message.

    Bad input is never raised: every rejected chunk is counted in ``counters`` (a
    :class:`LinkStats`, shared with the link if one is passed in) and described, with its stream
    byte offset, in ``counters.last_error`` and ``counters.errors``. The partial frame held
    between calls is bounded: past MAX_ENCODED_FRAME_BYTES the bytes are dropped, counted once
    as oversize, and decoding resumes after the next delimiter. Every chunk between delimiters
    goes into ``counters.rx_frames`` (monotonic ns, the chunk as received, its size).

    Telemetry sequence numbers are checked: a jump forward of k > 1 counts one gap and k - 1
    lost frames; a telemetry seq 0 starts a new stream (the device restarts at 0 on Configure)
    and is not a gap; any other backwards jump counts one gap and no lost frames.

    ``on_rejected``, if given, is also called with a :class:`RejectedFrame` for each
    well-framed frame refused for its type or payload, after it has been counted.
    """

    def __init__(self, counters: LinkStats | None = None, on_rejected: OnRejected | None = None) -> None:
        self.counters = counters if counters is not None else LinkStats()
        self.on_rejected = on_rejected
        self._pending = b""
        self._pending_offset = 0  # stream byte offset of the first byte of _pending
        self._discarding = False  # inside an oversize frame: drop up to the next delimiter
        self._next_telemetry_seq: int | None = None

    @property
    def last_error(self) -> str | None:
        """The most recent rejection as one line naming its stream byte offset, or None."""
        return self.counters.last_error

    @property
    def pending_bytes(self) -> int:
        """Bytes held of a frame not yet terminated; never more than MAX_ENCODED_FRAME_BYTES."""
        return len(self._pending)

    def feed(self, data: bytes) -> list[Message]:
        """Consume ``data`` (any bytes-like object) and return the messages completed by it.

        The per-frame checks are written out in this one loop rather than in a helper per
        frame: the daemon calls this for every sample, and each Python call is a noticeable share
        of the few microseconds a sample may take. Rejections branch off to ``_reject*`` helpers.
        """
        if type(data) is not bytes:
            data = bytes(data)
        counters = self.counters
        counters.bytes_rx += len(data)
        offset = self._pending_offset
        if self._pending:
            data = self._pending + data
        chunks = data.split(b"\x00")
        tail = chunks.pop()
        messages: list[Message] = []
        note_rx = counters.rx_frames.append
        clock = counters.clock
        for chunk in chunks:
            size = len(chunk)
            at = offset  # stream offset of this chunk, for error messages
            offset += size + 1
            if self._discarding:
                self._discarding = False  # the rest of an oversize frame, already counted
            elif size > MAX_ENCODED_FRAME_BYTES:
                self._reject_oversize(chunk, at)
            elif size:
                note_rx((clock(), chunk, size))
                try:
                    raw = _cobs_decode(chunk)
                except _CobsDecodeError as error:
                    self._reject_cobs(error, at)
                    continue
                if (
                    len(raw) < MIN_FRAME_BYTES
                    or crc_hqx(raw[:-2], CRC_INIT) != raw[-2] | raw[-1] << 8
                    or raw[0] != PROTOCOL_VERSION
                    or raw[1] & _UNKNOWN_FLAGS_MASK
                ):
                    self._reject_frame(raw, at)
                    continue
                kind = _FRAME_TYPES.get(raw[2])
                if kind is None or len(raw) != kind[0]:
                    self._reject_type_or_size(raw, at)
                    continue
                _size, unpack, cls, text_indexes = kind
                values = unpack(raw)
                if cls is Telemetry:
                    seq = values[0]
                    if seq != self._next_telemetry_seq:
                        self._note_telemetry_jump(seq, at)
                    self._next_telemetry_seq = (seq + 1) & 0xFFFF
                elif text_indexes:
                    values = self._text_from_wire(values, text_indexes)
                    if values is None:
                        self._reject_text(raw, cls, at)
                        continue
                counters.frames_rx += 1
                messages.append(_new_message(cls, values))
        if len(tail) > MAX_ENCODED_FRAME_BYTES:
            if not self._discarding:
                self._reject_oversize(tail, offset)
                self._discarding = True
            offset += len(tail)
            tail = b""
        self._pending = tail
        self._pending_offset = offset
        return messages

    def _reject_cobs(self, error: Exception, offset: int) -> None:
        self.counters.cobs_errors += 1
        self._resync(offset, f"invalid COBS encoding ({error})")

    def _reject_frame(self, raw: bytes, offset: int) -> None:
        """Count and describe a frame failing the length, CRC, version or flags check."""
        counters = self.counters
        size = len(raw)
        if size < MIN_FRAME_BYTES:
            counters.runts += 1
            return self._resync(
                offset, f"{size} bytes after COBS decoding, fewer than the {MIN_FRAME_BYTES} "
                "of header and CRC"
            )
        received_crc = raw[-2] | raw[-1] << 8
        computed_crc = crc_hqx(raw[:-2], CRC_INIT)
        if received_crc != computed_crc:
            counters.crc_failures += 1
            return self._resync(
                offset, f"CRC mismatch (got 0x{received_crc:04X}, computed 0x{computed_crc:04X})"
            )
        if raw[0] != PROTOCOL_VERSION:
            counters.bad_version += 1
            return self._reject(offset, self._describe_version(raw))
        counters.unknown_flags += 1
        return self._reject(
            offset, f"unknown must-understand flag bits 0x{raw[1] & _UNKNOWN_FLAGS_MASK:02X} "
            f"(flags 0x{raw[1]:02X})"
        )

    def _reject_type_or_size(self, raw: bytes, offset: int) -> None:
        kind = _FRAME_TYPES.get(raw[2])
        if kind is None:
            self.counters.unknown_type += 1
            self._reject(offset, f"unknown message type 0x{raw[2]:02X}")
            self._tell_rejected(raw, ReplyResult.UNKNOWN_TYPE)
            return
        frame_size, _unpack, cls, _text = kind
        self.counters.malformed += 1
        self._reject(offset, f"{cls.__name__} frame is {len(raw)} bytes, expected {frame_size}")
        self._tell_rejected(raw, ReplyResult.BAD_PAYLOAD)

    def _reject_text(self, raw: bytes, cls: type[Message], offset: int) -> None:
        self.counters.malformed += 1
        self._reject(offset, f"{cls.__name__} text field is not ASCII")
        self._tell_rejected(raw, ReplyResult.BAD_PAYLOAD)

    def _tell_rejected(self, raw: bytes, result: ReplyResult) -> None:
        if self.on_rejected is not None:
            self.on_rejected(RejectedFrame(raw[2], raw[3] | raw[4] << 8, result))

    def _note_telemetry_jump(self, seq: int, offset: int) -> None:
        expected = self._next_telemetry_seq
        if expected is None or seq == 0:
            return  # first telemetry seen, or the device restarted its stream
        counters = self.counters
        counters.gaps += 1
        lost = (seq - expected) & 0xFFFF
        if lost < 0x8000:
            counters.lost_frames += lost
            detail = f"{lost} lost"
        else:
            detail = "sequence went backwards"
        counters.record_error(
            f"frame at stream byte {offset}: telemetry seq {seq}, expected {expected} ({detail})"
        )

    @staticmethod
    def _text_from_wire(values: tuple, text_indexes: tuple[int, ...]) -> tuple | None:
        converted = list(values)
        for index in text_indexes:
            try:
                converted[index] = values[index].split(b"\x00", 1)[0].decode("ascii")
            except UnicodeDecodeError:
                return None
        return tuple(converted)

    @staticmethod
    def _describe_version(raw: bytes) -> str:
        text = f"protocol version {raw[0]}, this host speaks version {PROTOCOL_VERSION}"
        if raw[2] == _HELLO_TYPE_ID and len(raw) >= _HELLO_PREFIX_BYTES + 2:
            # DeviceHello keeps protocol_version and schema_fingerprint first in every version
            fingerprint = int.from_bytes(raw[HEADER_SIZE + 1:HEADER_SIZE + 5], "little")
            text = (
                f"DeviceHello of protocol version {raw[HEADER_SIZE]} with schema fingerprint "
                f"0x{fingerprint:08X}; this host speaks version {PROTOCOL_VERSION} with schema "
                f"fingerprint 0x{SCHEMA_FINGERPRINT:08X}"
            )
        return text

    def _reject_oversize(self, chunk: bytes, offset: int) -> None:
        self.counters.record_rx(chunk)
        self.counters.oversize += 1
        self._resync(
            offset, f"oversize, more than {MAX_ENCODED_FRAME_BYTES} bytes before the delimiter; "
            "dropped up to the next 0x00"
        )

    def _resync(self, offset: int, reason: str) -> None:
        self.counters.resyncs += 1
        return self._reject(offset, reason)

    def _reject(self, offset: int, reason: str) -> None:
        self.counters.record_error(f"frame at stream byte {offset}: {reason}")
