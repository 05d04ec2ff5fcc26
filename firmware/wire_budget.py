"""The serial line's share of each sample period, from frames encoded by the project's codec.

    python firmware/wire_budget.py

Prints the two Markdown tables of firmware/README.md's timing budget (a test checks that the
README holds them exactly as printed), so the byte counts there come from encoded frames,
not from typing. A UART in 8N1 sends 10 bits per byte (start, 8 data, stop).

Per sample the device sends one Telemetry and the host answers it with one Drive, which must
have arrived before the next sample instant to apply there (PROTOCOL.md sections 8.1, 8.2).
On a UART the two go one after the other (the host cannot answer a Telemetry it has not
received yet), so the wire time of both together is the part of the period the link uses;
the rest is left for the host's answer, the device's step and any adapter latency.
"""

from __future__ import annotations

import math

from protocol import Drive, Telemetry, cobs_decode, encode

BITS_PER_BYTE = 10  # 8N1: start bit, 8 data bits, stop bit
BAUD_RATES = (115_200, 230_400, 460_800, 921_600, 1_000_000, 2_000_000)
SAMPLE_RATES_HZ = (200, 250, 500, 1000)
FITS_SHARE = 0.5  # up to half the period on the wire: "fits" (a choice: common practice, no source)


def wire_sizes(message_type: type) -> tuple[int, int, int]:
    """(frame, after COBS, on the wire with the 0x00) in bytes, the same for every field value.

    Two messages of the type, one with every field zero and one with none, are encoded; COBS
    adds exactly one byte to any frame under 254 bytes, so both must come out the same size.
    """
    if message_type is Telemetry:
        samples = [Telemetry(0, 0, 0, 0, 0, 0, 0, 0.0, 0.0, 0.0, 0),
                   Telemetry(1234, 2_468_000, -1500, 2048, 1, 1, 3, -2.5, math.nan, 24.25, 3)]
    else:
        samples = [Drive(0, 0.0, 0), Drive(1234, -2.5, 1234)]
    sizes = set()
    for message in samples:
        wire = encode(message)
        sizes.add((len(cobs_decode(wire[:-1])), len(wire) - 1, len(wire)))
    if len(sizes) != 1:
        raise SystemExit(f"wire_budget: {message_type.__name__} frames differ in size: {sorted(sizes)}")
    return sizes.pop()


def _verdict(share: float) -> str:
    return "fits" if share <= FITS_SHARE else "tight" if share <= 1.0 else "no"


def budget_markdown() -> str:
    """The frame-size table and the per-baud table, as Markdown."""
    telemetry, drive = wire_sizes(Telemetry), wire_sizes(Drive)
    bits = (telemetry[2] + drive[2]) * BITS_PER_BYTE
    lines = [
        "| message | frame | after COBS | on the wire (with 0x00) | bits at 8N1 |",
        "| --- | --- | --- | --- | --- |",
        f"| Telemetry | {telemetry[0]} | {telemetry[1]} | {telemetry[2]} | {telemetry[2] * BITS_PER_BYTE} |",
        f"| Drive | {drive[0]} | {drive[1]} | {drive[2]} | {drive[2] * BITS_PER_BYTE} |",
        f"| one sample, both ways | | | {telemetry[2] + drive[2]} | {bits} |",
        "",
        "| baud | Telemetry | Drive | both | " + " | ".join(f"{hz} Hz ({1000 / hz:g} ms)" for hz in SAMPLE_RATES_HZ) + " |",
        "| --- | --- | --- | --- | " + " | ".join("---" for _ in SAMPLE_RATES_HZ) + " |",
    ]
    for baud in BAUD_RATES:
        wire_ms = [n * BITS_PER_BYTE / baud * 1000 for n in (telemetry[2], drive[2], telemetry[2] + drive[2])]
        shares = [wire_ms[2] * hz / 1000 for hz in SAMPLE_RATES_HZ]
        lines.append(
            f"| {baud} | " + " | ".join(f"{ms:.3f} ms" for ms in wire_ms) + " | "
            + " | ".join(f"{100 * share:.1f} % {_verdict(share)}" for share in shares) + " |"
        )
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    print(budget_markdown(), end="")
