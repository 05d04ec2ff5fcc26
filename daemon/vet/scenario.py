"""The conformance run: the phases that drive the device through PROTOCOL.md, in order.

Phases run one after another on one connection (handshake, frame probes, Configure, the armed
clauses, reconfigure); each records what it measured in the :class:`Report` and lets the next
run even when its clause failed. Clauses about the whole exchange (seq counters, telemetry
streams, rate, jitter) are judged from the probe's log at the end (:func:`judge_log`).

Drive values while armed are small (``DRIVE_FRACTION`` of drive_limit) and coded by the seq
they answer, so that the sample at which each Drive took effect can be read back from
``drive_applied``: that is how the late-command and watchdog clauses know, on the device's
clock, when a Drive arrived.
"""

from __future__ import annotations

import asyncio
import itertools
import math
from dataclasses import dataclass

from daemon.errors import OperatorError
from daemon.link import Port
from daemon.vet.clauses import Report
from daemon.vet.frames import raw_frame
from daemon.vet.judge import judge_log
from daemon.vet.probe import Logged, Probe
from daemon.vet.timing import f32
from daemon.vet.tolerances import APPLY_WITHIN, watchdog_tolerance_ms
from protocol import (
    CAP_LOCKSTEP,
    CAP_SIMULATED,
    F_WATCHDOG,
    SCHEMA_FINGERPRINT,
    ST_ARMED,
    ST_WATCHDOG_ACTIVE,
    Arm,
    ClearFaults,
    Configure,
    DeviceHello,
    FaultReport,
    Heartbeat,
    Identify,
    Message,
    Reply,
    ReplyResult,
    Stop,
    Telemetry,
    encode,
    hello_mismatch,
)

DEFAULT_MAX_RATE_HZ = 500  # default rate: the device's highest, but no more than this
DRIVE_FRACTION = 0.02  # armed test drives: 2 % of drive_limit
STREAM_S = 0.3  # device time collected from each stream for the rate clause
PRECONFIGURED_LISTEN_S = 0.1  # telemetry within this after the hello: configured earlier
FIRST_TELEMETRY_S = 5.0  # section 8.1: the host gives up after 5 s without telemetry
LATE_WINDOW = 40  # samples in the late-command window
LATE_EVERY = 5  # one deliberately late Drive every this many samples of the window
LATE_ATTEMPTS = 3
WATCHDOG_GIVE_UP_MS = 100  # device time past the allowed trip after which it never will
HOLD_SAMPLES = 5  # samples watched after Arm, disarm and Stop
LOCKSTEP_SLACK_S = 1.5  # a lockstep device free-runs after its grace period (section 8.4)
UNKNOWN_TYPE_ID = 0x7E
IDENTIFY = Identify.TYPE_ID


class Abandon(Exception):
    """The rest of the run cannot be carried out; the message says why."""


@dataclass(frozen=True)
class VetOptions:
    rate_hz: int | None = None  # None: the device's highest, at most DEFAULT_MAX_RATE_HZ
    watchdog_ms: int = 50


async def vet(port: Port, options: VetOptions) -> Report:
    """Run every clause against the device on ``port`` (which it closes) and return the report."""
    probe = Probe(port, asyncio.get_running_loop())
    report = Report()
    try:
        await Scenario(probe, report, options).run()
    finally:
        probe.close()
    return report


def _is(kind: type[Message]):
    return lambda message: type(message) is kind


