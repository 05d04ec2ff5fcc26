"""Clauses judged on the whole exchange once the run is over, from the probe's log.

Telemetry is split into streams at each ACCEPTED Configure (section 5: a stream restarts at
seq 0); telemetry before the first one belongs to an earlier host and is not judged.
"""

from __future__ import annotations

import itertools
import math
from typing import TYPE_CHECKING

from daemon.runtime.timing import percentile
from daemon.vet.timing import (
    interval_deviations_us,
    largest_gap_us,
    window_rates,
)
from daemon.vet.tolerances import (
    CLOCK_MIN_SPAN_S,
    CLOCK_TOLERANCE,
    JITTER_FRACTION,
    LINK_TIMEOUT_US,
    RATE_TOLERANCE,
)
from protocol import (
    CAP_LOCKSTEP,
    CAP_MOTOR_CURRENT,
    CAP_SUPPLY_VOLTAGE,
    ST_ARMED,
    ST_LOCKSTEP,
    DeviceHello,
    FaultReport,
    Identify,
    Reply,
    Telemetry,
)

if TYPE_CHECKING:
    from daemon.vet.scenario import Scenario

UNPROMPTED = 0xFFFF


def judge_log(run: Scenario) -> None:
    """Judge the clauses about the whole exchange (each only if the run got far enough)."""
    streams = _streams(run)
    _hello_seqs(run)
    _seq_counters(run)
    if run.hello is None or not streams:
        return
    _capabilities(run, streams)
    _telemetry_seq(run, streams)
    _rate_and_jitter(run, streams)
    _device_clock(run, streams)
    _disarmed_zero(run, streams)


def _streams(run: Scenario) -> list[tuple[int, list[tuple[float, Telemetry]]]]:
    """(configured rate, [(host time, Telemetry)]) of each stream, in order."""
    log = run.probe.log
    bounds = sorted(run.stream_starts) + [(len(log), 0)]
    streams = []
    for (start, rate), (end, _next) in itertools.pairwise(bounds):
        samples = [(t, m) for t, m in log[start:end] if type(m) is Telemetry]
        if samples:
            streams.append((rate, samples))
    return streams


def _hello_seqs(run: Scenario) -> None:
    probe, report = run.probe, run.report
    sent = {seq for (type_id, seq) in probe.sent_acked if type_id == Identify.TYPE_ID}
    hellos = [m.seq for m in probe.messages(DeviceHello)]
    ignore = run.frame_probe_identify | {UNPROMPTED}
    stray = sorted({seq for seq in hellos if seq not in ignore and seq not in sent})
    unanswered = sorted(sent - set(hellos) - run.frame_probe_identify)
    if stray or unanswered:
        if stray:
            report.fail("hello_seq", "DeviceHello seqs matching no Identify: "
                        + ", ".join(f"0x{s:04X}" for s in stray[:5]))
        if unanswered:
            report.fail("hello_seq", "Identify seqs never answered: "
                        + ", ".join(f"0x{s:04X}" for s in unanswered[:5]))
    elif sent:
        report.fact("hello_seq", f"all {len(sent)} Identify answered with their own seq "
                    f"(0x{min(sent):04X} .. 0x{max(sent):04X})")


def _consecutive(seqs: list[int]) -> list[tuple[int, int]]:
    return [(a, b) for a, b in itertools.pairwise(seqs) if (b - a) & 0xFFFF != 1]


def _seq_counters(run: Scenario) -> None:
    probe, report = run.probe, run.report
    replies = probe.messages(Reply)
    faults = probe.messages(FaultReport)
    for name, messages in (("Reply", replies), ("FaultReport", faults)):
        breaks = _consecutive([m.seq for m in messages])
        if breaks:
            a, b = breaks[0]
            report.fail("seq_counters", f"{name} seq went {a} -> {b} ({len(breaks)} breaks in "
                        f"{len(messages)}; section 5: one counter per type, +1 each)")
        elif len(messages) > 1:
            report.fact("seq_counters", f"{len(messages)} {name} seqs {messages[0].seq}..{messages[-1].seq} by +1")
    strays = [m for m in replies if (m.for_type, m.for_seq) not in probe.sent_acked]
    report.check("seq_counters", not strays, f"all {len(replies)} Replies name a command sent"
                 if not strays else f"Reply for type 0x{strays[0].for_type:02X} seq {strays[0].for_seq} "
                 "answers nothing sent")


