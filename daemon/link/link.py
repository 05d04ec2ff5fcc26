"""The protocol's non-telemetry traffic on one port: handshake, acknowledged commands, heartbeats.

The control cycle owns the port's reader callback; it hands every received
message that is not Telemetry to :meth:`Link.on_message`, and writes its Drive
frames through :meth:`Link.write` like every other frame. The link matches
Replies (and the DeviceHello answering Identify) to the commands waiting for
them, resends unanswered commands with the same seq (:class:`RetryTracker`,
driven by :meth:`Link.poll`), and treats a DeviceHello nobody asked for as a
device reset.

Handshake: :meth:`Link.identify` (Identify -> DeviceHello, refused with one
line naming both protocol versions and both schema fingerprints if they differ),
then, once the host has settled what it needs from the hello, :meth:`Link.configure`
(Configure: sample rate and device watchdog), retried until answered. Telemetry
starts at seq 0 once the device accepts Configure. The handshake clears no
faults: whatever the device holds latched (F_RESET after its power-up,
F_WATCHDOG after a host that died) shows in its telemetry, and only an
operator's deliberate reset sends ClearFaults (PROTOCOL.md section 10).

Heartbeats: while the cycle answers telemetry its Drive frames feed the device
watchdog. :meth:`Link.poll` sends a Heartbeat whenever no frame at all has gone
out for a third of the device watchdog time (the device sent no telemetry, so
there was nothing to answer), so a live host never lets the device watchdog
trip, and a dead one always does.
"""

from __future__ import annotations

import asyncio
import logging
import os
from collections.abc import Callable

from protocol import (
    Configure,
    DeviceHello,
    FaultReport,
    FrameDecoder,
    Heartbeat,
    Identify,
    LinkStats,
    Message,
    Reply,
    ReplyResult,
    RetryTracker,
    encode,
    hello_mismatch,
)

log = logging.getLogger("poise.link")
_write = os.write

RETRY_TIMEOUT_S = 0.1
MAX_ATTEMPTS = 5


class LinkDown(Exception):
    """The link cannot carry on (write failed, no answer, protocol mismatch); one line why."""


