"""Per-sample timing rings: read->write latency and the cost of each stage, with percentiles.

The cycle stores one integer per stage per sample into preallocated arrays
(no allocation on the hot path); percentiles are computed only when someone
asks (status, link summaries, the session summary, the benchmark).
"""

from __future__ import annotations

from array import array

RING_SAMPLES = 4096
STAGES = ("decode", "estimate", "control", "interlocks", "encode", "write")


def percentile(sorted_values: list[float], fraction: float) -> float:
    """Nearest-rank percentile of already sorted values (nan when empty)."""
    if not sorted_values:
        return float("nan")
    index = min(len(sorted_values) - 1, max(0, round(fraction * len(sorted_values)) - 1))
    return sorted_values[index]


class TimingRings:
    """The last RING_SAMPLES latencies (ns) and stage costs (ns), written by the cycle."""

    __slots__ = ("count", "latency_ns", "stages_ns")

    def __init__(self) -> None:
        self.latency_ns = array("q", bytes(8 * RING_SAMPLES))
        self.stages_ns = tuple(array("q", bytes(8 * RING_SAMPLES)) for _ in STAGES)
        self.count = 0

    def _recent(self, ring: array) -> list[int]:
        return sorted(ring[: min(self.count, RING_SAMPLES)])

    def latency_us(self) -> dict[str, float]:
        """p50, p99 and max of the recent read->write latencies, microseconds."""
        values = self._recent(self.latency_ns)
        return {
            "p50": percentile(values, 0.50) / 1000.0,
            "p99": percentile(values, 0.99) / 1000.0,
            "max": (values[-1] / 1000.0) if values else float("nan"),
        }

    def stage_us(self) -> dict[str, dict[str, float]]:
        """Median and p99 cost of each stage over the recent samples, microseconds."""
        report = {}
        for name, ring in zip(STAGES, self.stages_ns):
            values = self._recent(ring)
            report[name] = {
                "p50": percentile(values, 0.50) / 1000.0,
                "p99": percentile(values, 0.99) / 1000.0,
            }
        return report

    def compute_us(self) -> dict[str, float]:
        """Median and p99 of decode+estimate+control+interlocks+encode per sample, microseconds."""
        n = min(self.count, RING_SAMPLES)
        rings = self.stages_ns[:5]
        totals = sorted(sum(ring[i] for ring in rings) for i in range(n))
        return {"p50": percentile(totals, 0.50) / 1000.0, "p99": percentile(totals, 0.99) / 1000.0}
