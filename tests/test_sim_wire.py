"""The simulated rig on the wire: every test runs over a real pty (opened with pyserial),
over loopback TCP (pyserial's socket:// URL) and over the in-process pipe.

The host side of every test decodes with the real protocol decoder; what it sees is what the
daemon would see from hardware. Expected behaviour is the one protocol/PROTOCOL.md specifies.
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import math
from collections.abc import AsyncIterator, Callable
from dataclasses import replace

import pytest
import serial

import protocol as p
from daemon.config import demo_config_path, load_config
from daemon.config.plant import rig_spec
from sim_device.faults import (
    DriverFault,
    EncoderGlitch,
    FaultPlan,
    Impulse,
    Reset,
    Stall,
    StuckSwitch,
)
from sim_device.rig import RigSpec, SimulatedRig
from sim_device.transports import InProcessPipe, PtyTransport, TcpTransport

TRANSPORTS = ("pty", "tcp", "pipe")
WAIT_S = 30.0  # a guard against a hung test, not a timing requirement
RESEND_AFTER_S = 0.25  # the host resends unanswered commands, as PROTOCOL.md section 7 says
RESENDS = 40


def demo_spec(sample_rate_hz: int | None = None) -> RigSpec:
    spec = rig_spec(load_config(demo_config_path()))
    if sample_rate_hz is not None:
        spec = replace(spec, identity=replace(spec.identity, sample_rate_hz=sample_rate_hz))
    return spec


class WireHost:
    """A minimal host: writes encoded frames, decodes everything the rig sends."""

    def __init__(self, write: Callable[[bytes], None]):
        self.write = write
        self.decoder = p.FrameDecoder()
        self.raw = bytearray()
        self.seen: list[p.Message] = []
        self._inbox: asyncio.Queue[p.Message] = asyncio.Queue()
        self.on_telemetry: Callable[[p.Telemetry], None] | None = None

    def feed(self, data: bytes) -> None:
        self.raw += data
        for message in self.decoder.feed(data):
            self.seen.append(message)
            if self.on_telemetry is not None and type(message) is p.Telemetry:
                self.on_telemetry(message)
            self._inbox.put_nowait(message)

    def send(self, message: p.Message) -> None:
        self.write(p.encode(message))

    async def expect(self, kind: type, where: Callable[[p.Message], bool] = lambda m: True):
        """The next message of type ``kind`` satisfying ``where`` (others are skipped)."""

        async def wait():
            while True:
                message = await self._inbox.get()
                if type(message) is kind and where(message):
                    return message

        return await asyncio.wait_for(wait(), WAIT_S)

    async def command(self, message: p.Message) -> p.Reply:
        """Send an acknowledged command and return its Reply, resending it while unanswered."""
        return await self.request(
            message, p.Reply, lambda r: r.for_type == message.TYPE_ID and r.for_seq == message.seq
        )

    async def request(self, message: p.Message, kind: type, where: Callable[[p.Message], bool]):
        """Send ``message`` until an answer of type ``kind`` arrives (PROTOCOL.md section 7)."""
        for _attempt in range(RESENDS):
            self.send(message)
            try:
                return await asyncio.wait_for(self.expect(kind, where), RESEND_AFTER_S)
            except TimeoutError:
                continue
        raise TimeoutError(f"no answer to {message}")

    async def step(self, telemetry: p.Telemetry, drive: float) -> p.Telemetry:
        """Answer ``telemetry`` with ``drive`` and return the next sample's Telemetry."""
        self.write(p.encode_drive(telemetry.seq, drive, telemetry.seq))
        return await self.expect(p.Telemetry, lambda t: t.seq == (telemetry.seq + 1) & 0xFFFF)

    def answer_every_sample(
        self, pending: p.Telemetry, drive: Callable[[int], float] = lambda seq: 0.0
    ) -> None:
        """Answer ``pending`` and then each Telemetry with one Drive (PROTOCOL.md section 8.1)."""

        def answer(telemetry: p.Telemetry) -> None:
            self.write(p.encode_drive(telemetry.seq, drive(telemetry.seq), telemetry.seq))

        self.answer_with(pending, answer)

    def answer_with(self, pending: p.Telemetry, answer: Callable[[p.Telemetry], None]) -> None:
        """Call ``answer`` for ``pending`` now and for every Telemetry from now on."""
        self.on_telemetry = answer
        answer(pending)


