"""Fuzz the C firmware's receive path under AddressSanitizer and UndefinedBehaviorSanitizer.

The inputs come from a seeded PRNG inside firmware/tests/fuzz_rx.c, so a run is reproducible
and takes about a second. Random streams, frames with 1-3 bits flipped before COBS (which
CRC-16/CCITT-FALSE always detects at these frame lengths: its Hamming distance is 4 up to
32751 data bits, P. Koopman, "Cyclic Redundancy Code (CRC) Polynomial Selection for Embedded
Networks", DSN 2004), frames with bits flipped on the wire, and oversize runs before a valid
frame. Any crash, sanitizer report or false accept makes the program exit non-zero.
"""

import pytest

from tests.firmware_support import build, run

INPUTS = 140_000


@pytest.mark.parametrize("seed", [1, 0x5EED])
def test_receive_path_survives_and_never_falsely_accepts(seed: int) -> None:
    out = run(build("fuzz_rx", sanitize=True), args=(str(seed), str(INPUTS)))
    counts = {k: int(v) for k, v in (word.split("=") for word in out.split())}
    assert counts["inputs"] == INPUTS >= 100_000
    assert counts["raw_flipped"] >= 3 * INPUTS // 7  # 1-, 2- and 3-bit errors were all tried
    assert counts["raw_flip_accepts"] == 0
    assert counts["wire_flipped"] > 0
    assert counts["oversize_runs"] > 0
    # every valid frame and the frame after every oversize run was accepted and checked
    assert counts["checked_accepts"] >= counts["valid_frames"] + counts["oversize_runs"] > 0
    assert counts["checked_accepts"] == (
        counts["valid_frames"] + counts["oversize_runs"] + counts["random_accepts"]
        + counts["wire_flip_accepts"]
    )

