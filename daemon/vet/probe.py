"""The conformance check's host end: one port, every received message logged in order.

Unlike the daemon's :class:`daemon.link.Link`, the probe does not hide what it sees: every
frame the device sends goes into :attr:`Probe.log` with the host time it was read, so a clause
can be judged on the whole exchange (answers in stream order, seq counters, telemetry of each
stream). It answers each Telemetry with at most one Drive chosen by :attr:`Probe.answer`
(PROTOCOL.md section 8.1), and matches Replies and DeviceHellos to the commands it sent.
"""

from __future__ import annotations

import asyncio
import os
from collections import Counter
from collections.abc import Callable

from daemon.link import Port
from protocol import (
    DeviceHello,
    Drive,
    FrameDecoder,
    Identify,
    Message,
    Reply,
    Telemetry,
    encode,
    encode_drive,
)

READ_CHUNK = 65536
RESEND_AFTER_S = 0.25  # acknowledged commands are resent with the same seq (section 7)
ATTEMPTS = 5

Predicate = Callable[[Message], bool]
Answer = Callable[[Telemetry], "float | None"]
Logged = tuple[int, Message]  # (index in the log, message)


class Probe:
    """A host on ``port``: send commands, answer telemetry, wait for what the device sends."""

    def __init__(self, port: Port, loop: asyncio.AbstractEventLoop):
        self.port = port
        self.loop = loop
        self.decoder = FrameDecoder()
        self.log: list[tuple[float, Message]] = []
        self.by_seq: dict[int, Telemetry] = {}  # latest Telemetry of each seq
        self.answer: Answer | None = None  # drive value for a Telemetry, None: no Drive
        self.sent_acked: Counter[tuple[int, int]] = Counter()  # (type id, seq) -> transmissions
        self.frame_times: list[float] = []  # host time of every frame written
        self._seqs: Counter[int] = Counter()  # next header seq per message type (section 5)
        self._waiters: list[tuple[Predicate, asyncio.Future[Logged]]] = []
        loop.add_reader(port.fd, self._readable)

    def close(self) -> None:
        self.loop.remove_reader(self.port.fd)
        self.port.close()

    # ---------------------------------------------------------------- sending

    def write(self, frame: bytes) -> None:
        """Write one whole frame (the pty or socket takes it at once; a short write is a fault
        of the link, not of the device, and shows as missing answers)."""
        os.write(self.port.fd, frame)
        self.frame_times.append(self.loop.time())

    def next_seq(self, type_id: int) -> int:
        """The host's next seq for ``type_id``: one counter per type from 0 (section 5)."""
        seq = self._seqs[type_id]
        self._seqs[type_id] = (seq + 1) & 0xFFFF
        return seq

    def numbered(self, make: Callable[[int], Message]) -> Message:
        """``make`` called with the next seq of its message type."""
        return make(self.next_seq(make(0).TYPE_ID))

    def drive(self, value: float, answers_seq: int) -> None:
        self.write(encode_drive(self.next_seq(Drive.TYPE_ID), value, answers_seq & 0xFFFF))

    def send_acked(self, message: Message) -> None:
        self.sent_acked[(message.TYPE_ID, message.seq)] += 1
        self.write(encode(message))

    async def command(self, message: Message) -> Logged | None:
        """Send an acknowledged command, resending it unanswered; its answer, or None."""
        return await self.command_raw(message.TYPE_ID, message.seq, encode(message))

    async def command_raw(self, type_id: int, seq: int, frame: bytes) -> Logged | None:
        """Send ``frame`` (a host frame of ``type_id`` and ``seq``) until it is answered: by a
        DeviceHello of that seq for Identify, else by a Reply naming the type and seq."""
        def answers(received: Message) -> bool:
            if type_id == Identify.TYPE_ID:
                return type(received) is DeviceHello and received.seq == seq
            return type(received) is Reply and received.for_type == type_id and received.for_seq == seq

        for _attempt in range(ATTEMPTS):
            after = len(self.log)
            self.sent_acked[(type_id, seq)] += 1
            self.write(frame)
            found = await self.wait_for(answers, RESEND_AFTER_S, after)
            if found is not None:
                return found
        return None

    async def beat(self, make: Callable[[int], Message], interval_s: float) -> None:
        """Send a numbered ``make`` every ``interval_s`` until cancelled (Heartbeat, Identify)."""
        while True:
            message = self.numbered(make)
            if type(message) is Identify:
                self.send_acked(message)
            else:
                self.write(encode(message))
            await asyncio.sleep(interval_s)

    # ---------------------------------------------------------------- receiving

    def _readable(self) -> None:
        try:
            data = os.read(self.port.fd, READ_CHUNK)
        except (BlockingIOError, InterruptedError):
            return
        now = self.loop.time()
        for message in self.decoder.feed(data):
            index = len(self.log)
            self.log.append((now, message))
            if type(message) is Telemetry:
                self.by_seq[message.seq] = message
                answer = self.answer
                if answer is not None:
                    value = answer(message)
                    if value is not None:
                        self.drive(value, message.seq)
            for predicate, future in self._waiters:
                if not future.done() and predicate(message):
                    future.set_result((index, message))

    def mark(self) -> int:
        """The log index the next message will get."""
        return len(self.log)

    async def wait_for(self, predicate: Predicate, timeout_s: float, after: int | None = None) -> Logged | None:
        """The first message from log index ``after`` (default: from now) matching ``predicate``,
        or None after ``timeout_s`` of host time."""
        start = len(self.log) if after is None else after
        for index in range(start, len(self.log)):
            if predicate(self.log[index][1]):
                return index, self.log[index][1]
        future: asyncio.Future[Logged] = self.loop.create_future()
        waiter = (predicate, future)
        self._waiters.append(waiter)
        try:
            return await asyncio.wait_for(future, timeout_s)
        except TimeoutError:
            return None
        finally:
            self._waiters.remove(waiter)

    def messages(self, kind: type[Message], start: int = 0, end: int | None = None) -> list[Message]:
        """Messages of ``kind`` in the log between indexes ``start`` and ``end``."""
        return [m for _t, m in self.log[start:end] if type(m) is kind]