@contextlib.asynccontextmanager
async def connect(kind: str, spec: RigSpec | None = None, **rig_options) -> AsyncIterator[tuple[SimulatedRig, WireHost]]:
    """Start a simulated rig on transport ``kind`` and connect a host to it."""
    loop = asyncio.get_running_loop()
    spec = spec or demo_spec()
    if kind == "pipe":
        pipe = InProcessPipe()
        rig = SimulatedRig(spec, pipe.device_end, **rig_options)
        rig.start(loop)
        host = WireHost(pipe.host_end.write)
        pipe.host_end.open(loop, host.feed)
        try:
            yield rig, host
        finally:
            pipe.host_end.close()
            rig.close()
        return
    transport = PtyTransport() if kind == "pty" else TcpTransport(0)
    rig = SimulatedRig(spec, transport, **rig_options)
    rig.start(loop)
    port = serial.Serial(rig.where, timeout=0) if kind == "pty" else serial.serial_for_url(rig.where, timeout=0)
    host = WireHost(port.write)
    loop.add_reader(port.fileno(), lambda: host.feed(port.read(65536)))
    try:
        yield rig, host
    finally:
        loop.remove_reader(port.fileno())
        port.close()
        rig.close()


async def handshake(host: WireHost, rate_hz: int, watchdog_ms: int) -> tuple[p.DeviceHello, p.Telemetry]:
    """PROTOCOL.md section 10: a 0x00, Identify, hello, Configure; the hello and the first sample."""
    host.write(b"\x00")
    hello = await host.request(p.Identify(0), p.DeviceHello, lambda m: True)
    reply = await host.command(p.Configure(1, rate_hz, watchdog_ms))
    assert reply.result == p.ReplyResult.ACCEPTED
    return hello, await host.expect(p.Telemetry)


async def run_lockstep(
    host: WireHost, first: p.Telemetry, until_seq: int, drive: Callable[[int], float] | float = 0.0
) -> list[p.Telemetry]:
    """Answer every sample before ``until_seq``; the Telemetry received up to it, in order.

    The run stops answering there, so a lockstep device waits (and later free-runs): anything
    it sends after ``until_seq`` is not part of the result.
    """
    stop_at = asyncio.get_running_loop().create_future()
    drive_for = drive if callable(drive) else lambda seq: drive
    start = next(i for i in range(len(host.seen) - 1, -1, -1) if host.seen[i] is first)

    def answer(telemetry: p.Telemetry) -> None:
        if telemetry.seq < until_seq:
            host.write(p.encode_drive(telemetry.seq, drive_for(telemetry.seq), telemetry.seq))
        elif not stop_at.done():
            host.on_telemetry = None
            stop_at.set_result(len(host.seen))

    host.answer_with(first, answer)
    end = await asyncio.wait_for(stop_at, WAIT_S)
    return [m for m in host.seen[start:end] if type(m) is p.Telemetry]


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_handshake_then_telemetry_at_the_configured_rate(kind):
    config = load_config(demo_config_path())
    async with connect(kind, lockstep=True) as (_rig, host):
        hello, first = await handshake(host, 250, 200)
        host.answer_every_sample(first)
        samples = [first] + [await host.expect(p.Telemetry) for _ in range(49)]
    # The hello describes the configured rig (configs/kestrel-1.toml) in protocol terms.
    assert hello.protocol_version == p.PROTOCOL_VERSION
    assert hello.schema_fingerprint == p.SCHEMA_FINGERPRINT
    assert hello.device_id == config.rig.id
    assert hello.sample_rate_hz == config.sampling.rate_hz
    assert hello.cart_counts_per_m == pytest.approx(config.encoders.cart_counts_per_m)
    assert hello.pendulum_counts_per_rev == config.encoders.pendulum_counts_per_rev
    assert hello.track_length_m == pytest.approx(config.track.length_m)
    assert hello.drive_limit == pytest.approx(config.drive.limit)
    assert hello.drive_kind == p.DRIVE_KIND_VOLTS
    assert hello.capabilities & p.CAP_SIMULATED and hello.capabilities & p.CAP_LIMIT_SWITCHES
    assert [s.seq for s in samples] == list(range(50))
    assert [b.t_us - a.t_us for a, b in itertools.pairwise(samples)] == [4000] * 49  # 250 Hz
    assert all(s.status & p.ST_LOCKSTEP and s.status & p.ST_WATCHDOG_ACTIVE for s in samples)
    assert samples[0].faults == p.F_RESET  # latched since power-up until ClearFaults


