"""The control API server: a local Unix-domain socket speaking JSON lines (see daemon/api/wire.py).

It serves any *target* with ``execute(command, args, source) -> dict`` (raising
:class:`daemon.errors.CommandRefused` when the command does not apply now) and
``status() -> dict``. Requests are checked against the command table before the
target sees them, so a bad request changes nothing.

Nothing here ever makes the event loop wait on a client: request handling and
status fan-out are synchronous and only append to a per-client outgoing queue,
which that client's own writer task drains. The queue is bounded
(``api.client_queue_lines``): when it is full the oldest queued status line is
dropped (counted per client and in :meth:`ApiServer.stats`); when it is full of
replies, that client's next request is not read until its writer makes
progress (so pipelined requests all get answered), and a client that reads
nothing for ``api.stalled_client_timeout_s`` is disconnected.

Policies a client can rely on:

- a request line longer than ``api.max_line_bytes`` gets an error reply with id
  null and the connection is closed (after an unbounded line the framing cannot
  be trusted, and skipping it would mean reading it all);
- blank lines are ignored; a final line without a newline before end-of-file is
  still served;
- after ``subscribe`` (rate from ``args.rate_hz``, else ``api.status_rate_hz``,
  at most ``api.max_status_rate_hz``) the client gets one status line at once
  and then one per period, paced by absolute deadlines: a late tick is not
  followed by a burst; subscribing again changes the rate;
- status is a snapshot: built at most every ``STATUS_REUSE_S`` and shared by
  every request and stream line in that time (and built afresh after any
  command, so a client sees its own command's effect);
- each client's requests are rate limited (``api.client_requests_per_s``,
  ``api.client_request_burst``: a faster client's next request simply waits),
  and after each request the server yields, so a pipelined flood from one
  client cannot hold the event loop the control cycle runs on;
- beyond ``api.max_clients`` connections a new connection may still send one
  ``estop`` (within ``ESTOP_LANE_READ_S``), which is carried out; anything
  else gets the "too many clients" error. At most ``api.max_clients`` such
  connections wait at once, and a new one cuts off the one waiting longest. So
  an e-stop gets through whatever other clients hold.
"""

from __future__ import annotations

import asyncio
import contextlib
import logging
import math
import os
import pwd
import socket
import stat
import struct
import time
from collections import deque
from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Protocol, Self

from daemon.api.paths import make_private_dir, runtime_dir
from daemon.api.wire import (
    BAD_REQUEST,
    FAILED,
    REFUSED,
    Request,
    RequestError,
    encode_json,
    encode_line,
    error_reply,
    ok_reply,
    parse_request,
    status_reply_line,
    status_stream_line,
)
from daemon.config.service import ApiSettings
from daemon.errors import CommandRefused, OperatorError

log = logging.getLogger(__name__)

# How long a closing connection may take to flush what is already queued for it.
CLOSE_GRACE_S = 1.0
# A status snapshot is reused for requests and stream ticks within this long of being built
# (and rebuilt at once after any command), so a flood of status requests costs a copy each.
STATUS_REUSE_S = 0.02
# A connection beyond api.max_clients may still send one e-stop; it has this long to send it.
ESTOP_LANE_READ_S = 2.0
ESTOP_COMMAND = "estop"
# How long to wait for an existing socket to accept a connection before calling it live.
LIVE_CHECK_TIMEOUT_S = 1.0


class CommandTarget(Protocol):
    def execute(self, command: str, args: dict, source: str) -> dict: ...

    def status(self) -> dict: ...


class TimerHandle(Protocol):
    def cancel(self) -> None: ...


class Clock(Protocol):
    """What paces the status stream: the running event loop, or a test's manual clock."""

    def time(self) -> float: ...

    def call_at(self, when: float, callback: Callable[[], object]) -> TimerHandle: ...


@dataclass
class ApiStats:
    connections: int = 0
    clients_turned_away: int = 0
    requests: int = 0
    bad_requests: int = 0
    refused: int = 0
    failed: int = 0
    oversize_lines: int = 0
    status_lines_queued: int = 0
    status_lines_dropped: int = 0
    status_failures: int = 0
    stalled_clients_disconnected: int = 0
    estops_beyond_the_limit: int = 0
    estop_lane_cut_off: int = 0
    rate_limit_waits: int = 0


