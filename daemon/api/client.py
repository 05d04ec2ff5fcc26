"""A small asyncio client for the control API, used by the CLI and the dashboard.

One connection carries both requests and the status stream: a reader task
matches replies to requests by id and keeps the newest status lines for
:meth:`ApiClient.subscribe`. ::

    async with await ApiClient.connect("/tmp/poise.sock", source="cli") as client:
        await client.request("setpoint", {"x_m": 0.1})
        async for status in client.subscribe(rate_hz=10):
            ...

A refused command raises :class:`daemon.errors.CommandRefused`; any other error
reply, or a lost connection, raises :class:`ApiError` with its one-line message.
"""

from __future__ import annotations

import asyncio
import json
from collections import deque
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Self

from daemon.api.wire import REFUSED
from daemon.errors import CommandRefused

# Status lines kept for a subscriber that reads slower than they arrive; older ones are dropped.
STATUS_BACKLOG = 8
# Replies and status lines may be far longer than a request; this bounds one line from the daemon.
MAX_REPLY_BYTES = 16 << 20


class ApiError(Exception):
    """The daemon answered with an error, or could not be reached; the message is one line."""


class DaemonNotRunning(ApiError):
    """Nothing is serving on the socket path."""


class ConnectionLost(ApiError):
    """The connection to the daemon closed."""


class ApiClient:
    """One connection to the daemon. Create with :meth:`connect`; close with :meth:`close` or ``async with``."""

    def __init__(
        self,
        reader: asyncio.StreamReader,
        writer: asyncio.StreamWriter,
        socket_path: Path,
        source: str,
    ):
        self.socket_path = socket_path
        self.source = source
        self.status_dropped = 0
        self._reader = reader
        self._writer = writer
        self._next_id = 0
        self._pending: dict[int, asyncio.Future[dict]] = {}
        self._statuses: deque[dict] = deque(maxlen=STATUS_BACKLOG)
        self._status_arrived = asyncio.Event()
        self._closed_reason: str | None = None
        self._reader_task = asyncio.create_task(self._read_loop())

    @classmethod
    async def connect(cls, socket_path: str | Path, *, source: str = "api") -> ApiClient:
        """Connect to the daemon; raises DaemonNotRunning when nothing serves there."""
        path = Path(socket_path)
        try:
            reader, writer = await asyncio.open_unix_connection(str(path), limit=MAX_REPLY_BYTES)
        except FileNotFoundError:
            raise DaemonNotRunning(
                f"no Poise daemon is running on {path} (no socket file there)"
            ) from None
        except ConnectionRefusedError:
            raise DaemonNotRunning(
                f"no Poise daemon is running on {path} (stale socket file)"
            ) from None
        except PermissionError:
            raise ApiError(
                f"cannot connect to {path}: permission denied (the socket is owner-only)"
            ) from None
        except OSError as exc:
            raise ApiError(f"cannot connect to {path}: {exc.strerror}") from None
        return cls(reader, writer, path, source)

    async def __aenter__(self) -> Self:
        return self

    async def __aexit__(self, *exc_info: object) -> None:
        await self.close()

    @property
    def closed(self) -> bool:
        return self._closed_reason is not None

    async def close(self) -> None:
        self._writer.close()
        try:
            await self._writer.wait_closed()
        except ConnectionError:
            pass
        await self._reader_task

    async def request(self, cmd: str, args: dict | None = None) -> dict:
        """Send one command and return its result; raises CommandRefused or ApiError."""
        self._next_id += 1
        request_id = self._next_id
        reply_future: asyncio.Future[dict] = asyncio.get_running_loop().create_future()
        self._pending[request_id] = reply_future
        try:
            await self._send(
                {"id": request_id, "cmd": cmd, "args": args or {}, "source": self.source}
            )
            reply = await reply_future
        finally:
            self._pending.pop(request_id, None)
        if reply.get("ok"):
            return reply.get("result", {})
        if reply.get("code") == REFUSED:
            raise CommandRefused(reply.get("reason", reply.get("error", "")))
        raise ApiError(reply.get("error", "error reply without a message"))

    async def subscribe(self, rate_hz: float | None = None) -> AsyncIterator[dict]:
        """Ask for the status stream and yield status dicts until the connection closes.

        If the consumer falls behind, the oldest unread status lines are dropped
        (counted in ``status_dropped``), so what it reads is always recent.
        """
        await self.request("subscribe", {} if rate_hz is None else {"rate_hz": rate_hz})
        while True:
            while self._statuses:
                yield self._statuses.popleft()
            if self.closed:
                return
            self._status_arrived.clear()
            await self._status_arrived.wait()

    async def _send(self, message: dict) -> None:
        if self._closed_reason is not None:
            raise ConnectionLost(self._closed_reason)
        try:
            # Plain json.dumps: a NaN argument goes out as NaN, so the daemon's error names it.
            self._writer.write(json.dumps(message).encode() + b"\n")
            await self._writer.drain()
        except ConnectionError:
            raise ConnectionLost(
                f"connection to the daemon on {self.socket_path} was lost"
            ) from None

    async def _read_loop(self) -> None:
        reason = f"the daemon on {self.socket_path} closed the connection"
        try:
            while True:
                line = await self._reader.readline()
                if not line:
                    break
                self._dispatch(json.loads(line))
        except (ConnectionError, ValueError) as exc:
            reason = f"connection to the daemon on {self.socket_path} failed: {exc}"
        finally:
            self._closed_reason = reason
            for future in self._pending.values():
                if not future.done():
                    future.set_exception(ConnectionLost(reason))
            self._status_arrived.set()

    def _dispatch(self, message: dict) -> None:
        if "status" in message and "id" not in message:
            if len(self._statuses) == self._statuses.maxlen:
                self.status_dropped += 1
            self._statuses.append(message["status"])
            self._status_arrived.set()
            return
        request_id = message.get("id")
        if request_id is None:
            # The daemon could not read a request at all (this client only sends valid ones,
            # so this means something between us garbled it): every waiting request fails.
            for future in self._pending.values():
                if not future.done():
                    future.set_result(message)
            return
        future = self._pending.get(request_id)
        if future is not None and not future.done():
            future.set_result(message)


async def wait_for_daemon(
    socket_path: str | Path, *, source: str = "api", retry_s: float = 0.5
) -> ApiClient:
    """Connect, retrying every ``retry_s`` while no daemon is running; bound it with asyncio.timeout().

    A dashboard uses this both at start-up and after :attr:`ApiClient.closed`
    becomes true to reconnect when the daemon comes back.
    """
    while True:
        try:
            return await ApiClient.connect(socket_path, source=source)
        except DaemonNotRunning:
            await asyncio.sleep(retry_s)
