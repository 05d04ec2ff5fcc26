"""One control API connection kept alive for the dashboard: subscribe, and reconnect with backoff.

:class:`DaemonLink` runs as a background task. While the daemon is reachable it
hands every status line to ``on_status``; when the connection drops (the daemon
stopped or restarted) it reports that through ``on_change`` and tries again after
a delay that doubles from ``Backoff.first_s`` up to ``Backoff.max_s``. Commands go
through :meth:`DaemonLink.request` on the same connection.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from daemon.api.client import ApiClient, ApiError

SOURCE = "dashboard"


@dataclass(frozen=True)
class Backoff:
    """Reconnect delays: ``first_s``, doubled after each failed attempt, at most ``max_s``."""

    first_s: float = 0.25
    max_s: float = 4.0

    def delay_s(self, failures: int) -> float:
        return min(self.first_s * 2.0 ** max(failures - 1, 0), self.max_s)


DEFAULT_BACKOFF = Backoff()


@dataclass(frozen=True)
class LinkState:
    """What the dashboard shows about its own connection to the daemon."""

    connected: bool
    detail: str  # why it is not connected, or the socket it is connected to
    attempts: int = 0  # failed connection attempts since the last success
    retry_in_s: float = 0.0


class NotConnected(ApiError):
    """A command could not be sent because the daemon is not reachable now."""


class DaemonLink:
    """Keeps a subscribed :class:`ApiClient` to ``socket_path``; call :meth:`run` as a task."""

    def __init__(
        self,
        socket_path: str | Path,
        on_status: Callable[[dict], None],
        on_change: Callable[[LinkState], None],
        *,
        rate_hz: float = 20.0,
        backoff: Backoff = DEFAULT_BACKOFF,
    ):
        self.socket_path = Path(socket_path)
        self.rate_hz = rate_hz
        self.backoff = backoff
        self._on_status = on_status
        self._on_change = on_change
        self._client: ApiClient | None = None

    @property
    def connected(self) -> bool:
        return self._client is not None and not self._client.closed

    async def request(self, command: str, args: dict | None = None) -> dict:
        """Send one command; raises NotConnected, CommandRefused or ApiError."""
        client = self._client
        if client is None or client.closed:
            raise NotConnected(f"{command} not sent: no connection to the daemon")
        return await client.request(command, args)

    async def run(self) -> None:
        """Connect, stream, reconnect — until cancelled."""
        failures = 0
        reason = f"connecting to {self.socket_path}"
        while True:
            try:
                self._client = await ApiClient.connect(self.socket_path, source=SOURCE)
            except ApiError as exc:
                failures += 1
                delay_s = self.backoff.delay_s(failures)
                self._on_change(LinkState(False, str(exc), failures, delay_s))
                await asyncio.sleep(delay_s)
                continue
            failures = 0
            self._on_change(LinkState(True, str(self.socket_path)))
            try:
                reason = await self._stream(self._client)
            finally:
                await self._client.close()
                self._client = None
            self._on_change(LinkState(False, reason, 0, 0.0))

    async def _stream(self, client: ApiClient) -> str:
        """Hand on status lines until the connection ends; returns why it ended."""
        try:
            async for status in client.subscribe(self.rate_hz):
                self._on_status(status)
        except ApiError as exc:
            return str(exc)
        return f"the daemon on {self.socket_path} closed the connection"