class _Client:
    """One connection: its bounded outgoing queue and, once subscribed, its stream schedule."""

    def __init__(self, writer: asyncio.StreamWriter, queue_lines: int, stats: ApiStats):
        self.writer = writer
        self.queue_lines = queue_lines
        self.stats = stats
        self.lines: deque[tuple[bool, bytes]] = deque()  # (is_status_line, line)
        self.wakeup = asyncio.Event()  # set when there is something for the writer to do
        self.progress = asyncio.Event()  # set by the writer each time a line has gone out
        self.closing = False
        self.period_s = 0.0
        self.next_due = 0.0
        self.status_dropped = 0
        self.tokens = 0.0  # requests this client may still send at once (its rate limit)
        self.tokens_at_s = -math.inf

    def _make_room(self) -> bool:
        """Free one slot if the queue is full by dropping its oldest status line; False if it holds only replies."""
        if len(self.lines) < self.queue_lines:
            return True
        for index, (is_status, _) in enumerate(self.lines):
            if is_status:
                del self.lines[index]
                self._count_dropped_status()
                return True
        return False

    def _count_dropped_status(self) -> None:
        self.status_dropped += 1
        self.stats.status_lines_dropped += 1

    def offer_status(self, line: bytes) -> None:
        """Queue a status line, dropping (and counting) the oldest queued one if the queue is full."""
        if self.closing:
            return
        if not self._make_room():
            self._count_dropped_status()
            return
        self.lines.append((True, line))
        self.stats.status_lines_queued += 1
        self.wakeup.set()

    def has_room_for_reply(self) -> bool:
        return len(self.lines) < self.queue_lines or any(is_status for is_status, _ in self.lines)

    def send_reply(self, line: bytes) -> None:
        """Queue a reply (the read loop waits for room before reading the request it answers)."""
        if self.closing:
            return
        self._make_room()
        self.lines.append((False, line))
        self.wakeup.set()

    def finish(self) -> None:
        """Accept nothing more; the writer flushes what is queued and stops."""
        self.closing = True
        self.wakeup.set()

    def abort(self) -> None:
        """Drop everything queued and cut the connection now."""
        self.closing = True
        self.lines.clear()
        self.wakeup.set()
        self.writer.transport.abort()