def _capabilities(run: Scenario, streams) -> None:
    caps = run.hello.capabilities
    lockstep = bool(caps & CAP_LOCKSTEP)
    samples = [m for _rate, stream in streams for _t, m in stream]
    wrong = [m for m in samples if bool(m.status & ST_LOCKSTEP) != lockstep]
    run.report.check("capabilities", not wrong, f"ST_LOCKSTEP {'set' if lockstep else 'clear'} in all "
                     f"{len(samples)} samples, as declared" if not wrong else
                     f"ST_LOCKSTEP disagrees with CAP_LOCKSTEP at seq {wrong[0].seq} (section 8.4)")
    for bit, field in ((CAP_MOTOR_CURRENT, "motor_current_a"), (CAP_SUPPLY_VOLTAGE, "supply_v")):
        if not caps & bit:
            fitted = [m for m in samples if not math.isnan(getattr(m, field))]
            run.report.check("capabilities", not fitted, f"{field} NaN (not fitted)" if not fitted
                             else f"{field} {getattr(fitted[0], field):g} though not fitted")


def _telemetry_seq(run: Scenario, streams) -> None:
    total = 0
    for rate, stream in streams:
        seqs = [m.seq for _t, m in stream]
        total += len(seqs)
        breaks = _consecutive(seqs)
        backwards = [(a.seq, b.seq) for (_t, a), (_u, b) in itertools.pairwise(stream) if b.t_us <= a.t_us]
        if seqs[0] != 0 or breaks or backwards:
            what = (f"stream at {rate} Hz starts at seq {seqs[0]}" if seqs[0] != 0 else
                    f"seq {breaks[0][0]} -> {breaks[0][1]}" if breaks else
                    f"t_us not increasing at seq {backwards[0][0]} -> {backwards[0][1]}")
            run.report.fail("telemetry_seq", what)
    run.report.fact("telemetry_seq", f"{total} samples in {len(streams)} streams, each from seq 0 by +1, "
                    "t_us increasing")


def _rate_and_jitter(run: Scenario, streams) -> None:
    deviations_fraction: list[float] = []
    worst_gap_ok = True
    measured = 0
    for rate, stream in streams:
        pairs = [(m.seq, m.t_us) for _t, m in stream]
        rates = window_rates(pairs)
        if not rates:
            continue  # a stream the check did not mean to start (a Configure wrongly accepted)
        measured += 1
        low, high = min(rates), max(rates)
        ok = all(abs(r - rate) <= RATE_TOLERANCE * rate for r in rates)
        run.report.check("rate", ok, f"{low:.1f}..{high:.1f} Hz in {len(rates)} windows of 0.1 s of t_us "
                         f"(configured {rate}, tolerance ±{RATE_TOLERANCE:.0%})")
        period = 1e6 / rate
        deviations_fraction += [d / period for d in interval_deviations_us(pairs, period)]
        gap = largest_gap_us(pairs)
        limit = max(LINK_TIMEOUT_US, 3 * period)
        if gap > limit:
            worst_gap_ok = False
            run.report.fail("jitter", f"telemetry paused {gap / 1000:.1f} ms at {rate} Hz (limit "
                            f"{limit / 1000:.0f} ms, section 8.5)")
    if not measured:
        run.report.fail("rate", "no stream lasted one 0.1 s window of t_us")
    p99 = percentile(sorted(deviations_fraction), 0.99)
    if not math.isnan(p99):
        run.report.check("jitter", p99 <= JITTER_FRACTION and worst_gap_ok,
                         f"p99 of |t_us interval - period| {p99 * 100:.1f} % of a period over "
                         f"{len(deviations_fraction)} intervals (tolerance {JITTER_FRACTION:.0%})")


def _device_clock(run: Scenario, streams) -> None:
    if run.hello.capabilities & CAP_LOCKSTEP:
        run.report.skip("device_clock", "lockstep device: t_us is simulated time (section 8.4)")
        return
    samples = [(t, m.t_us) for _rate, stream in streams for t, m in stream]
    (h0, d0), (h1, d1) = samples[0], samples[-1]
    if h1 - h0 < CLOCK_MIN_SPAN_S:
        run.report.skip("device_clock", f"run too short ({h1 - h0:.2f} s of host time)")
        return
    ratio = (d1 - d0) / 1e6 / (h1 - h0)
    run.report.check("device_clock", abs(ratio - 1) <= CLOCK_TOLERANCE,
                     f"t_us advanced {ratio:.3f} s per host second over {h1 - h0:.1f} s "
                     f"(tolerance ±{CLOCK_TOLERANCE:.0%})")


def _disarmed_zero(run: Scenario, streams) -> None:
    disarmed = [m for _rate, stream in streams for _t, m in stream if not m.status & ST_ARMED]
    moving = [m for m in disarmed if m.drive_applied != 0]
    run.report.check("disarmed_zero", not moving and bool(disarmed),
                     f"{len(disarmed)} disarmed samples all applied 0 while Drives asked "
                     f"{0.3 * run.eps:.3g} or more" if not moving else
                     f"disarmed sample seq {moving[0].seq} applied {moving[0].drive_applied:g}")

