"""Print the per-sample cost of the wire protocol on this machine (figures only, no pass/fail).

    .venv/bin/python bench/bench_protocol.py [--samples N]

Measures, one call at a time with time.perf_counter_ns, with garbage collection frozen as in the
daemon's hot loop:
  - telemetry decode: FrameDecoder.feed of one whole Telemetry frame (COBS, CRC, struct, message);
  - drive encode: encode_drive (struct, CRC, COBS, delimiter);
  - whole host frame: both, as the daemon does per sample (goal: median <= 3 us).
The timer's own cost is printed too (it is included in each figure), and the cost of one bare
binascii.crc_hqx over a telemetry frame, to compare this machine with others.
"""

import argparse
import gc
import math
import statistics
import time
from binascii import crc_hqx
from collections.abc import Callable

from protocol import FrameDecoder, Telemetry, encode, encode_drive


def _telemetry_frames(count: int) -> list[bytes]:
    return [
        encode(Telemetry(i & 0xFFFF, 2000 * i, -1500 + i, 2048 - i, 0, 0, 3, 0.5, math.nan, 24.0, 0))
        for i in range(count)
    ]


def _per_call_ns(operation: Callable[[int], object], samples: int) -> list[int]:
    """Time ``operation(i)`` for i in range(samples), one call at a time."""
    clock = time.perf_counter_ns
    timings = []
    for i in range(samples):
        start = clock()
        operation(i)
        timings.append(clock() - start)
    return timings


def _report(name: str, timings_ns: list[int]) -> None:
    ordered = sorted(timings_ns)
    median_us = statistics.median(ordered) / 1000
    p99_us = ordered[int(0.99 * (len(ordered) - 1))] / 1000
    print(f"{name:<28} median {median_us:6.2f} us   p99 {p99_us:6.2f} us   (n={len(ordered)})")


def main() -> None:
    parser = argparse.ArgumentParser(description="Print wire protocol costs per sample.")
    parser.add_argument("--samples", type=int, default=200_000, help="calls per figure")
    samples = parser.parse_args().samples

    frames = _telemetry_frames(samples)
    raw_body = bytes(39)
    gc.collect()
    gc.freeze()
    gc.disable()
    try:
        timer_only = _per_call_ns(lambda i: None, samples)
        crc_only = _per_call_ns(lambda i: crc_hqx(raw_body, 0xFFFF), samples)

        decoder = FrameDecoder()
        feed = decoder.feed
        decode = _per_call_ns(lambda i: feed(frames[i]), samples)

        encode_only = _per_call_ns(lambda i: encode_drive(i & 0xFFFF, 0.25, i & 0xFFFF), samples)

        host_decoder = FrameDecoder()
        host_feed = host_decoder.feed

        def host_frame(i: int) -> bytes:
            (telemetry,) = host_feed(frames[i])
            return encode_drive(telemetry.seq, -telemetry.drive_applied, telemetry.seq)

        whole = _per_call_ns(host_frame, samples)
    finally:
        gc.enable()
        gc.unfreeze()

    if decoder.counters.frames_rx != samples or host_decoder.counters.frames_rx != samples:
        raise SystemExit(f"decoder lost frames: {decoder.counters.summary()}")
    print(f"wire protocol, {samples} calls per figure, gc frozen; figures include the timer call")
    _report("timer call alone", timer_only)
    _report("reference crc_hqx (39 B)", crc_only)
    _report("telemetry decode", decode)
    _report("drive encode", encode_only)
    _report("whole host frame", whole)
    print("goal: whole host frame median <= 3 us (on the reference machine crc_hqx ~0.07 us)")


if __name__ == "__main__":
    main()