class ApiServer:
    """Serve ``target`` on ``path`` (default ``settings.socket_path``). Use ``async with`` or start()/close()."""

    def __init__(
        self,
        target: CommandTarget,
        settings: ApiSettings,
        *,
        path: str | Path | None = None,
        clock: Clock | None = None,
    ):
        self._target = target
        self._settings = settings
        self._clock = clock
        where = path if path is not None else settings.socket_path
        if where is None:
            raise ValueError("no control socket path: give path or settings.socket_path")
        self._path = Path(where)
        self._server: asyncio.AbstractServer | None = None
        self._inode: int | None = None
        self._clients: set[_Client] = set()
        self._clients_changed = asyncio.Condition()
        self._subscribers: set[_Client] = set()
        self._timer: TimerHandle | None = None
        self._timer_when = 0.0
        self._last_status_error = ""
        self._status_json: bytes | None = None
        self._status_built_at = -math.inf
        self._estop_lane: deque[asyncio.StreamWriter] = deque()  # connections beyond the limit
        self._stats = ApiStats()

    @property
    def socket_path(self) -> Path:
        return self._path

    async def __aenter__(self) -> Self:
        await self.start()
        return self

    async def __aexit__(self, *exc_info: object) -> None:
        await self.close()

    async def start(self) -> None:
        """Create the socket (mode 0600); refuse if another daemon is live on it, replace a stale one."""
        if self._clock is None:
            self._clock = asyncio.get_running_loop()
        if self._path.parent == runtime_dir():
            make_private_dir(self._path.parent)
        await _claim_socket_path(self._path)
        old_umask = os.umask(0o177)
        try:
            self._server = await asyncio.start_unix_server(
                self._serve_client, path=str(self._path), limit=self._settings.max_line_bytes
            )
        except OSError as exc:
            raise OperatorError(
                f"cannot create control socket {self._path}: {exc.strerror}"
            ) from None
        finally:
            os.umask(old_umask)
        os.chmod(self._path, 0o600)
        self._inode = self._path.stat().st_ino
        log.info("control API listening on %s", self._path)

    async def close(self) -> None:
        """Stop listening, disconnect every client and remove the socket file (if it is still ours)."""
        if self._server is None:
            return
        self._server.close()
        self._subscribers.clear()
        self._reschedule()
        for client in list(self._clients):
            client.abort()
        for waiting in list(self._estop_lane):
            waiting.transport.abort()
        await self._server.wait_closed()
        await self.wait_for_clients(0)
        self._server = None
        try:
            if self._path.stat().st_ino == self._inode:
                self._path.unlink()
        except FileNotFoundError:
            pass

    async def wait_for_clients(self, count: int, *, in_estop_lane: int = 0) -> None:
        """Return once exactly ``count`` clients are connected and ``in_estop_lane`` connections
        beyond the limit wait to send an e-stop."""
        async with self._clients_changed:
            await self._clients_changed.wait_for(
                lambda: len(self._clients) == count and len(self._estop_lane) == in_estop_lane
            )

    def stats(self) -> dict:
        """Counters since start, plus the number of clients and subscribers now."""
        return {
            **asdict(self._stats),
            "clients": len(self._clients),
            "estop_lane": len(self._estop_lane),
            "subscribers": len(self._subscribers),
        }

    # --- one connection ---------------------------------------------------------------

    async def _serve_client(
        self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter
    ) -> None:
        self._stats.connections += 1
        if len(self._clients) >= self._settings.max_clients:
            await self._serve_over_limit(reader, writer)
            return
        client = _Client(writer, self._settings.client_queue_lines, self._stats)
        await self._add_client(client)
        writer_task = asyncio.create_task(self._write_loop(client))
        try:
            await self._read_loop(reader, client)
        finally:
            self._unsubscribe(client)
            client.finish()
            try:
                async with asyncio.timeout(CLOSE_GRACE_S):
                    await writer_task
            except TimeoutError:
                client.abort()
            writer.close()
            await self._remove_client(client)

    async def _serve_over_limit(
        self, reader: asyncio.StreamReader, writer: asyncio.StreamWriter
    ) -> None:
        """A connection beyond ``api.max_clients``: it may send one e-stop, and nothing else.

        So however many connections other clients hold, ``poise estop`` gets through. At most
        ``max_clients`` such connections wait at once: a new one cuts off the one that has
        waited longest (an e-stop client sends its line as soon as it connects, so whoever
        is still silent has had its turn), so connections that never send cannot fill the lane.
        """
        self._stats.clients_turned_away += 1
        limit = self._settings.max_clients
        message = f"too many clients (at most {limit}; beyond that only {ESTOP_COMMAND} is served); try again later"
        reply = error_reply(None, BAD_REQUEST, message)
        if len(self._estop_lane) >= limit:
            self._stats.estop_lane_cut_off += 1
            self._estop_lane.popleft().transport.abort()
        self._estop_lane.append(writer)
        await self._clients_have_changed()
        try:
            async with asyncio.timeout(ESTOP_LANE_READ_S):
                line = await reader.readuntil(b"\n")
            request = parse_request(line)
            if request.cmd == ESTOP_COMMAND:
                self._stats.estops_beyond_the_limit += 1
                reply = self._execute(request)
            else:
                reply = error_reply(request.id, BAD_REQUEST, message)
        except RequestError as exc:
            reply = error_reply(exc.request_id, BAD_REQUEST, message)
        except (TimeoutError, ConnectionError, asyncio.IncompleteReadError, asyncio.LimitOverrunError):
            pass
        finally:
            with contextlib.suppress(ValueError):  # not there when it was cut off
                self._estop_lane.remove(writer)
            await self._clients_have_changed()
        if writer.transport.is_closing():
            return
        writer.write(encode_line(reply))
        writer.close()

    async def _read_loop(self, reader: asyncio.StreamReader, client: _Client) -> None:
        while not client.closing:
            if not await self._wait_for_room(client):
                return
            await self._wait_for_token(client)
            try:
                line = await reader.readuntil(b"\n")
            except asyncio.IncompleteReadError as end:
                if end.partial.strip():
                    self._handle_line(client, end.partial)
                return
            except asyncio.LimitOverrunError:
                self._stats.oversize_lines += 1
                message = f"request line longer than {self._settings.max_line_bytes} bytes; closing the connection"
                self._reply(client, error_reply(None, BAD_REQUEST, message))
                return
            except ConnectionError:
                return
            if line.strip():
                self._handle_line(client, line)
            # A pipelined flood is already buffered and would be served without a break; give
            # the control cycle and the other clients their turn after every request.
            await asyncio.sleep(0)

    async def _wait_for_token(self, client: _Client) -> None:
        """Hold back a client's next request until its rate limit allows it (token bucket)."""
        rate = self._settings.client_requests_per_s
        burst = float(self._settings.client_request_burst)
        now = time.monotonic()
        client.tokens = min(burst, client.tokens + (now - client.tokens_at_s) * rate)
        client.tokens_at_s = now
        if client.tokens < 1.0:
            self._stats.rate_limit_waits += 1
            await asyncio.sleep((1.0 - client.tokens) / rate)
            client.tokens, client.tokens_at_s = 1.0, time.monotonic()
        client.tokens -= 1.0

    async def _wait_for_room(self, client: _Client) -> bool:
        """Hold back a client's next request while its queue is full of replies; False if it stalled."""
        timeout_s = self._settings.stalled_client_timeout_s
        try:
            async with asyncio.timeout(timeout_s):
                while not client.has_room_for_reply():
                    client.progress.clear()
                    await client.progress.wait()
        except TimeoutError:
            self._stats.stalled_clients_disconnected += 1
            log.warning(
                "control API: a client read none of its replies in %g s; cut off", timeout_s
            )
            self._unsubscribe(client)
            client.abort()
            return False
        return True

    async def _write_loop(self, client: _Client) -> None:
        writer = client.writer
        try:
            while True:
                while client.lines:
                    _, line = client.lines.popleft()
                    writer.write(line)
                    await writer.drain()
                    client.progress.set()
                if client.closing:
                    return
                client.wakeup.clear()
                await client.wakeup.wait()
        except ConnectionError:
            client.abort()

    async def _clients_have_changed(self) -> None:
        async with self._clients_changed:
            self._clients_changed.notify_all()

    async def _add_client(self, client: _Client) -> None:
        async with self._clients_changed:
            self._clients.add(client)
            self._clients_changed.notify_all()

    async def _remove_client(self, client: _Client) -> None:
        async with self._clients_changed:
            self._clients.discard(client)
            self._clients_changed.notify_all()

    # --- requests -----------------------------------------------------------------------

    def _handle_line(self, client: _Client, line: bytes) -> None:
        self._stats.requests += 1
        try:
            request = parse_request(line)
        except RequestError as exc:
            self._stats.bad_requests += 1
            self._reply(client, error_reply(exc.request_id, BAD_REQUEST, str(exc)))
            return
        if request.cmd == "subscribe":
            self._handle_subscribe(client, request)
        elif request.cmd == "status":
            status_json = self._status_snapshot()
            if status_json is None:
                self._reply(client, self._call_target(request, self._target.status))
            else:
                client.send_reply(status_reply_line(request.id, status_json))
        else:
            self._reply(client, self._execute(request))

    def _execute(self, request: Request) -> dict:
        """Carry out a command; the next status is built afresh, so it shows the command's effect."""
        self._status_json = None
        return self._call_target(
            request, lambda: self._target.execute(request.cmd, request.args, request.source)
        )

    def _call_target(self, request: Request, call: Callable[[], dict]) -> dict:
        try:
            result = call()
        except CommandRefused as exc:
            self._stats.refused += 1
            return error_reply(
                request.id, REFUSED, f"{request.cmd} refused: {exc.reason}", exc.reason
            )
        except Exception as exc:
            # The target's own bug must not take the API down; it is logged with its traceback.
            log.exception("control API: %s from %s failed", request.cmd, request.source)
            self._stats.failed += 1
            message = f"{request.cmd} failed inside the daemon ({type(exc).__name__}: {exc}); see the daemon log"
            return error_reply(request.id, FAILED, message)
        return ok_reply(request.id, result)

    def _reply(self, client: _Client, reply: dict) -> None:
        try:
            line = encode_line(reply)
        except (TypeError, ValueError) as exc:
            log.error(
                "control API: reply to request %r cannot be encoded: %s", reply.get("id"), exc
            )
            self._stats.failed += 1
            line = encode_line(
                error_reply(reply.get("id"), FAILED, f"reply cannot be encoded as JSON ({exc})")
            )
        client.send_reply(line)

    # --- status stream ------------------------------------------------------------------

    def _handle_subscribe(self, client: _Client, request: Request) -> None:
        rate_hz = float(request.args.get("rate_hz", self._settings.status_rate_hz))
        if rate_hz > self._settings.max_status_rate_hz:
            self._stats.bad_requests += 1
            message = f"subscribe: argument 'rate_hz' must be at most {self._settings.max_status_rate_hz:g} (got {rate_hz:g})"
            self._reply(client, error_reply(request.id, BAD_REQUEST, message))
            return
        assert self._clock is not None
        client.period_s = 1.0 / rate_hz
        client.next_due = self._clock.time() + client.period_s
        self._reply(client, ok_reply(request.id, {"rate_hz": rate_hz}))
        line = self._status_line()
        if line is not None:
            client.offer_status(line)
        if not client.closing:
            self._subscribers.add(client)
            self._reschedule()

    def _unsubscribe(self, client: _Client) -> None:
        if client in self._subscribers:
            self._subscribers.discard(client)
            self._reschedule()

    def _reschedule(self) -> None:
        if self._timer is not None:
            self._timer.cancel()
            self._timer = None
        if self._subscribers:
            assert self._clock is not None
            self._timer_when = min(client.next_due for client in self._subscribers)
            self._timer = self._clock.call_at(self._timer_when, self._on_timer)

    def _on_timer(self) -> None:
        self._timer = None
        assert self._clock is not None
        # A timer may fire a hair before its deadline (clock resolution); it is due all the same.
        now = max(self._clock.time(), self._timer_when)
        due = [client for client in self._subscribers if client.next_due <= now]
        line = self._status_line() if due else None
        for client in due:
            if line is not None:
                client.offer_status(line)
            client.next_due += client.period_s
            if client.next_due <= now:
                client.next_due = now + client.period_s
        self._reschedule()

    def _status_line(self) -> bytes | None:
        """One encoded status line shared by every subscriber due now, or None if status() failed."""
        status_json = self._status_snapshot()
        return None if status_json is None else status_stream_line(status_json)

    def _status_snapshot(self) -> bytes | None:
        """The target's status as JSON, built at most every STATUS_REUSE_S; None if status() failed."""
        assert self._clock is not None
        now = self._clock.time()
        if self._status_json is not None and now - self._status_built_at < STATUS_REUSE_S:
            return self._status_json
        try:
            self._status_json = encode_json(self._target.status())
        except Exception as exc:
            self._status_json = None
            self._stats.status_failures += 1
            if repr(exc) != self._last_status_error:
                self._last_status_error = repr(exc)
                log.exception("control API: status() failed; status lines skipped until it works")
            return None
        self._status_built_at = now
        return self._status_json


