"""Link diagnostics: counters, and ring buffers of recent raw frames and errors for bug reports."""

import time
from collections import deque
from collections.abc import Callable

RING_FRAMES = 100
RING_ERRORS = 100
_SHOWN_FRAME_BYTES = 255  # longer (oversize) chunks are kept truncated so memory stays bounded

COUNTER_NAMES = (
    "frames_rx",
    "frames_tx",
    "bytes_rx",
    "bytes_tx",
    "crc_failures",
    "cobs_errors",
    "runts",
    "oversize",
    "resyncs",
    "bad_version",
    "unknown_flags",
    "unknown_type",
    "malformed",
    "gaps",
    "lost_frames",
)


class LinkStats:
    """Counters of one link direction pair, plus the last frames and errors with timestamps.

    Counters (all ints, only ever increase):
      frames_rx / frames_tx, bytes_rx / bytes_tx: accepted frames and all bytes, each way;
      crc_failures, cobs_errors, runts (shorter than header + CRC), oversize: chunks between
        delimiters that were not a frame; resyncs counts every such chunk (the decoder dropped
        it and picked up again at the next 0x00);
      bad_version, unknown_flags (unknown must-understand flag bit), unknown_type, malformed
        (payload length wrong for the type, or a text field not ASCII): well-framed but rejected;
      gaps: breaks in the telemetry sequence; lost_frames: telemetry samples missing in them.

    ``clock`` returns nanoseconds (default ``time.monotonic_ns``); inject one in tests.

    Slotted: the decoder and the link update these counters every frame, and with this many
    attributes slot access is much cheaper than an instance dictionary.
    """

    __slots__ = (*COUNTER_NAMES, "clock", "errors", "last_error", "rx_frames", "tx_frames")

    def __init__(self, clock: Callable[[], int] = time.monotonic_ns) -> None:
        self.clock = clock
        self.frames_rx = 0
        self.frames_tx = 0
        self.bytes_rx = 0
        self.bytes_tx = 0
        self.crc_failures = 0
        self.cobs_errors = 0
        self.runts = 0
        self.oversize = 0
        self.resyncs = 0
        self.bad_version = 0
        self.unknown_flags = 0
        self.unknown_type = 0
        self.malformed = 0
        self.gaps = 0
        self.lost_frames = 0
        self.last_error: str | None = None
        self.rx_frames: deque[tuple[int, bytes, int]] = deque(maxlen=RING_FRAMES)
        # Kept by whoever writes (the daemon's link): (monotonic ns, the frame as sent, delimiter
        # included, its size).
        self.tx_frames: deque[tuple[int, bytes, int]] = deque(maxlen=RING_FRAMES)
        self.errors: deque[tuple[int, str]] = deque(maxlen=RING_ERRORS)

    def record_rx(self, chunk: bytes) -> None:
        """Keep a received chunk (COBS-encoded, without its delimiter) in the rx ring."""
        self.rx_frames.append((self.clock(), chunk[:_SHOWN_FRAME_BYTES], len(chunk)))

    def record_error(self, text: str) -> None:
        """Keep a one-line error as ``last_error`` and in the error ring."""
        self.last_error = text
        self.errors.append((self.clock(), text))

    def counters(self) -> dict[str, int]:
        """All counters by name."""
        return {name: getattr(self, name) for name in COUNTER_NAMES}

    def summary(self) -> str:
        """One line with every counter, for logs and bug reports."""
        return "link: " + " ".join(f"{name}={value}" for name, value in self.counters().items())

    def dump(self) -> str:
        """Multi-line dump: summary, the ring frames in time order as hex, then recent errors.

        Frame lines read ``<seconds> rx|tx <hex bytes as on the wire, delimiter included>``.
        """
        entries = [(t, "rx", chunk, size) for t, chunk, size in self.rx_frames]
        entries += [(t, "tx", frame[:-1], size - 1) for t, frame, size in self.tx_frames]
        entries.sort(key=lambda entry: entry[0])
        lines = [self.summary()]
        for t_ns, direction, chunk, size in entries:
            shown = chunk.hex(" ")
            if size > len(chunk):
                shown += f" ... ({size} bytes, truncated)"
            else:
                shown += " 00"
            lines.append(f"{t_ns / 1e9:.6f} {direction} {shown}")
        lines += [f"{t_ns / 1e9:.6f} error {text}" for t_ns, text in self.errors]
        return "\n".join(lines)