async def test_device_hello_carries_the_seq_of_the_identify_it_answers():
    """PROTOCOL.md section 6 (1.1): the hello answering an Identify repeats that Identify's
    seq, and the hello sent unprompted at power-up carries UNPROMPTED_HELLO_SEQ."""
    async with connect("pipe") as (_rig, host):
        unprompted = await host.expect(p.DeviceHello)
        answers = [await host.request(p.Identify(seq), p.DeviceHello, lambda m: True) for seq in (7, 0, 0xFFFE)]
    assert unprompted.seq == p.UNPROMPTED_HELLO_SEQ
    assert [hello.seq for hello in answers] == [7, 0, 0xFFFE]


async def test_a_positive_drive_moves_the_cart_toward_positive_counts():
    """PROTOCOL.md 1.1 section 6 (Drive): a positive drive pushes the cart toward +x, where
    cart_counts increase."""
    async with connect("pipe", lockstep=True) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
        assert (await host.command(p.ClearFaults(2))).result == p.ReplyResult.ACCEPTED
        assert (await host.command(p.Arm(3, 1))).result == p.ReplyResult.ACCEPTED
        samples = await run_lockstep(host, first, first.seq + 100, drive=3.0)
    assert samples[-1].drive_applied == 3.0 and samples[-1].cart_counts > 100


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_silent_host_trips_the_watchdog_in_real_time(kind):
    async with connect(kind) as (_rig, host):
        await handshake(host, 500, 20)
        report = await host.expect(p.FaultReport)
        tripped = await host.expect(p.Telemetry, lambda t: t.faults & p.F_WATCHDOG)
        before = [t for t in host.seen if type(t) is p.Telemetry and not t.faults & p.F_WATCHDOG]
    assert report.code == p.F_WATCHDOG and report.faults & p.F_WATCHDOG
    assert report.detail > 20.0  # ms since the last Drive/Heartbeat (PROTOCOL.md 6, FaultReport)
    # Device time: Configure at t0, samples every 2 ms; the first sample more than 20 ms later trips.
    t0 = before[0].t_us
    assert tripped.t_us - t0 == 22_000
    assert tripped.drive_applied == 0.0 and not tripped.status & p.ST_ARMED


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_heartbeats_alone_keep_the_watchdog_fed(kind):
    async with connect(kind) as (_rig, host):
        _hello, first = await handshake(host, 500, 100)
        host.answer_with(first, lambda telemetry: host.send(p.Heartbeat(telemetry.seq)))
        last = await host.expect(p.Telemetry, lambda t: t.seq == 300)  # 600 ms, six timeouts' worth
    assert not last.faults & p.F_WATCHDOG
    assert not any(type(m) is p.FaultReport for m in host.seen)


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_lockstep_run_repeats_byte_for_byte(kind):
    """Same seed, same host: identical telemetry bytes, sensor noise and jitter included."""
    spec = demo_spec()
    spec = replace(spec, sensors=replace(spec.sensors, cart_noise_counts=3.0, pendulum_noise_counts=1.5,
                                         jitter_us=40.0))

    async def run(seed: int) -> bytes:
        # A long grace: however slow this machine is, the device waits for the host.
        async with connect(kind, spec, lockstep=True, seed=seed, lockstep_grace_s=30.0,
                           faults=FaultPlan(initial_angle_rad=math.radians(150.0))) as (rig, host):
            _hello, first = await handshake(host, 500, 50)
            assert (await host.command(p.ClearFaults(2))).result == p.ReplyResult.ACCEPTED
            assert (await host.command(p.Arm(3, 1))).result == p.ReplyResult.ACCEPTED
            await run_lockstep(host, first, 600, lambda seq: 3.0 * math.sin(seq * 0.02))
            assert rig.clock.free_run_spells == 0
            return bytes(host.raw)

    first, second, other_seed = await run(7), await run(7), await run(8)
    assert first == second
    assert first != other_seed


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_drive_takes_effect_one_sample_later_and_only_when_armed(kind):
    async with connect(kind, lockstep=True) as (_rig, host):
        _hello, sample = await handshake(host, 500, 50)
        disarmed = [sample]
        for _ in range(20):
            disarmed.append(await host.step(disarmed[-1], 2.0))
        assert (await host.command(p.ClearFaults(2))).result == p.ReplyResult.ACCEPTED
        assert (await host.command(p.Arm(3, 1))).result == p.ReplyResult.ACCEPTED
        requested, armed = [], [disarmed[-1]]
        for k in range(40):
            requested.append(0.25 * (k % 16) - 1.0)  # exact in f32
            armed.append(await host.step(armed[-1], requested[-1]))
    assert all(t.drive_applied == 0.0 for t in disarmed)
    assert all(t.cart_counts == disarmed[0].cart_counts for t in disarmed)  # the cart never moved
    # Each Drive is in effect from the sample after the one it answers.
    assert [t.drive_applied for t in armed[1:]] == requested
    assert armed[0].drive_applied == 0.0


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_stop_cuts_the_drive_before_its_reply(kind):
    async with connect(kind, lockstep=True) as (rig, host):
        _hello, sample = await handshake(host, 500, 50)
        await host.command(p.ClearFaults(2))
        await host.command(p.Arm(3, 1))
        sample = await host.step(sample, 4.0)
        # A late Drive(0) (answering an older sample) is held for the next sample, so the drive in
        # effect does not change yet, and lockstep does not advance on it.
        host.write(p.encode_drive(9, 0.0, (sample.seq - 1) & 0xFFFF))
        await host.command(p.ClearFaults(8))  # answered: the device has handled the late Drive
        held = rig.device.drive_output
        reply = await host.command(p.Stop(4))
        at_reply = rig.device.drive_output
        after = await host.step(sample, 4.0)
    assert sample.drive_applied == 4.0 and held == 4.0
    assert reply.result == p.ReplyResult.ACCEPTED and at_reply == 0.0
    assert after.drive_applied == 0.0 and not after.status & p.ST_ARMED
    assert after.late_commands == sample.late_commands + 1


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_commands_refused_in_the_wrong_state(kind):
    async with connect(kind, lockstep=True) as (_rig, host):
        host.send(p.Identify(0))
        await host.expect(p.DeviceHello)
        not_configured = await host.command(p.Arm(1, 1))
        too_fast = await host.command(p.Configure(2, 501, 50))  # above the hello's 500 Hz
        await handshake(host, 500, 50)
        reset_latched = await host.command(p.Arm(3, 1))
        bad_arm = await host.command(p.Arm(4, 2))
        cleared = await host.command(p.ClearFaults(5))
        armed = await host.command(p.Arm(6, 1))
        while_armed = await host.command(p.Configure(7, 250, 50))
        armed_again = await host.command(p.Arm(8, 1))
    # PROTOCOL.md 1.1 section 9.2: unconfigured and faulted (F_RESET at power-up) is NOT_NOW,
    # Arm while armed is ACCEPTED.
    assert not_configured.result == p.ReplyResult.NOT_NOW
    assert armed_again.result == p.ReplyResult.ACCEPTED
    assert too_fast.result == p.ReplyResult.OUT_OF_RANGE
    assert reset_latched.result == p.ReplyResult.FAULT_LATCHED
    assert bad_arm.result == p.ReplyResult.OUT_OF_RANGE
    assert cleared.result == armed.result == p.ReplyResult.ACCEPTED
    assert while_armed.result == p.ReplyResult.NOT_NOW


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_well_framed_unknown_or_wrong_length_frames_are_answered_corrupt_ones_are_not(kind):
    # PROTOCOL.md section 7: a well-framed host frame of an unknown type gets Reply UNKNOWN_TYPE,
    # a known type with the wrong length BAD_PAYLOAD; a frame failing the CRC check is dropped
    # silently (its seq cannot be trusted). A device-to-host type is unknown to the device.
    def frame(type_id: int, seq: int, payload: bytes = b"") -> bytes:
        return p.seal_frame(bytes([p.PROTOCOL_VERSION, 0, type_id]) + seq.to_bytes(2, "little") + payload)

    bad_crc = bytearray(p.cobs_decode(frame(p.Stop.TYPE_ID, 8)[:-1]))
    bad_crc[-1] ^= 0x01
    async with connect(kind, lockstep=True) as (rig, host):
        host.write(p.cobs_encode(bytes(bad_crc)) + b"\x00")
        host.write(frame(0x7E, 0x1234))
        host.write(frame(p.Arm.TYPE_ID, 9))  # Arm without its payload byte
        host.write(frame(p.Stop.TYPE_ID, 10, b"\x00"))  # Stop with one byte too many
        host.send(p.Reply(11, p.Arm.TYPE_ID, 9, p.ReplyResult.ACCEPTED))
        await host.request(p.Identify(0), p.DeviceHello, lambda m: True)
    replies = [(m.for_type, m.for_seq, m.result) for m in host.seen if type(m) is p.Reply]
    assert replies == [
        (0x7E, 0x1234, p.ReplyResult.UNKNOWN_TYPE),
        (p.Arm.TYPE_ID, 9, p.ReplyResult.BAD_PAYLOAD),
        (p.Stop.TYPE_ID, 10, p.ReplyResult.BAD_PAYLOAD),
        (p.Reply.TYPE_ID, 11, p.ReplyResult.UNKNOWN_TYPE),
    ]
    counters = rig.device.decoder.counters
    assert (counters.crc_failures, counters.unknown_type, counters.malformed) == (1, 1, 2)