async def _claim_socket_path(path: Path) -> None:
    """Make ``path`` free for a new socket: refuse if a live daemon answers there, remove a stale socket file."""
    try:
        mode = path.lstat().st_mode
    except FileNotFoundError:
        return
    if not stat.S_ISSOCK(mode):
        raise OperatorError(
            f"control socket path {path} exists and is not a socket; move it or set api.socket_path"
        )
    try:
        async with asyncio.timeout(LIVE_CHECK_TIMEOUT_S):
            _, writer = await asyncio.open_unix_connection(str(path))
    except (ConnectionRefusedError, FileNotFoundError):
        path.unlink(missing_ok=True)
        log.info("removed stale control socket %s", path)
        return
    except TimeoutError:
        raise OperatorError(
            f"another daemon seems to be serving on {path} (it accepted no connection in time)"
        ) from None
    except OSError as exc:
        raise OperatorError(
            f"cannot check existing control socket {path}: {exc.strerror}"
        ) from None
    holder = _who_holds(writer)
    writer.close()
    raise OperatorError(f"another Poise daemon{holder} is already serving on {path}")


def _who_holds(writer: asyncio.StreamWriter) -> str:
    """' (pid N, user NAME: COMMAND)' for the process at the other end of a Unix socket, or ''."""
    sock = writer.get_extra_info("socket")
    if sock is None or not hasattr(socket, "SO_PEERCRED"):
        return ""
    try:
        creds = sock.getsockopt(socket.SOL_SOCKET, socket.SO_PEERCRED, struct.calcsize("3i"))
    except OSError:
        return ""
    pid, uid, _gid = struct.unpack("3i", creds)
    try:
        user = pwd.getpwuid(uid).pw_name
    except KeyError:
        user = str(uid)
    try:
        with open(f"/proc/{pid}/cmdline", "rb") as cmdline:
            command = cmdline.read().replace(b"\0", b" ").decode(errors="replace").strip()
    except OSError:
        command = ""
    command = command if len(command) <= 80 else command[:77] + "..."
    return f" (pid {pid}, user {user}" + (f": {command})" if command else ")")
