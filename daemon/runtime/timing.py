"""Per-sample timing rings: read->write latency, the cost of each stage and the gaps between reads.

The cycle reads the clock at the boundaries of its stages and stores the
readings of each sample as one tuple in a preallocated ring (one store per
sample, no per-stage arithmetic on the hot path). Everything else is worked out
only when someone asks (status, link summaries, the session summary, the
benchmark), by :meth:`TimingRings.digest`, and cheaply enough to run on the
event loop the cycle shares:

- the tuples new since the last digest are copied into a NumPy mirror of the
  ring (a few hundred rows at a time, not the whole ring), and
- every figure comes from one vectorised pass over the mirror.

Computing them in Python over the whole ring of tuples, as this module once
did, took 9–15 ms per status request on the development machines — longer
than the link timeout, so every dashboard refresh blocked the control cycle
(``loop.stall``, ``link.timeout``). A digest now costs well under a
millisecond (``bench/bench_api.py`` prints it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

RING_SAMPLES = 4096  # a power of two, so the cycle can index the ring with ``count & RING_MASK``
RING_MASK = RING_SAMPLES - 1
#: The stages are timed on the samples whose count has these bits clear: one in 16, unrelated to
#: their cost, so the stage figures are those of every sample (from fewer of them). Latency, from
#: the first and last readings, is taken every sample.
STAGE_SAMPLE_MASK = 15
STAGES = ("decode", "estimate", "control", "interlocks", "encode", "write")
#: Clock readings per sample: before the first stage and after each stage.
READINGS = len(STAGES) + 1
_COMPUTE_END = STAGES.index("encode") + 1  # compute: from the first reading to the end of encode
_NAN = float("nan")


def _rank_index(n: int, fraction: float) -> int:
    """The nearest-rank index, ``ceil(fraction n) - 1`` (Hyndman and Fan 1996, definition 1).

    (``round`` in its place took banker's rounding: the median of five values was the second.)
    The product is rounded to 9 places first, so that 0.999 * 1000 = 999.0000000000001 is 999."""
    return min(n - 1, max(0, math.ceil(round(fraction * n, 9)) - 1))


def percentile(sorted_values: list[float], fraction: float) -> float:
    """Nearest-rank percentile of already sorted values (nan when empty)."""
    if not sorted_values:
        return _NAN
    return sorted_values[_rank_index(len(sorted_values), fraction)]


def _rank(sorted_array: np.ndarray, fraction: float) -> float:
    """:func:`percentile` of a sorted 1-D array (the same nearest-rank rule)."""
    n = len(sorted_array)
    if n == 0:
        return _NAN
    return float(sorted_array[_rank_index(n, fraction)])


@dataclass(frozen=True, slots=True)
class TimingDigest:
    """The figures of the recent samples, microseconds (nan where there are no samples)."""

    samples: int  # how many recent samples the figures cover
    latency_p50_us: float
    latency_p99_us: float
    latency_max_us: float
    compute_p50_us: float
    compute_p99_us: float
    stages_us: dict[str, dict[str, float]]  # stage -> {"p50", "p99"}
    worst_gap_us: float  # longest time between two answered reads among the recent samples

    def latency(self) -> dict[str, float]:
        return {"p50": self.latency_p50_us, "p99": self.latency_p99_us, "max": self.latency_max_us}


class TimingRings:
    """The stage-boundary clock readings (ns) of the last RING_SAMPLES samples, written by the cycle.

    The cycle stores ``stamps[count & RING_MASK] = (t_0, ..., t_6)`` (``READINGS`` monotonic
    nanosecond readings: frame received, then the end of each stage in ``STAGES``; the last one
    is the command written) and then increments ``count``. On samples whose stages were not
    timed (see ``STAGE_SAMPLE_MASK``) the readings between the first and the last are 0.
    """

    __slots__ = ("_mirror", "_mirrored", "count", "stamps")

    def __init__(self) -> None:
        self.stamps: list[tuple[int, ...]] = [()] * RING_SAMPLES
        self.count = 0
        self._mirror = np.zeros((RING_SAMPLES, READINGS), dtype=np.int64)
        self._mirrored = 0  # samples copied into the mirror so far

    def _catch_up(self) -> int:
        """Copy the samples stored since the last call into the mirror; returns the rows valid."""
        count = self.count
        new = min(count - self._mirrored, RING_SAMPLES)
        if new > 0:
            first = (count - new) & RING_MASK
            end = first + new
            if end <= RING_SAMPLES:
                self._mirror[first:end] = self.stamps[first:end]
            else:
                self._mirror[first:] = self.stamps[first:]
                self._mirror[: end - RING_SAMPLES] = self.stamps[: end - RING_SAMPLES]
        self._mirrored = count
        return min(count, RING_SAMPLES)

    def digest(self) -> TimingDigest:
        """Every figure of the recent samples, in one pass."""
        rows = self._catch_up()
        readings = self._mirror[:rows]
        latency = np.sort(readings[:, -1] - readings[:, 0]) / 1000.0
        staged = readings[readings[:, 1] != 0]
        compute = np.sort(staged[:, _COMPUTE_END] - staged[:, 0]) / 1000.0
        stages = np.sort(np.diff(staged, axis=1), axis=0) / 1000.0
        reads = np.sort(readings[:, 0])
        return TimingDigest(
            samples=rows,
            latency_p50_us=_rank(latency, 0.50),
            latency_p99_us=_rank(latency, 0.99),
            latency_max_us=float(latency[-1]) if rows else _NAN,
            compute_p50_us=_rank(compute, 0.50),
            compute_p99_us=_rank(compute, 0.99),
            stages_us={
                name: {"p50": _rank(stages[:, i], 0.50), "p99": _rank(stages[:, i], 0.99)}
                for i, name in enumerate(STAGES)
            },
            worst_gap_us=float(np.max(np.diff(reads))) / 1000.0 if rows > 1 else _NAN,
        )

    def latency_us(self) -> dict[str, float]:
        """p50, p99 and max of the recent read->write latencies, microseconds."""
        return self.digest().latency()

    def stage_us(self) -> dict[str, dict[str, float]]:
        """Median and p99 cost of each stage over the recent samples, microseconds."""
        return self.digest().stages_us

    def compute_us(self) -> dict[str, float]:
        """Median and p99 of decode+estimate+control+interlocks+encode per sample, microseconds."""
        d = self.digest()
        return {"p50": d.compute_p50_us, "p99": d.compute_p99_us}


class LagRing:
    """How late each tick of a periodic task ran: the event loop's lag, with its percentiles.

    A task that means to wake every ``period`` and wakes ``late_s`` after that was kept waiting
    by whatever else held the event loop (or by the operating system not running the process).
    """

    __slots__ = ("_count", "_values", "worst_s")

    SIZE = 2048

    def __init__(self) -> None:
        self._values = np.zeros(self.SIZE, dtype=np.float64)
        self._count = 0
        self.worst_s = 0.0  # since start

    def note(self, late_s: float) -> None:
        late_s = max(0.0, late_s)
        self._values[self._count % self.SIZE] = late_s
        self._count += 1
        self.worst_s = max(self.worst_s, late_s)

    def figures_ms(self) -> dict[str, float]:
        """p50, p99 and max of the recent ticks' lateness, and the worst since start, in ms."""
        n = min(self._count, self.SIZE)
        values = np.sort(self._values[:n]) * 1000.0
        return {
            "p50": _rank(values, 0.50),
            "p99": _rank(values, 0.99),
            "max": float(values[-1]) if n else math.nan,
            "worst": self.worst_s * 1000.0,
            "ticks": float(self._count),
        }
