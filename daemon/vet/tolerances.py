"""The tolerances every time-based clause uses, in one place (docs/vet.md explains each)."""

RATE_TOLERANCE = 0.05  # section 8.5: interlocks.prearm_rate_tolerance, per 0.1 s window
JITTER_FRACTION = 0.5  # section 8.5: jitter of "a fraction of a period" is accepted (p99)
LINK_TIMEOUT_US = 30_000  # section 8.5: interlocks.link_timeout_ms default (or 3 periods)
CLOCK_TOLERANCE = 0.2  # t_us against the host's monotonic clock, over the whole run
CLOCK_MIN_SPAN_S = 0.5  # shortest host time the device clock is compared over
APPLY_WITHIN = 20  # samples a Drive may take to show in drive_applied
WATCHDOG_SLACK_MS = 1.0  # the device's own check granularity, on top of two sample periods


def watchdog_tolerance_ms(period_us: float) -> float:
    """How much later than watchdog_ms the trip may show on t_us: one period for not knowing
    exactly when within a sample period the last Drive arrived, one for the next sample to
    show the fault, and WATCHDOG_SLACK_MS for the device's check interval."""
    return 2 * period_us / 1000 + WATCHDOG_SLACK_MS
