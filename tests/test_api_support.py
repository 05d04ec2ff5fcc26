"""Shared pieces for the control API tests: a stand-in target, a manual clock, a raw line client.

``RigDouble`` stands in for the daemon behind the server in the server's own
tests (framing, queues, rate limits, slow clients): it records the commands it
accepts and refuses those it is told to, so the tests can show that a bad
request reaches nothing. Its status is a real supervisor's (the demo rig's, at
rest), so the lines the server encodes have the daemon's shape; two keys are
added for the tests. Commands against the real daemon and its supervisor are
tested in test_api_cli.py and the daemon's tests.
"""

from __future__ import annotations

import asyncio
import heapq
import itertools
import json
import sys
from collections.abc import Callable
from pathlib import Path

from daemon.config import demo_config_path, parse_config
from daemon.errors import CommandRefused
from daemon.supervisor import Event, Supervisor

# Bounds waits in the tests so a broken server fails a test instead of hanging it;
# never used to judge speed.
HANG_GUARD_S = 30.0
REPO = Path(__file__).resolve().parents[1]


async def poise(*argv: str, cwd: Path = REPO, hang_guard_s: float = HANG_GUARD_S) -> tuple[int, str, str]:
    """Run ``poise ARGV`` as its own process; (exit status, stdout, stderr)."""
    process = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "daemon.cli", *argv,
        cwd=cwd, stdout=asyncio.subprocess.PIPE, stderr=asyncio.subprocess.PIPE,
    )
    async with asyncio.timeout(hang_guard_s):
        out, err = await process.communicate()
    return process.returncode, out.decode(), err.decode()


class RigDouble:
    """Test double of the supervisor side of the API: execute() and status()."""

    def __init__(self) -> None:
        self.executed: list[tuple[str, dict, str]] = []
        self.refusals: dict[str, str] = {}
        self.status_calls = 0
        self.padding = ""  # makes status lines as long as a test needs
        self._supervisor = Supervisor(parse_config(demo_config_path().read_text()), lambda: 0.0)
        self._supervisor.notify(Event.LINK_UP, "link", 0.0)

    def execute(self, command: str, args: dict, source: str) -> dict:
        if command in self.refusals:
            raise CommandRefused(self.refusals[command])
        self.executed.append((command, args, source))
        return {"accepted": command}

    def status(self) -> dict:
        self.status_calls += 1
        return {
            **self._supervisor.status(),
            "status_calls": self.status_calls,
            "padding": self.padding,
        }


class _ManualTimer:
    def __init__(self, when: float, callback: Callable[[], object]):
        self.when = when
        self.callback = callback
        self.cancelled = False

    def cancel(self) -> None:
        self.cancelled = True


class ManualClock:
    """A clock the test moves by hand; timers due by the new time run, in order, inside advance_to()."""

    def __init__(self) -> None:
        self.now = 0.0
        self._timers: list[tuple[float, int, _ManualTimer]] = []
        self._order = itertools.count()

    def time(self) -> float:
        return self.now

    def call_at(self, when: float, callback: Callable[[], object]) -> _ManualTimer:
        timer = _ManualTimer(when, callback)
        heapq.heappush(self._timers, (when, next(self._order), timer))
        return timer

    def advance_to(self, t: float) -> None:
        """Jump to ``t``, then run every timer due by then, as a loop that was busy until ``t`` would."""
        self.now = t
        while self._timers and self._timers[0][0] <= t:
            _, _, timer = heapq.heappop(self._timers)
            if not timer.cancelled:
                timer.callback()

    def pending_timers(self) -> int:
        return sum(1 for _, _, timer in self._timers if not timer.cancelled)


class LineClient:
    """A raw connection: writes whatever bytes a test wants, reads JSON lines back."""

    def __init__(self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter):
        self.reader = reader
        self.writer = writer

    @classmethod
    async def open(cls, path: Path) -> LineClient:
        reader, writer = await asyncio.open_unix_connection(str(path), limit=1 << 24)
        return cls(reader, writer)

    def stop_reading(self) -> None:
        """Leave everything the server sends in the kernel's socket buffers, like a hung client."""
        self.writer.transport.pause_reading()

    def send(self, message: dict | bytes) -> None:
        data = message if isinstance(message, bytes) else json.dumps(message).encode() + b"\n"
        self.writer.write(data)

    async def read(self) -> dict | None:
        """The next line as JSON (strict: NaN is not JSON), or None at end of stream."""
        async with asyncio.timeout(HANG_GUARD_S):
            line = await self.reader.readline()
        return json.loads(line, parse_constant=_reject_constant) if line else None

    async def read_until_reply(self, request_id: int | str) -> tuple[list[dict], dict]:
        """Status lines that arrive before the reply to ``request_id``, and that reply."""
        statuses = []
        while True:
            message = await self.read()
            assert message is not None, "connection closed before the reply"
            if message.get("id") == request_id and "ok" in message:
                return statuses, message
            statuses.append(message["status"])

    async def close(self) -> None:
        self.writer.close()
        try:
            await self.writer.wait_closed()
        except ConnectionError:
            pass


def _reject_constant(name: str) -> None:
    raise ValueError(f"{name} is not JSON")