@pytest.mark.parametrize(
    ("rate_hz", "jitter_us", "substeps"), [(1000, 0.0, 1), (500, 0.0, 2), (400, 0.0, 3), (1000, 30.0, 2)]
)
async def test_each_sample_is_integrated_in_rk4_steps_of_at_most_1_ms(rate_hz, jitter_us, substeps):
    # 400 Hz: 2.5 ms per sample in 3 steps; with jitter a sample can come a quarter period late
    spec = demo_spec(1000)
    spec = replace(spec, sensors=replace(spec.sensors, jitter_us=jitter_us))
    async with connect("pipe", spec, lockstep=True) as (rig, host):
        await handshake(host, rate_hz, 200)
    assert rig.plant.substeps == substeps


# ---- injected faults, each as the host sees it ------------------------------------------------


def faulty(*events, **plan) -> dict:
    return {"lockstep": True, "lockstep_grace_s": 0.005, "faults": FaultPlan(events=tuple(events), **plan)}


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_dropped_frames_show_as_telemetry_gaps(kind):
    async with connect(kind, **faulty(drop_rate=0.05), seed=3) as (rig, host):
        _hello, first = await handshake(host, 500, 200)
        dropped_before = rig.transport.frames_dropped
        lost_before = host.decoder.counters.lost_frames
        samples = await run_lockstep(host, first, 400)
        dropped = rig.transport.frames_dropped - dropped_before
        lost = host.decoder.counters.lost_frames - lost_before
    seqs = [t.seq for t in samples]
    assert dropped > 0
    assert seqs == sorted(set(seqs)) and lost == dropped == seqs[-1] + 1 - len(seqs)


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_corrupted_frames_are_rejected_never_accepted(kind):
    async with connect(kind, **faulty(corrupt_rate=0.05), seed=4) as (rig, host):
        _hello, first = await handshake(host, 500, 200)
        corrupted_before = rig.transport.frames_corrupted
        lost_before = host.decoder.counters.lost_frames
        samples = await run_lockstep(host, first, 400)
        corrupted = rig.transport.frames_corrupted - corrupted_before
        lost = host.decoder.counters.lost_frames - lost_before
    counters = host.decoder.counters
    assert corrupted > 0 and counters.crc_failures + counters.cobs_errors + counters.runts > 0
    # CRC-16/CCITT detects every error burst of up to 16 bits, so a one-byte change never passes
    # (W. W. Peterson and D. T. Brown, "Cyclic Codes for Error Detection", Proc. IRE, 1961).
    # A corrupted delimiter merges a frame with the next: at most two lost per corruption. The
    # last corrupted frame may not have been followed by a sample yet, so not yet counted lost.
    assert corrupted - 1 <= lost <= 2 * corrupted
    assert all(t.t_us == 2000 * t.seq and t.cart_counts == 0 for t in samples)  # nothing garbled


