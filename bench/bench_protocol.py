"""Print the per-sample cost of the wire protocol on this machine (figures only, no pass/fail).

    .venv/bin/python bench/bench_protocol.py [--samples N]

Measures, one call at a time with time.perf_counter_ns, with garbage collection frozen as in the
daemon's hot loop:
  - telemetry decode: FrameDecoder.feed of one whole Telemetry frame (COBS, CRC, struct, message);
  - drive encode: encode_drive (struct, CRC, COBS, delimiter);
  - whole host frame: both, as the daemon does per sample (goal: median <= 3 us).
The timer's own cost is printed too (it is included in each figure), and the cost of one bare
binascii.crc_hqx over a telemetry frame, to compare this machine with others.

On a shared, loaded machine the per-call wall figures include time the process spent waiting
for a core; the "CPU mean" column is the mean over a tight loop of the same calls timed with
time.thread_time (no timer per call), which leaves that waiting out (but not the slowdown from
sharing caches with other processes: compare it with the crc_hqx line of the same run).
"""

import argparse
import gc
import math
import os
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


def _cpu_mean_ns(operation: Callable[[int], object], samples: int) -> float:
    """Thread CPU time per call of ``operation(i)`` over a tight loop, no timer per call."""
    start = time.thread_time_ns()
    for i in range(samples):
        operation(i)
    return (time.thread_time_ns() - start) / samples


def _report(name: str, timings_ns: list[int], cpu_ns: float) -> None:
    ordered = sorted(timings_ns)
    median_us = statistics.median(ordered) / 1000
    p99_us = ordered[int(0.99 * (len(ordered) - 1))] / 1000
    print(
        f"{name:<28} median {median_us:6.2f} us   p99 {p99_us:6.2f} us   "
        f"CPU mean {cpu_ns / 1000:6.2f} us   (n={len(ordered)})"
    )


def _figures(frames: list[bytes]) -> list[tuple[str, Callable[[], Callable[[int], object]]]]:
    """(name, factory of a fresh ``operation(i)``): each timing pass gets its own decoder."""
    raw_body = bytes(39)

    def timer_only() -> Callable[[int], object]:
        return lambda i: None

    def crc_only() -> Callable[[int], object]:
        return lambda i: crc_hqx(raw_body, 0xFFFF)

    def decode() -> Callable[[int], object]:
        feed = _counted_decoder().feed
        return lambda i: feed(frames[i])

    def drive_encode() -> Callable[[int], object]:
        return lambda i: encode_drive(i & 0xFFFF, 0.25, i & 0xFFFF)

    def host_frame() -> Callable[[int], object]:
        feed = _counted_decoder().feed

        def operation(i: int) -> bytes:
            (telemetry,) = feed(frames[i])
            return encode_drive(telemetry.seq, -telemetry.drive_applied, telemetry.seq)

        return operation

    return [
        ("timer call alone", timer_only),
        ("reference crc_hqx (39 B)", crc_only),
        ("telemetry decode", decode),
        ("drive encode", drive_encode),
        ("whole host frame", host_frame),
    ]


_DECODERS: list[FrameDecoder] = []


def _counted_decoder() -> FrameDecoder:
    decoder = FrameDecoder()
    _DECODERS.append(decoder)
    return decoder


def main() -> None:
    parser = argparse.ArgumentParser(description="Print wire protocol costs per sample.")
    parser.add_argument("--samples", type=int, default=200_000, help="calls per figure")
    samples = parser.parse_args().samples

    frames = _telemetry_frames(samples)
    results = []
    gc.collect()
    gc.freeze()
    gc.disable()
    try:
        for name, make_operation in _figures(frames):
            timings = _per_call_ns(make_operation(), samples)
            results.append((name, timings, _cpu_mean_ns(make_operation(), samples)))
    finally:
        gc.enable()
        gc.unfreeze()

    for decoder in _DECODERS:
        if decoder.counters.frames_rx != samples:
            raise SystemExit(f"decoder lost frames: {decoder.counters.summary()}")
    print(
        f"wire protocol, {samples} calls per figure, gc frozen; per-call figures include the "
        "timer call, CPU means do not"
    )
    for name, timings, cpu_ns in results:
        _report(name, timings, cpu_ns)
    print("goal: whole host frame median <= 3 us (on the reference machine crc_hqx ~0.07 us)")
    print(f"load average: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
