"""The cycle's timing rings: stage costs and latencies from the clock readings of each sample."""

import math

import numpy as np
import pytest
from test_daemon_support import recorded_samples, run_for, running_service

from daemon.runtime.timing import (
    RING_MASK,
    RING_SAMPLES,
    STAGE_SAMPLE_MASK,
    STAGES,
    TimingRings,
    percentile,
)


def store(rings: TimingRings, start_ns: int, costs_ns: tuple[int, ...]) -> None:
    """What the cycle does per sample: the readings at the stage boundaries, one tuple."""
    readings = [start_ns]
    for cost in costs_ns:
        readings.append(readings[-1] + cost)
    rings.stamps[rings.count & RING_MASK] = tuple(readings)
    rings.count += 1


@pytest.mark.parametrize("n", [1, 2, 3, 5, 10, 101, 515, 1000])
@pytest.mark.parametrize("fraction", [0.5, 0.9, 0.99, 0.999, 1.0])
def test_percentile_is_the_nearest_rank_one(n, fraction):
    # Nearest rank is definition 1 of R. J. Hyndman and Y. Fan, "Sample quantiles in statistical
    # packages", The American Statistician 50(4), 1996; NumPy's method="inverted_cdf" is that one.
    values = sorted(float(v) for v in np.random.default_rng(n).normal(size=n))
    assert percentile(values, fraction) == np.quantile(values, fraction, method="inverted_cdf")


def test_stage_costs_and_latency_are_the_differences_of_the_readings():
    rings = TimingRings()
    costs = (1000, 2000, 3000, 4000, 5000, 6000)  # ns: decode .. write
    for k in range(101):
        store(rings, 10**12 + k * 2_000_000, costs)
    stages = rings.stage_us()
    assert list(stages) == list(STAGES)
    for name, cost in zip(STAGES, costs, strict=True):
        assert stages[name] == {"p50": cost / 1000, "p99": cost / 1000}
    assert rings.latency_us() == {"p50": 21.0, "p99": 21.0, "max": 21.0}
    assert rings.compute_us() == {"p50": 15.0, "p99": 15.0}  # all but the write


def test_only_the_most_recent_samples_count():
    rings = TimingRings()
    for k in range(100):
        store(rings, k * 2_000_000, (0, 0, 0, 0, 0, 999_000))  # slow writes, long ago
    for k in range(RING_SAMPLES):
        store(rings, (k + 100) * 2_000_000, (0, 0, 0, 0, 0, 7000 + k % 10))
    latency = rings.latency_us()
    assert latency["max"] == 7.009
    assert latency["p50"] == pytest.approx(7.004, abs=0.001)


def test_no_samples_give_nan():
    rings = TimingRings()
    assert all(math.isnan(v) for v in rings.latency_us().values())


async def test_the_cycle_keeps_each_samples_readings_in_stage_order(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("timing")
        await run_for(service, 0.5)
        cycle = service.cycle
        assert cycle.timing.count == cycle.samples > 200
        recent = cycle.timing.stamps[: cycle.samples]
        staged = [s for k, s in enumerate(recent) if not k & STAGE_SAMPLE_MASK]
        others = [s for k, s in enumerate(recent) if k & STAGE_SAMPLE_MASK]
        assert all(len(s) == len(STAGES) + 1 and list(s) == sorted(s) for s in staged)
        assert all(s[0] <= s[-1] and set(s[1:-1]) == {0} for s in others)  # latency only
        assert list(service.status()["cycle"]["stages_us"]) == list(STAGES)
        # the latency recorded with each sample spans the readings kept for it
        span_us = {s[0]: (s[-1] - s[0]) / 1000 for s in recent}
        rows = recorded_samples(service)
        assert len(rows) > 200
        assert all(row["latency_us"] == pytest.approx(span_us[row["t_host_ns"]]) for row in rows)


def test_stage_figures_come_from_the_timed_samples_latency_from_every_sample():
    rings = TimingRings()
    for k in range(160):
        start = 10**12 + k * 2_000_000
        if k % 16 == 0:
            store(rings, start, (1000, 1000, 1000, 1000, 1000, 1000))  # timed: 6 us in all
        else:  # the cycle's other samples: first and last readings only
            rings.stamps[rings.count & RING_MASK] = (start, 0, 0, 0, 0, 0, start + 30_000)
            rings.count += 1
    digest = rings.digest()
    assert digest.stages_us["decode"] == {"p50": 1.0, "p99": 1.0}
    assert digest.compute_p50_us == 5.0
    assert (digest.latency_p50_us, digest.latency_max_us) == (30.0, 30.0)  # 150 of 160 at 30 us
    assert digest.worst_gap_us == 2000.0