async def test_stall_sends_nothing_for_its_duration_then_resumes():
    async with connect("pipe", **faulty((0.1, Stall(30.0)))) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
        samples = await run_lockstep(host, first, 120)
    times = [t.t_us for t in samples]
    jump = max(b - a for a, b in itertools.pairwise(times))
    # The stall starts at the sample at 100 ms and silences (100, 130] ms: 15 samples at 2 ms.
    assert jump == 2000 * 16
    assert host.decoder.counters.lost_frames == 15


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_device_reset_says_hello_again_and_restarts_its_counters(kind):
    async with connect(kind, **faulty((0.05, Reset()))) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
        assert (await host.command(p.ClearFaults(2))).result == p.ReplyResult.ACCEPTED
        host.answer_every_sample(first)
        await host.expect(p.DeviceHello, lambda h: h.seq == p.UNPROMPTED_HELLO_SEQ)  # unprompted
        host.on_telemetry = None
        before = [m for m in host.seen if type(m) is p.Telemetry]
        refused = await host.command(p.Arm(3, 1))  # not configured after a reset
        _hello, restarted = await handshake(host, 500, 200)
        still_latched = await host.command(p.Arm(4, 1))
    assert before[-1].faults == 0 and before[-1].t_us == 48_000  # the last sample before 50 ms
    assert refused.result == p.ReplyResult.NOT_NOW
    assert restarted.seq == 0 and restarted.t_us == 0 and restarted.faults == p.F_RESET
    assert still_latched.result == p.ReplyResult.FAULT_LATCHED