class Scenario:
    def __init__(self, probe: Probe, report: Report, options: VetOptions):
        self.probe = probe
        self.report = report
        self.options = options
        self.wd_ms = options.watchdog_ms
        self.hello: DeviceHello | None = None
        self.rate_hz = 0
        self.stream_starts: list[tuple[int, int]] = []  # (log index of ACCEPTED Reply, rate)
        self.configured_before = False
        self.arm_faulted_done = False
        self.eps = 0.0
        self.frame_probe_identify: set[int] = set()
        self.trip: tuple[int, Telemetry, int] | None = None  # watchdog trip: log index, sample, phase start

    # ------------------------------------------------------------------ helpers

    @property
    def period_us(self) -> float:
        return 1e6 / self.rate_hz

    def wall_s(self, device_s: float) -> float:
        """A host-time guard for something taking ``device_s`` on the device clock."""
        return device_s * 4 + LOCKSTEP_SLACK_S + 2.0

    def coded(self, seq: int) -> float:
        """The armed drive answering ``seq``: distinct for 16 consecutive seqs, 0.53-1 eps."""
        return self.eps * (17 + seq % 16) / 32

    def latest(self) -> Telemetry | None:
        for _t, message in reversed(self.probe.log):
            if type(message) is Telemetry:
                return message
        return None

    async def command(self, message: Message) -> Logged | None:
        return await self.probe.command(message)

    async def result_of(self, make, expected: ReplyResult, key: str, what: str) -> Logged | None:
        """Send ``make(seq)`` and record in clause ``key`` whether it was answered ``expected``."""
        message = self.probe.numbered(make)
        found = await self.command(message)
        if found is None:
            self.report.fail(key, f"{what}: no Reply (seq {message.seq}) after 5 attempts")
            return None
        result = found[1].result
        name = ReplyResult(result).name if result in iter(ReplyResult) else f"result {result}"
        self.report.check(key, result == expected, f"{what} answered {name}" + (
            "" if result == expected else f", expected {expected.name}"))
        return found

    async def samples(self, count: int, after: int, device_s: float = 0.0) -> list[Telemetry]:
        """The first ``count`` Telemetry from log index ``after`` (fewer if they do not come)."""
        seen: list[Telemetry] = []

        def enough(message: Message) -> bool:
            if type(message) is Telemetry:
                seen.append(message)
            return len(seen) >= count

        await self.probe.wait_for(enough, self.wall_s(device_s + count * self.period_us * 1e-6), after)
        return seen[:count]

    async def until_applied(self, expect: float, after: int) -> Telemetry | None:
        """The first Telemetry from ``after`` whose drive_applied is ``expect`` (f32), within
        APPLY_WITHIN samples; None if it does not show."""
        target = f32(expect)
        seen = 0

        def shows(message: Message) -> bool:
            nonlocal seen
            if type(message) is not Telemetry:
                return False
            seen += 1
            return f32(message.drive_applied) == target or seen > APPLY_WITHIN

        found = await self.probe.wait_for(shows, self.wall_s(APPLY_WITHIN / self.rate_hz), after)
        if found is None or f32(found[1].drive_applied) != target:
            return None
        return found[1]

    async def collect(self, device_s: float) -> None:
        """Let the device run ``device_s`` more on its own clock."""
        last = self.latest()
        if last is None:
            return
        end_us = last.t_us + device_s * 1e6
        await self.probe.wait_for(
            lambda m: type(m) is Telemetry and m.t_us >= end_us, self.wall_s(device_s)
        )

    # ------------------------------------------------------------------ the run

    async def run(self) -> None:
        try:
            await self.handshake()
            await self.frame_probes()
            await self.unconfigured_arm()
            await self.configure_probes()
            await self.start_stream()
            can_arm = await self.faulted_arm_and_clear()
            await self.heartbeat_phase()
            if can_arm:
                if await self.arm_phase():
                    await self.clamp_phase()
                    await self.late_phase()
                    tripped = await self.watchdog_phase()
                    await self.fault_latch_phase(tripped)
                    await self.disarm_phase(lambda seq: Arm(seq, 0), "disarm", "Arm(0)")
                    await self.disarm_phase(Stop, "stop", "Stop")
            else:
                for key in ("arm", "clamp", "late", "watchdog", "fault_latch", "disarm", "stop"):
                    self.report.skip(key, "not run: faults stay latched after ClearFaults")
            await self.duplicates()
            await self.reconfigure()
        except Abandon as reason:
            self.report.not_run = str(reason)
        except OSError as exc:
            self.report.not_run = f"the port failed: {exc.strerror or exc}"
        finally:
            self.probe.answer = None
        judge_log(self)

    async def handshake(self) -> None:
        probe, report = self.probe, self.report
        probe.write(b"\x00")  # section 2: end whatever is in the device's buffer
        start = probe.mark()
        identify = probe.numbered(Identify)
        found = await self.command(identify)
        if found is None:
            stray = probe.messages(DeviceHello, start)  # wrong seq: carry on with its fields
            if not stray:
                counters = probe.decoder.counters
                if counters.bad_version:
                    report.fail("version", probe.decoder.last_error or "frame of another version")
                hint = f"; last receive error: {probe.decoder.last_error}" if probe.decoder.last_error else ""
                report.fail("hello_seq", f"no DeviceHello answered Identify seq {identify.seq}{hint}")
                raise Abandon("no DeviceHello")
            hello = stray[0]
            report.fail("hello_seq", f"Identify seq {identify.seq} answered only by DeviceHello "
                        f"seq 0x{hello.seq:04X}")
        else:
            hello = found[1]
        self.hello = hello
        problem = hello_mismatch(hello)
        if problem is not None:
            report.fail("version", problem)
            raise Abandon("device refused at the handshake (section 10.3)")
        report.fact("version", f"protocol_version 1, schema fingerprint 0x{SCHEMA_FINGERPRINT:08X}, "
                    f"device {hello.device_id!r} firmware {hello.firmware_major}.{hello.firmware_minor}."
                    f"{hello.firmware_patch}")
        caps = hello.capabilities
        report.check("capabilities", not (caps & CAP_LOCKSTEP) or bool(caps & CAP_SIMULATED),
                     f"capabilities 0x{caps:02X}" + (
                         " (CAP_LOCKSTEP without CAP_SIMULATED)" if caps & CAP_LOCKSTEP and not caps & CAP_SIMULATED else ""))
        fields_ok = (hello.sample_rate_hz >= 1 and math.isfinite(hello.drive_limit)
                     and hello.drive_limit > 0 and hello.drive_kind in (0, 1))
        report.check("capabilities", fields_ok, f"max rate {hello.sample_rate_hz} Hz, drive_limit "
                     f"{hello.drive_limit:g} {'V' if hello.drive_kind == 0 else 'N'}"
                     + ("" if fields_ok else f" (drive_kind {hello.drive_kind}): out of range"))
        if not fields_ok:
            raise Abandon("DeviceHello fields out of range")
        self.eps = DRIVE_FRACTION * hello.drive_limit
        rate = self.options.rate_hz or min(hello.sample_rate_hz, DEFAULT_MAX_RATE_HZ)
        if rate > hello.sample_rate_hz:
            raise OperatorError(f"--rate {rate}: the device supports at most {hello.sample_rate_hz} Hz")
        self.rate_hz = rate
        early = await probe.wait_for(_is(Telemetry), PRECONFIGURED_LISTEN_S, 0)
        self.configured_before = early is not None

    async def frame_probes(self) -> None:
        """Sections 2, 3 and 7: malformed frames dropped silently, the next frame decoded."""
        probe, report = self.probe, self.report
        start = probe.mark()
        dropped = {
            0x0101: ("bad CRC", raw_frame(IDENTIFY, 0x0101, crc_xor=0x5A5A)),
            0x0102: ("version 2", raw_frame(IDENTIFY, 0x0102, version=2)),
            0x0103: ("must-understand flag 0x01", raw_frame(IDENTIFY, 0x0103, flags=0x01)),
        }
        self.frame_probe_identify = set(dropped) | {0x0104, 0x0105, 0x0106, 0x0107}  # judged here
        for _name, frame in dropped.values():
            probe.write(frame)
        sentinel = await probe.command_raw(IDENTIFY, 0x0104, raw_frame(IDENTIFY, 0x0104, flags=0x10))
        report.check("rejected_frames", sentinel is not None,
                     "Identify with may-ignore flag 0x10 answered" if sentinel else
                     "Identify with may-ignore flag 0x10 not answered (section 3: bits 4-7 may be ignored)")
        if sentinel is None:
            sentinel = await self.command(Identify(0x0105))
        if sentinel is None:
            report.fail("rejected_frames", "no answer to a plain Identify after the bad frames")
        else:
            answered = {m.seq for m in probe.messages(DeviceHello, start, sentinel[0])}
            wrong = [name for seq, (name, _f) in dropped.items() if seq in answered]
            report.check("rejected_frames", not wrong,
                         "answered frames it must drop: " + ", ".join(wrong) if wrong else
                         "bad CRC, version 2 and must-understand flag frames dropped unanswered")
        # section 2: an oversize run, empty frames and a broken frame, then a good frame
        start = probe.mark()
        stream = (b"\x55" * 300 + b"\x00" + encode(Identify(0x0106)) + b"\x00\x00"
                  + encode(Identify(0x0107))[:4] + b"\x00")
        good = await probe.command_raw(IDENTIFY, 0x0106, stream)
        broken = [m for m in probe.messages(DeviceHello, start) if m.seq == 0x0107]
        report.check("resync", good is not None and not broken,
                     "Identify right after a 300-byte run without 0x00 answered, empty frames and a cut frame ignored"
                     if good is not None and not broken else
                     "a cut frame was answered" if broken else
                     "Identify right after a 300-byte run without 0x00 not answered")
        found = await probe.command_raw(UNKNOWN_TYPE_ID, 0x0BAD, raw_frame(UNKNOWN_TYPE_ID, 0x0BAD))
        self._rejection("unknown_type", found, ReplyResult.UNKNOWN_TYPE, "type 0x7E seq 0x0BAD")
        found = await probe.command_raw(Stop.TYPE_ID, 0x0BAE, raw_frame(Stop.TYPE_ID, 0x0BAE, b"\x00"))
        self._rejection("bad_payload", found, ReplyResult.BAD_PAYLOAD, "Stop with a 1-byte payload, seq 0x0BAE")

    def _rejection(self, key: str, found: Logged | None, expected: ReplyResult, what: str) -> None:
        if found is None:
            self.report.fail(key, f"{what}: no Reply")
            return
        result = found[1].result
        self.report.check(key, result == expected, f"{what} answered result {result} "
                          f"({expected.name} is {int(expected)}) echoing type and seq")

    async def unconfigured_arm(self) -> None:
        if self.configured_before:
            self.report.skip("arm_unconfigured", "device already configured (telemetry before "
                             "Configure); power-cycle it to check")
            return
        found = await self.result_of(lambda seq: Arm(seq, 1), ReplyResult.NOT_NOW,
                                     "arm_unconfigured", "Arm(1) before any Configure")
        if found is not None and found[1].result == ReplyResult.ACCEPTED:
            await self.command(self.probe.numbered(lambda seq: Arm(seq, 0)))

    async def configure_probes(self) -> None:
        maximum = self.hello.sample_rate_hz
        cases = [(0, self.wd_ms, "sample_rate_hz 0"), (self.rate_hz, 0, "watchdog_ms 0")]
        if maximum < 0xFFFF:
            cases.insert(1, (maximum + 1, self.wd_ms, f"sample_rate_hz {maximum + 1}"))
        for rate, wd, what in cases:
            found = await self.result_of(lambda seq, r=rate, w=wd: Configure(seq, r, w),
                                         ReplyResult.OUT_OF_RANGE, "configure_range", f"Configure {what}")
            if found is not None and found[1].result == ReplyResult.ACCEPTED:
                self.stream_starts.append((found[0], rate))

    async def start_stream(self) -> None:
        probe, report = self.probe, self.report
        before = probe.mark()
        probe.answer = lambda t: 0.3 * self.eps  # a disarmed device applies 0 whatever it says
        found = await self.result_of(lambda seq: Configure(seq, self.rate_hz, self.wd_ms),
                                     ReplyResult.ACCEPTED, "configure",
                                     f"Configure({self.rate_hz} Hz, watchdog {self.wd_ms} ms)")
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            raise Abandon("Configure not accepted")
        if not self.configured_before and not self.stream_starts:
            early = probe.messages(Telemetry, before, found[0])
            report.check("configure_range", not early, "no telemetry before the accepted Configure"
                         if not early else f"{len(early)} Telemetry before any accepted Configure")
        self.stream_starts.append((found[0], self.rate_hz))
        first = await probe.wait_for(_is(Telemetry), FIRST_TELEMETRY_S + LOCKSTEP_SLACK_S, found[0])
        if first is None:
            report.fail("configure", f"no Telemetry within {FIRST_TELEMETRY_S:g} s of the Reply")
            raise Abandon("no telemetry")
        telemetry = first[1]
        report.check("configure", telemetry.seq == 0, f"first Telemetry after the Reply has seq {telemetry.seq}")
        report.check("configure", bool(telemetry.status & ST_WATCHDOG_ACTIVE),
                     "ST_WATCHDOG_ACTIVE set" if telemetry.status & ST_WATCHDOG_ACTIVE
                     else f"ST_WATCHDOG_ACTIVE clear (status 0x{telemetry.status:02X})")
        await self.collect(STREAM_S)

    async def clear_faults(self, key: str) -> bool:
        found = await self.result_of(ClearFaults, ReplyResult.ACCEPTED, key, "ClearFaults")
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            return False
        after = await self.samples(1, found[0])
        if not after:
            self.report.fail(key, "no Telemetry after ClearFaults")
            return False
        t = after[0]
        ok = t.faults == 0 and not t.status & ST_ARMED
        self.report.check(key, ok, "next Telemetry: faults 0, not armed" if ok else
                          f"next Telemetry: faults 0x{t.faults:04X}, status 0x{t.status:02X}")
        return ok

    async def faulted_arm_and_clear(self) -> bool:
        latest = self.latest()
        if latest is not None and latest.faults:
            found = await self.result_of(lambda seq: Arm(seq, 1), ReplyResult.FAULT_LATCHED, "arm_faulted",
                                         f"Arm(1) with faults 0x{latest.faults:04X} latched")
            self.arm_faulted_done = True
            if found is not None and found[1].result == ReplyResult.ACCEPTED:
                await self.command(self.probe.numbered(lambda seq: Arm(seq, 0)))
        return await self.clear_faults("fault_latch")

    async def heartbeat_phase(self) -> None:
        """Section 9.1: Heartbeats alone keep the watchdog fed (sent every watchdog_ms / 3)."""
        probe, report = self.probe, self.report
        probe.answer = None
        start = probe.mark()
        first_frame = len(probe.frame_times)
        beats = asyncio.create_task(probe.beat(Heartbeat, self.wd_ms / 3000))
        last = self.latest()
        end_us = (last.t_us if last else 0) + 3 * self.wd_ms * 1000
        done = await probe.wait_for(
            lambda m: type(m) is Telemetry and (m.t_us >= end_us or m.faults & F_WATCHDOG),
            self.wall_s(3 * self.wd_ms / 1000), start)
        beats.cancel()
        probe.answer = lambda t: 0.3 * self.eps
        times = probe.frame_times[first_frame:]
        host_gap_ms = max((b - a for a, b in itertools.pairwise(times)), default=0.0) * 1000
        tripped = [m for m in probe.messages(Telemetry, start) if m.faults & F_WATCHDOG]
        if done is None:
            report.fail("heartbeat", "telemetry stopped during the Heartbeat-only phase")
        elif (tripped or probe.messages(FaultReport, start)) and host_gap_ms > self.wd_ms:
            # This host, not the device, left the watchdog unfed: no verdict on the device.
            report.skip("heartbeat", f"this host's own longest gap between Heartbeats was "
                        f"{host_gap_ms:.1f} ms, over watchdog_ms {self.wd_ms}: run again on a quieter machine")
        elif tripped or probe.messages(FaultReport, start):
            report.fail("heartbeat", f"F_WATCHDOG latched while Heartbeats came every "
                        f"{self.wd_ms / 3:.1f} ms")
        else:
            report.fact("heartbeat", f"no fault over {3 * self.wd_ms} ms of device time with only "
                        f"Heartbeats (longest gap {host_gap_ms:.1f} ms, watchdog_ms {self.wd_ms})")
        if tripped:
            await self.clear_faults("heartbeat")

    async def arm_phase(self) -> bool:
        probe, report = self.probe, self.report
        probe.answer = lambda t: 0.0
        await self.samples(3, probe.mark())
        await self.result_of(lambda seq: Arm(seq, 2), ReplyResult.OUT_OF_RANGE, "arm", "Arm(2)")
        found = await self.result_of(lambda seq: Arm(seq, 1), ReplyResult.ACCEPTED, "arm", "Arm(1)")
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            for key in ("clamp", "late", "watchdog", "fault_latch", "disarm", "stop"):
                report.skip(key, "not run: the device does not arm")
            return False
        held = await self.samples(HOLD_SAMPLES, found[0])
        ok = len(held) == HOLD_SAMPLES and all(t.status & ST_ARMED and t.drive_applied == 0 for t in held)
        report.check("arm", ok, f"then {len(held)} samples armed with drive 0 until a Drive asks more"
                     if ok else "after Arm: " + ", ".join(
                         f"status 0x{t.status:02X} drive {t.drive_applied:g}" for t in held))
        await self.result_of(lambda seq: Arm(seq, 1), ReplyResult.ACCEPTED, "arm", "Arm(1) while armed")
        found = await self.result_of(lambda seq: Configure(seq, self.rate_hz, self.wd_ms),
                                     ReplyResult.NOT_NOW, "arm", "Configure while armed")
        if found is not None:
            if found[1].result == ReplyResult.ACCEPTED:
                self.stream_starts.append((found[0], self.rate_hz))
            after = await self.samples(1, found[0])
            ok = bool(after) and after[0].seq != 0 and bool(after[0].status & ST_ARMED)
            report.check("arm", ok, "stream and arming unchanged" if ok else
                         "stream restarted or disarmed by a refused Configure")
        return True

    async def clamp_phase(self) -> None:
        limit = self.hello.drive_limit
        cases = ((3 * limit, limit), (-3 * limit, -limit), (math.nan, 0.0),
                 (0.4 * self.eps, 0.4 * self.eps), (math.inf, 0.0))
        shown = []
        for asked, expect in cases:
            self.probe.answer = lambda t, v=asked: v
            found = await self.until_applied(expect, self.probe.mark())
            if found is None:
                latest = self.latest()
                self.report.fail("clamp", f"Drive {asked:g} never applied as {expect:g} within "
                                 f"{APPLY_WITHIN} samples (drive_applied {latest.drive_applied:g})")
            else:
                shown.append(f"{asked:g}->{f32(found.drive_applied):g}")
        self.probe.answer = lambda t: 0.0
        if len(shown) == len(cases):
            self.report.fact("clamp", f"applied {', '.join(shown)} (drive_limit {limit:g})")

    async def late_phase(self) -> None:
        for attempt in range(LATE_ATTEMPTS):
            if await self.late_window(last_attempt=attempt == LATE_ATTEMPTS - 1):
                return

    async def late_window(self, last_attempt: bool) -> bool:
        """Section 8.2: one window of coded Drives with every fifth one also sent late on purpose.

        A Drive answering k arrived in time exactly when drive_applied at k + 1 is its value; so
        the host knows, from the device's telemetry, which of its Drives were late by its own
        delay and adds them to the deliberately late ones. Returns False when the window's
        boundary Drive was itself late (retry)."""
        probe, report = self.probe, self.report
        sent: dict[int, float] = {}
        state = {"c0": None, "deliberate": 0}

        def answer(t: Telemetry) -> float:
            k = t.seq
            if state["c0"] is None:
                state["c0"] = k
            k0 = state["c0"] + 1
            if k0 <= k < k0 + LATE_WINDOW and (k - k0) % LATE_EVERY == 0:
                probe.drive(-self.coded(k), k - 1)  # telemetry k has been sent: late for sure
                state["deliberate"] += 1
            sent[k] = f32(self.coded(k))
            return self.coded(k)

        start = probe.mark()
        probe.answer = answer

        def settled(m: Message) -> bool:
            c0 = state["c0"]
            return (type(m) is Telemetry and c0 is not None and m.seq >= c0 + 1 + LATE_WINDOW
                    and sent.get(m.seq - 1) == f32(m.drive_applied))

        end = await probe.wait_for(settled, self.wall_s((LATE_WINDOW + APPLY_WITHIN) / self.rate_hz), start)
        probe.answer = lambda t: 0.0
        if end is None:
            report.fail("late", "the coded Drives never showed in drive_applied")
            return True
        c0, b = state["c0"], end[1].seq
        k0 = c0 + 1
        applied = {m.seq: f32(m.drive_applied) for m in probe.messages(Telemetry, start)}
        if applied.get(k0) != sent[c0]:
            if last_attempt:
                report.fail("late", f"host too slow to measure: its Drive answering seq {c0} was "
                            f"late in each of {LATE_ATTEMPTS} attempts")
            return last_attempt
        by_host = sum(1 for k in range(k0, b - 1) if applied.get(k + 1) != sent[k])
        expected = state["deliberate"] + by_host
        before, after = probe.by_seq[k0].late_commands, end[1].late_commands
        rise = (after - before) & 0xFFFF
        report.check("late", rise == expected,
                     f"late_commands rose by {rise} for {expected} late Drives ({state['deliberate']} "
                     f"late on purpose, {by_host} late by host delay) over {b - k0} samples")
        return True

    async def watchdog_phase(self) -> bool:
        """Section 9.1: armed, the host stops its Drives (sending Identify, which must not feed
        the watchdog); the device must zero the drive, disarm and latch F_WATCHDOG."""
        probe, report = self.probe, self.report
        final = f32(self.eps / 8)
        state: dict[str, int] = {}

        def answer(t: Telemetry) -> float | None:
            if "final" in state:
                return None
            state["final"] = t.seq
            return final

        start = probe.mark()
        probe.answer = answer
        pings = asyncio.create_task(probe.beat(Identify, self.wd_ms / 3000))
        tolerance_ms = watchdog_tolerance_ms(self.period_us)
        give_up_ms = self.wd_ms + tolerance_ms + WATCHDOG_GIVE_UP_MS

        def tripped_or_overdue(m: Message) -> bool:
            if type(m) is not Telemetry or "final" not in state:
                return False
            if m.faults & F_WATCHDOG:
                return True
            final_at = probe.by_seq[state["final"]].t_us
            return m.t_us - final_at > give_up_ms * 1000

        found = await probe.wait_for(tripped_or_overdue, self.wall_s(give_up_ms / 1000), start)
        pings.cancel()
        if found is None or not found[1].faults & F_WATCHDOG:
            probe.answer = lambda t: 0.0
            report.fail("watchdog", f"no F_WATCHDOG within {give_up_ms:.0f} ms of device time after "
                        f"the last Drive (watchdog_ms {self.wd_ms})")
            await self.command(probe.numbered(Stop))
            return False
        report_msg = await probe.wait_for(lambda m: type(m) is FaultReport and m.code & F_WATCHDOG,
                                          0.5, start)
        probe.answer = lambda t: 0.3 * self.eps  # disarmed from here: any value applies 0
        telemetry = probe.messages(Telemetry, start, found[0] + 1)
        tripped = found[1]
        arrival = next((t for t in telemetry if t.seq > state["final"] and f32(t.drive_applied) == final), None)
        ref_seq = arrival.seq - 1 if arrival else state["final"]
        reference = probe.by_seq.get(ref_seq & 0xFFFF)
        latency_ms = (tripped.t_us - reference.t_us) / 1000
        in_time = self.wd_ms <= latency_ms <= self.wd_ms + tolerance_ms
        stopped = tripped.drive_applied == 0 and not tripped.status & ST_ARMED
        report.check("watchdog", in_time and stopped,
                     f"drive {'zeroed' if tripped.drive_applied == 0 else tripped.drive_applied} "
                     f"{'and disarmed' if not tripped.status & ST_ARMED else 'but still armed'}, F_WATCHDOG "
                     f"latched {latency_ms:.1f} ms after the last Drive on t_us (watchdog_ms {self.wd_ms}, "
                     f"allowed {self.wd_ms} .. {self.wd_ms + tolerance_ms:.1f} ms)")
        if report_msg is None:
            report.fail("watchdog", "no FaultReport with code F_WATCHDOG")
        else:
            detail = report_msg[1].detail
            ok = self.wd_ms <= detail <= self.wd_ms + tolerance_ms
            report.check("watchdog", ok, f"FaultReport detail {detail:.1f} ms")
        self.trip = (found[0], tripped, start)
        return True

    async def fault_latch_phase(self, tripped: bool) -> None:
        probe, report = self.probe, self.report
        if not tripped:
            report.fail("fault_latch", "no fault latched to check (the watchdog did not trip)")
            return
        index, first, phase_start = self.trip
        await self.collect(max(0.1, 3 * self.wd_ms / 1000))
        found = await self.result_of(lambda seq: Arm(seq, 1), ReplyResult.FAULT_LATCHED, "arm_faulted",
                                     "Arm(1) with F_WATCHDOG latched")
        if found is not None and found[1].result == ReplyResult.ACCEPTED:
            await self.command(probe.numbered(lambda seq: Arm(seq, 0)))
        later = probe.messages(Telemetry, index)
        lost = [t for t in later if not t.faults & F_WATCHDOG]
        span_ms = (later[-1].t_us - later[0].t_us) / 1000
        report.check("fault_latch", not lost, f"F_WATCHDOG in all {len(later)} samples over {span_ms:.0f} ms "
                     "while fed again" if not lost else
                     f"F_WATCHDOG cleared by itself at seq {lost[0].seq} without ClearFaults")
        reports = [m for m in probe.messages(FaultReport, phase_start)]
        ok = len(reports) == 1 and reports[0].code == F_WATCHDOG and reports[0].faults == first.faults
        report.check("fault_latch", ok, "one FaultReport: code F_WATCHDOG, faults as in telemetry "
                     f"0x{first.faults:04X}" if ok else "FaultReports " + ", ".join(
                         f"(faults 0x{r.faults:04X} code 0x{r.code:04X})" for r in reports)
                     + f" for one F_WATCHDOG event (telemetry faults 0x{first.faults:04X})")
        await self.clear_faults("fault_latch")

    async def disarm_phase(self, make, key: str, what: str) -> None:
        """Arm, let a coded Drive act, then disarm with ``make``: the drive must be 0 at once,
        whatever the Drives still say (section 9.2), and Stop latches no fault (section 6)."""
        probe, report = self.probe, self.report
        found = await self.command(probe.numbered(lambda seq: Arm(seq, 1)))
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            report.fail(key, "could not arm to check it")
            return
        probe.answer = lambda t: self.coded(t.seq)
        start = probe.mark()
        moving = await probe.wait_for(lambda m: type(m) is Telemetry and m.drive_applied != 0,
                                      self.wall_s(APPLY_WITHIN / self.rate_hz), start)
        if moving is None:
            report.fail(key, "armed Drives never applied")
        found = await self.result_of(make, ReplyResult.ACCEPTED, key, what)
        if found is not None:
            held = await self.samples(HOLD_SAMPLES, found[0])
            bad = [t for t in held if t.drive_applied != 0 or t.status & ST_ARMED or t.faults]
            report.check(key, len(held) == HOLD_SAMPLES and not bad,
                         f"then {len(held)} samples drive 0, disarmed, no fault while Drives asked "
                         f"{self.eps / 2:.3g}..{self.eps:.3g}" if not bad else
                         f"after {what}: seq {bad[0].seq} drive {bad[0].drive_applied:g} status "
                         f"0x{bad[0].status:02X} faults 0x{bad[0].faults:04X}")
            if probe.messages(FaultReport, found[0]):
                report.fail(key, f"a FaultReport followed {what}")
        probe.answer = lambda t: 0.3 * self.eps
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            await self.command(probe.numbered(Stop))

    async def duplicates(self) -> None:
        """Section 5: a retransmission (same seq) is executed and answered again."""
        probe = self.probe
        message = probe.numbered(lambda seq: Arm(seq, 0))
        start = probe.mark()
        probe.send_acked(message)
        probe.send_acked(message)
        count = 0

        def second(m: Message) -> bool:
            nonlocal count
            if type(m) is Reply and (m.for_type, m.for_seq) == (Arm.TYPE_ID, message.seq):
                count += 1
            return count >= 2

        found = await probe.wait_for(second, 1.0, start)
        self.report.check("seq_counters", found is not None,
                          f"Arm(0) sent twice with seq {message.seq} answered twice" if found else
                          f"Arm(0) sent twice with seq {message.seq} answered {count} time(s)")

    async def reconfigure(self) -> None:
        rate = max(1, self.rate_hz // 2)
        last = self.latest()
        found = await self.result_of(lambda seq: Configure(seq, rate, self.wd_ms), ReplyResult.ACCEPTED,
                                     "reconfigure", f"Configure({rate} Hz) while disarmed")
        if found is None or found[1].result != ReplyResult.ACCEPTED:
            return
        self.stream_starts.append((found[0], rate))
        first = await self.probe.wait_for(_is(Telemetry), FIRST_TELEMETRY_S + LOCKSTEP_SLACK_S, found[0])
        if first is None:
            self.report.fail("reconfigure", "no Telemetry after the second Configure")
            return
        t = first[1]
        ok = t.seq == 0 and (last is None or t.t_us >= last.t_us)
        self.report.check("reconfigure", ok, f"new stream from seq {t.seq}, t_us {t.t_us} after "
                          f"{last.t_us if last else '-'} (t_us keeps counting)")
        self.rate_hz = rate
        await self.collect(STREAM_S)