class Link:
    """Sends host commands on ``fd`` and matches the device's answers to them.

    Slotted, as the control cycle writes every Drive frame through :meth:`write`.
    """

    __slots__ = (
        "_answers",
        "_clock",
        "_frames_tx_at_check",
        "_heartbeat_after_s",
        "_next_heartbeat_check_s",
        "_on_device_reset",
        "_on_fault_report",
        "_on_write_error",
        "_retry",
        "_seqs",
        "decoder",
        "device_resets",
        "fd",
        "heartbeats_sent",
        "hello",
        "stats",
        "stream_started",
        "tx_bytes_dropped",
    )

    def __init__(
        self,
        fd: int,
        watchdog_ms: int,
        clock: Callable[[], float],
        *,
        on_device_reset: Callable[[DeviceHello], None],
        on_fault_report: Callable[[FaultReport], None],
        on_write_error: Callable[[OSError], None],
        stats: LinkStats | None = None,
    ):
        self.fd = fd
        self._clock = clock
        self.stats = stats if stats is not None else LinkStats()
        self.decoder = FrameDecoder(self.stats)
        self.hello: DeviceHello | None = None
        # Set as the device's Reply accepting Configure is read, before any Telemetry after it:
        # Telemetry read before that is another stream's (a rig that kept sampling while no host
        # was there, or a lockstep rig's last unanswered sample), not this link's.
        self.stream_started = False
        self.device_resets = 0
        self.heartbeats_sent = 0
        self.tx_bytes_dropped = 0
        self._heartbeat_after_s = watchdog_ms / 3000.0
        self._frames_tx_at_check = -1
        self._next_heartbeat_check_s = 0.0
        self._seqs: dict[int, int] = {}  # next header seq per message type (PROTOCOL.md section 5)
        self._retry = RetryTracker(RETRY_TIMEOUT_S, MAX_ATTEMPTS)
        self._answers: dict[tuple[int, int], asyncio.Future[Message]] = {}
        self._on_device_reset = on_device_reset
        self._on_fault_report = on_fault_report
        self._on_write_error = on_write_error

    # ------------------------------------------------------------------ sending

    def write(self, frame: bytes) -> int:
        """Write one whole frame now; what the port cannot take is dropped and counted.

        Every frame to the rig goes out here, the control cycle's Drive frames included, so
        partial writes and the tx statistics are counted in one place. Returns the clock
        reading (the stats clock, monotonic ns) taken right after the write, which the cycle
        uses as its command-written time; 0 if the port failed (the write-error handler has
        been told).
        """
        try:
            sent = _write(self.fd, frame)
        except BlockingIOError:
            sent = 0
        except OSError as exc:
            self._on_write_error(exc)
            return 0
        stats = self.stats
        t_ns = stats.clock()
        size = len(frame)
        if sent < size:
            self.tx_bytes_dropped += size - sent
        stats.frames_tx += 1
        stats.bytes_tx += size
        stats.tx_frames.append((t_ns, frame, size))  # as sent: delimiter included
        return t_ns

    def _numbered(self, make: Callable[[int], Message]) -> Message:
        """``make`` called with the next seq of its message type: one counter per type, from 0.

        (The control cycle numbers its Drive frames itself.)"""
        command = make(0)
        seq = self._seqs.get(command.TYPE_ID, 0)
        self._seqs[command.TYPE_ID] = (seq + 1) & 0xFFFF
        return command._replace(seq=seq)

    def send(self, make: Callable[[int], Message]) -> asyncio.Future[Message]:
        """Send an acknowledged command built by ``make(seq)``; the future gets its answer.

        The future fails with :class:`LinkDown` when every attempt went unanswered.
        """
        command = self._numbered(make)
        future: asyncio.Future[Message] = asyncio.get_running_loop().create_future()
        self._answers[(command.TYPE_ID, command.seq)] = future
        self._retry.track(command, self._clock())
        self.write(encode(command))
        return future

    def send_unacked(self, make: Callable[[int], Message]) -> None:
        """Send a command nobody answers (Heartbeat)."""
        self.write(encode(self._numbered(make)))

    async def request(self, make: Callable[[int], Message]) -> Message:
        """Send an acknowledged command and wait for its answer (with retries)."""
        return await self.send(make)

    # ------------------------------------------------------------------ receiving

    def on_message(self, message: Message) -> None:
        """Everything the device sends except Telemetry."""
        kind = type(message)
        if kind is Reply or kind is DeviceHello:
            answered = self._retry.resolve(message)
            if answered is not None:
                if type(answered) is Configure and message.result == ReplyResult.ACCEPTED:
                    self.stream_started = True
                future = self._answers.pop((answered.TYPE_ID, answered.seq), None)
                if future is not None and not future.done():
                    future.set_result(message)
                return
            if kind is DeviceHello:
                self.device_resets += 1
                log.warning("device %r said hello unasked: it has reset", message.device_id)
                self._on_device_reset(message)
            return
        if kind is FaultReport:
            self._on_fault_report(message)

    def poll(self) -> None:
        """Resend unanswered commands, fail those out of attempts, heartbeat if the line is quiet."""
        now_s = self._clock()
        due = self._retry.poll(now_s)
        for command in due.resend:
            self.write(encode(command))
        for command in due.failed:
            future = self._answers.pop((command.TYPE_ID, command.seq), None)
            if future is not None and not future.done():
                future.set_exception(
                    LinkDown(
                        f"device did not answer {type(command).__name__} (seq {command.seq}) "
                        f"after {MAX_ATTEMPTS} attempts {RETRY_TIMEOUT_S * 1000:.0f} ms apart"
                        + self._last_error_hint()
                    )
                )
        if now_s >= self._next_heartbeat_check_s:
            if self.stats.frames_tx == self._frames_tx_at_check:
                self.send_unacked(Heartbeat)
                self.heartbeats_sent += 1
            self._frames_tx_at_check = self.stats.frames_tx
            self._next_heartbeat_check_s = now_s + self._heartbeat_after_s

    def fail_pending(self, reason: str) -> None:
        """The port is gone: every waiting command fails with ``reason``."""
        for future in self._answers.values():
            if not future.done():
                future.set_exception(LinkDown(reason))
        self._answers.clear()
        self._retry = RetryTracker(RETRY_TIMEOUT_S, MAX_ATTEMPTS)

    def _last_error_hint(self) -> str:
        error = self.decoder.last_error
        return f"; last receive error: {error}" if error else ""

    # ------------------------------------------------------------------ handshake

    async def identify(self) -> DeviceHello:
        """Identify -> DeviceHello; raise LinkDown naming both fingerprints on a mismatch."""
        hello = await self.request(Identify)
        assert isinstance(hello, DeviceHello)
        problem = hello_mismatch(hello)
        if problem is not None:
            raise LinkDown(f"refusing the rig: {problem}")
        self.hello = hello
        return hello

    async def configure(self, sample_rate_hz: int, watchdog_ms: int) -> None:
        """Configure; raises LinkDown. Latched device faults are left as they are.

        Telemetry starts at seq 0 once the device accepts Configure, possibly in the same read
        as the Reply: whatever the host must know to read it (the pacing) is settled before.
        """
        reply = await self.request(lambda seq: Configure(seq, sample_rate_hz, watchdog_ms))
        assert isinstance(reply, Reply)
        if reply.result != ReplyResult.ACCEPTED:
            raise LinkDown(
                f"device refused Configure(sample_rate_hz={sample_rate_hz}, watchdog_ms="
                f"{watchdog_ms}): {ReplyResult(reply.result).name}"
            )