async def test_encoder_glitch_jumps_the_count_and_stays():
    async with connect("pipe", **faulty((0.02, EncoderGlitch(37)), (0.04, EncoderGlitch(-500, "cart")))) as (
        _rig, host
    ):
        _hello, first = await handshake(host, 500, 200)
        samples = await run_lockstep(host, first, 30)
    # The rig hangs at rest, so the counts are the glitches alone.
    assert [t.pendulum_counts for t in samples] == [0] * 10 + [37] * 21
    assert [t.cart_counts for t in samples] == [0] * 20 + [-500] * 11


async def test_stuck_and_noisy_limit_switches():
    plan = faulty((0.0, StuckSwitch("neg")), noisy_switch="pos", noisy_switch_rate=0.25)
    async with connect("pipe", **plan, seed=5) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
        samples = await run_lockstep(host, first, 399)
    assert all(t.switches & p.SW_LIMIT_NEG for t in samples)  # the cart is at the centre
    chatter = sum(1 for t in samples if t.switches & p.SW_LIMIT_POS)
    # Binomial(400, 0.25): mean 100, standard deviation 8.7; this seed's count lies within 3 sigma.
    assert 74 <= chatter <= 126


@pytest.mark.parametrize("has_switches", [True, False])
async def test_limit_switches_trip_at_their_inset_and_end_stops_show_at_the_track_ends(has_switches):
    spec = demo_spec()
    track = replace(spec.plant.track, has_limit_switches=has_switches)
    spec = replace(spec, plant=replace(spec.plant, track=track))
    async with connect("pipe", spec, lockstep=True) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
        await host.command(p.ClearFaults(2))
        await host.command(p.Arm(3, 1))
        # 4 V toward +x until the cart has hit that end, then toward -x until it has hit the other
        samples = await run_lockstep(host, first, 1300, lambda seq: 4.0 if seq < 450 else -4.0)
    per_m = spec.sensors.cart_counts_per_m
    trip = (track.length_m / 2 - track.switch_inset_m) * per_m  # configs/kestrel-1.toml: 0.42 m
    end = round(track.length_m / 2 * per_m)
    for t in samples:
        if abs(abs(t.cart_counts) - trip) > 1:  # clear of the trip point by more than a count
            assert bool(t.switches & p.SW_LIMIT_POS) == (has_switches and t.cart_counts > trip), t
            assert bool(t.switches & p.SW_LIMIT_NEG) == (has_switches and t.cart_counts < -trip), t
        if abs(t.cart_counts) == end:
            assert t.switches & p.SW_END_STOP, t
    at_ends = [t.cart_counts for t in samples if t.switches & p.SW_END_STOP]
    assert at_ends[0] == end and at_ends[-1] == -end  # first touched at +x, last at -x
    assert any(t.switches & p.SW_LIMIT_POS for t in samples) == has_switches


