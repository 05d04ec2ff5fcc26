"""Per-sample timing rings: read->write latency and the cost of each stage, with percentiles.

The cycle reads the clock at the boundaries of its stages and stores the
readings of each sample as one tuple in a preallocated ring (one store per
sample, no per-stage arithmetic on the hot path); stage costs and latencies
are differences of those readings, computed only when someone asks (status,
link summaries, the session summary, the benchmark).
"""

from __future__ import annotations

RING_SAMPLES = 4096  # a power of two, so the cycle can index the ring with ``count & RING_MASK``
RING_MASK = RING_SAMPLES - 1
STAGES = ("decode", "estimate", "control", "interlocks", "encode", "write")
#: Clock readings per sample: before the first stage and after each stage.
READINGS = len(STAGES) + 1
_COMPUTE_END = STAGES.index("encode") + 1  # compute: from the first reading to the end of encode


def percentile(sorted_values: list[float], fraction: float) -> float:
    """Nearest-rank percentile of already sorted values (nan when empty)."""
    if not sorted_values:
        return float("nan")
    index = min(len(sorted_values) - 1, max(0, round(fraction * len(sorted_values)) - 1))
    return sorted_values[index]


class TimingRings:
    """The stage-boundary clock readings (ns) of the last RING_SAMPLES samples, written by the cycle.

    The cycle stores ``stamps[count & RING_MASK] = (t_0, ..., t_6)`` (``READINGS`` monotonic
    nanosecond readings: frame received, then the end of each stage in ``STAGES``; the last one
    is the command written) and then increments ``count``.
    """

    __slots__ = ("count", "stamps")

    def __init__(self) -> None:
        self.stamps: list[tuple[int, ...]] = [()] * RING_SAMPLES
        self.count = 0

    def _recent(self) -> list[tuple[int, ...]]:
        return self.stamps[: min(self.count, RING_SAMPLES)]

    def latency_us(self) -> dict[str, float]:
        """p50, p99 and max of the recent read->write latencies, microseconds."""
        values = sorted(s[-1] - s[0] for s in self._recent())
        return {
            "p50": percentile(values, 0.50) / 1000.0,
            "p99": percentile(values, 0.99) / 1000.0,
            "max": (values[-1] / 1000.0) if values else float("nan"),
        }

    def stage_us(self) -> dict[str, dict[str, float]]:
        """Median and p99 cost of each stage over the recent samples, microseconds."""
        recent = self._recent()
        report = {}
        for i, name in enumerate(STAGES):
            values = sorted(s[i + 1] - s[i] for s in recent)
            report[name] = {
                "p50": percentile(values, 0.50) / 1000.0,
                "p99": percentile(values, 0.99) / 1000.0,
            }
        return report

    def compute_us(self) -> dict[str, float]:
        """Median and p99 of decode+estimate+control+interlocks+encode per sample, microseconds."""
        totals = sorted(s[_COMPUTE_END] - s[0] for s in self._recent())
        return {"p50": percentile(totals, 0.50) / 1000.0, "p99": percentile(totals, 0.99) / 1000.0}