@pytest.mark.parametrize("kind", TRANSPORTS)
async def test_driver_fault_cuts_the_drive_and_is_reported(kind):
    async with connect(kind, **faulty((0.02, DriverFault()))) as (_rig, host):
        _hello, sample = await handshake(host, 500, 200)
        await host.command(p.ClearFaults(2))
        await host.command(p.Arm(3, 1))
        samples = await run_lockstep(host, sample, 15, drive=3.0)
        report = await host.expect(p.FaultReport)
        rearm = await host.command(p.Arm(4, 1))
        cleared = await host.command(p.ClearFaults(5))
    assert report.code == p.F_DRIVER and math.isnan(report.detail)
    tripped = [t for t in samples if t.faults & p.F_DRIVER]
    assert tripped[0].t_us == 20_000
    assert all(t.drive_applied == 0.0 and not t.status & p.ST_ARMED for t in tripped)
    assert samples[9].drive_applied == 3.0 and samples[9].status & p.ST_ARMED
    assert rearm.result == p.ReplyResult.FAULT_LATCHED and cleared.result == p.ReplyResult.ACCEPTED


async def test_estop_button_latches_until_released_and_cleared():
    async with connect("pipe", lockstep=True) as (rig, host):
        _hello, sample = await handshake(host, 500, 200)
        await host.command(p.ClearFaults(2))
        await host.command(p.Arm(3, 1))
        sample = await host.step(sample, 2.0)
        rig.press_estop()
        cut_at_once = rig.device.drive_output
        report = await host.expect(p.FaultReport)
        pressed = await host.step(sample, 2.0)
        while_pressed = await host.command(p.ClearFaults(4))
        rig.release_estop()
        released = await host.step(pressed, 2.0)
        cleared = await host.command(p.ClearFaults(5))
    assert sample.drive_applied == 2.0 and cut_at_once == 0.0 and report.code == p.F_ESTOP
    assert pressed.switches & p.SW_ESTOP_BUTTON and pressed.faults & p.F_ESTOP
    assert pressed.drive_applied == 0.0 and not pressed.status & p.ST_ARMED
    assert while_pressed.result == p.ReplyResult.FAULT_LATCHED
    assert not released.switches & p.SW_ESTOP_BUTTON and released.faults & p.F_ESTOP
    assert cleared.result == p.ReplyResult.ACCEPTED


async def test_impulses_move_the_pendulum_and_the_cart_the_right_way():
    async with connect("pipe", **faulty((0.01, Impulse(pendulum_ns=0.02)))) as (rig, host):
        _hello, first = await handshake(host, 500, 200)
        samples = await run_lockstep(host, first, 20)
        rig.apply_impulse_now(cart_ns=0.05)
        later = await run_lockstep(host, samples[-1], 40)
    # Hanging pendulum, bob pushed toward +x: its top end leans to -x relative to the bob, so
    # theta = pi + small positive angle (DEVELOPERS.md convention) and the count rises.
    assert all(t.pendulum_counts == 0 for t in samples[:5])
    assert samples[-1].pendulum_counts > 0
    assert later[-1].cart_counts > samples[-1].cart_counts  # pushed toward +x


async def test_initial_angle_shows_in_the_first_sample():
    async with connect("pipe", **faulty(initial_angle_rad=math.radians(150.0))) as (_rig, host):
        _hello, first = await handshake(host, 500, 200)
    # Counts are 0 hanging (theta = pi), 4096 per turn: -30 degrees is -4096/12 = -341.33 counts.
    assert first.pendulum_counts == -341
