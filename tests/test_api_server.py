"""Control API server over a real Unix socket: replies, refusals, bad input, the status stream,
slow and vanishing clients, and the socket file itself."""

from __future__ import annotations

import asyncio
import math
import os
import pwd
import socket
import stat

import pytest
from test_api_support import HANG_GUARD_S, LineClient, ManualClock, RigDouble

from daemon.api.client import ApiClient, ApiError, wait_for_daemon
from daemon.api.server import ApiServer
from daemon.config.service import ApiSettings
from daemon.errors import CommandRefused, OperatorError


@pytest.fixture
def socket_path(tmp_path):
    return tmp_path / "poise.sock"


@pytest.fixture
def rig():
    return RigDouble()


def settings(path, **overrides) -> ApiSettings:
    return ApiSettings(socket_path=str(path), **overrides)


# --- requests and replies ---------------------------------------------------------------


async def test_reply_echoes_the_request_id_and_carries_the_targets_result(socket_path, rig):
    async with ApiServer(rig, settings(socket_path)):
        client = await LineClient.open(socket_path)
        client.send({"id": 41, "cmd": "setpoint", "args": {"x_m": 0.125}})
        client.send({"id": "home-1", "cmd": "home", "source": "dashboard"})
        assert await client.read() == {"id": 41, "ok": True, "result": {"accepted": "setpoint"}}
        assert await client.read() == {"id": "home-1", "ok": True, "result": {"accepted": "home"}}
        await client.close()
    assert rig.executed == [("setpoint", {"x_m": 0.125}, "api"), ("home", {}, "dashboard")]


async def test_integer_arguments_reach_the_target_as_floats(socket_path, rig):
    async with (
        ApiServer(rig, settings(socket_path)) as server,
        await ApiClient.connect(server.socket_path, source="cli") as client,
    ):
        await client.request("excite", {"kind": "chirp", "amplitude": 2, "duration_s": 10})
    assert rig.executed == [
        ("excite", {"kind": "chirp", "amplitude": 2.0, "duration_s": 10.0}, "cli")
    ]
    assert isinstance(rig.executed[0][1]["amplitude"], float)


async def test_refused_command_replies_with_its_reason_and_the_client_raises(socket_path, rig):
    rig.refusals["arm"] = "pre-arm check link_rate failed"
    async with ApiServer(rig, settings(socket_path)) as server:
        raw = await LineClient.open(socket_path)
        raw.send({"id": 1, "cmd": "arm"})
        assert await raw.read() == {
            "id": 1,
            "ok": False,
            "code": "refused",
            "error": "arm refused: pre-arm check link_rate failed",
            "reason": "pre-arm check link_rate failed",
        }
        await raw.close()
        async with await ApiClient.connect(socket_path) as client:
            with pytest.raises(CommandRefused) as refused:
                await client.request("arm")
        assert refused.value.reason == "pre-arm check link_rate failed"
        assert server.stats()["refused"] == 2
    assert rig.executed == []


async def test_status_request_returns_the_targets_snapshot(socket_path, rig):
    async with (
        ApiServer(rig, settings(socket_path)),
        await ApiClient.connect(socket_path) as client,
    ):
        status = await client.request("status")
    assert status["state"] == "IDLE" and status["status_calls"] == 1


async def test_a_target_bug_gives_an_error_reply_and_the_server_keeps_serving(socket_path, rig):
    def broken_execute(command, args, source):
        raise ZeroDivisionError("division by zero")

    rig.execute = broken_execute
    async with ApiServer(rig, settings(socket_path)) as server:
        async with await ApiClient.connect(socket_path) as client:
            with pytest.raises(
                ApiError, match=r"^stop failed inside the daemon \(ZeroDivisionError"
            ):
                await client.request("stop")
            assert (await client.request("status"))["state"] == "IDLE"
        assert server.stats()["failed"] == 1


async def test_non_finite_status_values_go_out_as_null_so_every_line_is_strict_json(
    socket_path, rig
):
    rig.status = lambda: {"state": "IDLE", "motor_current_a": math.nan, "drive": math.inf}
    async with ApiServer(rig, settings(socket_path)):
        client = await LineClient.open(socket_path)
        client.send({"id": 1, "cmd": "status"})
        # JSON has no NaN or Infinity (IETF RFC 8259, section 6), so LineClient.read rejects them.
        reply = await client.read()
        assert reply["result"] == {"state": "IDLE", "motor_current_a": None, "drive": None}
        await client.close()


# --- bad input: an error reply naming the command and the problem; nothing reaches the target


BAD_REQUESTS = [
    (b"arm please\n", None, "request is not valid JSON"),
    (b"[1, 2]\n", None, "request must be a JSON object"),
    (b'{"id": "\xff"}\n', None, "request is not UTF-8 text (byte 8 is 0xff)"),
    (b"[" * 5000 + b"\n", None, "request is nested too deeply"),
    (b'{"cmd": "arm"}\n', None, "request field 'id' must be an integer of at most 15 digits"),
    (b'{"id": true, "cmd": "arm"}\n', None, "request field 'id' must be an integer of at most"),
    # Past CPython's 4300-digit limit for int(str) (PEP 651's sibling: python/cpython#95778).
    (b'{"id": ' + b"7" * 5000 + b', "cmd": "arm"}\n', None, "request is not valid JSON"),
    (b'{"id": ' + b"7" * 16 + b', "cmd": "arm"}\n', None, "request field 'id' must be"),
    (b'{"id": 1, "cmd": "arm", "force": true}\n', 1, "request has unknown field 'force'"),
    (b'{"id": 2}\n', 2, "request field 'cmd' must be a command name"),
    (b'{"id": 3, "cmd": "launch"}\n', 3, "unknown command 'launch' (known: arm, disarm,"),
    (b'{"id": 4, "cmd": "arm", "args": [1]}\n', 4, "arm: 'args' must be a JSON object"),
    (
        b'{"id": 5, "cmd": "arm", "source": "interlock"}\n',
        5,
        "request field 'source' must be one of",
    ),
    (
        b'{"id": 6, "cmd": "arm", "args": {"now": true}}\n',
        6,
        "arm: unknown argument 'now' (takes no arguments)",
    ),
    (b'{"id": 7, "cmd": "setpoint"}\n', 7, "setpoint: missing argument 'x_m'"),
    (
        b'{"id": 8, "cmd": "setpoint", "args": {"x_m": "0.1"}}\n',
        8,
        "setpoint: argument 'x_m' must be a finite number",
    ),
    (
        b'{"id": 9, "cmd": "setpoint", "args": {"x_m": NaN}}\n',
        9,
        "setpoint: argument 'x_m' must be a finite number",
    ),
    (
        b'{"id": 10, "cmd": "setpoint", "args": {"x_m": -Infinity}}\n',
        10,
        "must be a finite number (got -inf)",
    ),
    (
        b'{"id": 20, "cmd": "setpoint", "args": {"x_m": ' + b"9" * 400 + b"}}\n",
        20,
        "setpoint: argument 'x_m' must be a finite number (got 999999999",
    ),
    (
        b'{"id": 11, "cmd": "setpoint", "args": {"x_m": true}}\n',
        11,
        "setpoint: argument 'x_m' must be a finite",
    ),
    (
        b'{"id": 12, "cmd": "setpoint", "args": {"x_m": 0.1, "v": 1}}\n',
        12,
        "setpoint: unknown argument 'v' (takes x_m)",
    ),
    (
        b'{"id": 13, "cmd": "excite", "args": {"kind": "sine", "amplitude": 1, "duration_s": 5}}\n',
        13,
        "excite: argument 'kind' must be one of chirp, prbs, step (got 'sine')",
    ),
    (
        b'{"id": 14, "cmd": "excite", "args": {"kind": "prbs", "amplitude": -1, "duration_s": 5}}\n',
        14,
        "excite: argument 'amplitude' must be a finite number greater than 0",
    ),
    (
        b'{"id": 15, "cmd": "excite", "args": {"kind": "step", "amplitude": 1}}\n',
        15,
        "excite: missing argument 'duration_s'",
    ),
    (
        b'{"id": 16, "cmd": "record", "args": {"on": "yes"}}\n',
        16,
        "record: argument 'on' must be true or false",
    ),
    (
        b'{"id": 17, "cmd": "record", "args": {"on": true, "note": 5}}\n',
        17,
        "record: argument 'note' must be a string",
    ),
    (
        b'{"id": 18, "cmd": "subscribe", "args": {"rate_hz": 0}}\n',
        18,
        "subscribe: argument 'rate_hz' must be a finite number greater than 0",
    ),
    (
        b'{"id": 19, "cmd": "subscribe", "args": {"rate_hz": 51}}\n',
        19,
        "subscribe: argument 'rate_hz' must be at most 50 (got 51)",
    ),
]


@pytest.mark.parametrize(
    ("line", "request_id", "error"), BAD_REQUESTS, ids=[e for _, _, e in BAD_REQUESTS]
)
async def test_bad_request_gets_an_error_reply_and_changes_nothing(
    socket_path, rig, line, request_id, error
):
    async with ApiServer(rig, settings(socket_path)) as server:
        client = await LineClient.open(socket_path)
        client.send(line)
        reply = await client.read()
        assert reply["id"] == request_id
        assert reply["ok"] is False and reply["code"] == "bad_request"
        assert reply["error"].startswith(error) or error in reply["error"]
        assert "\n" not in reply["error"]
        # The connection is still good, and the bad request reached nothing.
        client.send({"id": "after", "cmd": "stop"})
        assert (await client.read())["ok"] is True
        await client.close()
        assert server.stats()["bad_requests"] == 1
        assert server.stats()["subscribers"] == 0
    assert rig.executed == [("stop", {}, "api")]
    assert rig.status_calls == 0


async def test_oversize_line_gets_an_error_and_the_connection_is_closed(socket_path, rig):
    limit = 2048
    async with ApiServer(rig, settings(socket_path, max_line_bytes=limit)) as server:
        client = await LineClient.open(socket_path)
        client.send(
            b'{"id": 1, "cmd": "setpoint", "args": {"x_m": 0.1}, "pad": "' + b"x" * limit + b'"}\n'
        )
        reply = await client.read()
        assert reply == {
            "id": None,
            "ok": False,
            "code": "bad_request",
            "error": f"request line longer than {limit} bytes; closing the connection",
        }
        assert await client.read() is None  # closed by the server
        await client.close()
        assert server.stats()["oversize_lines"] == 1
        # Other clients are unaffected.
        async with await ApiClient.connect(socket_path) as other:
            await other.request("stop")
    assert rig.executed == [("stop", {}, "api")]


async def test_a_line_of_exactly_the_limit_is_served(socket_path, rig):
    limit = 2048
    request = b'{"id": 1, "cmd": "stop"}'
    line = request + b" " * (limit - len(request)) + b"\n"
    assert len(line) == limit + 1  # limit bytes of request, then the newline
    async with ApiServer(rig, settings(socket_path, max_line_bytes=limit)):
        client = await LineClient.open(socket_path)
        client.send(line)
        assert (await client.read())["ok"] is True
        await client.close()


async def test_blank_lines_are_ignored_and_a_last_line_without_newline_is_served(socket_path, rig):
    async with ApiServer(rig, settings(socket_path)):
        client = await LineClient.open(socket_path)
        client.send(b'\n  \n{"id": 1, "cmd": "home"}\n\n{"id": 2, "cmd": "arm"}')
        client.writer.write_eof()
        assert [await client.read(), await client.read(), await client.read()] == [
            {"id": 1, "ok": True, "result": {"accepted": "home"}},
            {"id": 2, "ok": True, "result": {"accepted": "arm"}},
            None,
        ]
        await client.close()


async def test_pipelined_requests_beyond_the_queue_bound_are_all_answered_in_order(
    socket_path, rig
):
    async with ApiServer(rig, settings(socket_path, client_queue_lines=4)):
        client = await LineClient.open(socket_path)
        client.send(
            b"".join(
                b'{"id": %d, "cmd": "setpoint", "args": {"x_m": 0.001}}\n' % i for i in range(200)
            )
        )
        ids = [(await client.read())["id"] for _ in range(200)]
        await client.close()
    assert ids == list(range(200))
    assert len(rig.executed) == 200


# --- status stream ----------------------------------------------------------------------


async def subscribe(client: LineClient, request_id: int, rate_hz: float | None = None) -> dict:
    client.send(
        {
            "id": request_id,
            "cmd": "subscribe",
            "args": {} if rate_hz is None else {"rate_hz": rate_hz},
        }
    )
    statuses, reply = await client.read_until_reply(request_id)
    assert statuses == []
    first = await client.read()  # one status line at once, then one per period
    assert "status" in first
    return reply


async def statuses_so_far(client: LineClient, request_id: int) -> list[dict]:
    """Every status line queued for ``client`` until now (a status request is the barrier)."""
    client.send({"id": request_id, "cmd": "status"})
    statuses, _ = await client.read_until_reply(request_id)
    return statuses


async def test_status_stream_runs_at_each_subscribers_rate(socket_path, rig):
    clock = ManualClock()
    async with ApiServer(rig, settings(socket_path, status_rate_hz=4.0), clock=clock):
        slow, fast, default = [await LineClient.open(socket_path) for _ in range(3)]
        assert (await subscribe(slow, 1, rate_hz=10))["result"] == {"rate_hz": 10.0}
        assert (await subscribe(fast, 1, rate_hz=25))["result"] == {"rate_hz": 25.0}
        assert (await subscribe(default, 1))["result"] == {"rate_hz": 4.0}
        # Two seconds of status ticks, 1 ms apart; the half tick at the end keeps every
        # deadline off the boundary.
        for step in range(1, 2001):
            clock.advance_to(step * 0.001)
        clock.advance_to(2.0005)
        counts = [len(await statuses_so_far(client, 2)) for client in (slow, fast, default)]
        for client in (slow, fast, default):
            await client.close()
    assert counts == [20, 50, 8]


async def test_status_lines_carry_fresh_snapshots(socket_path, rig):
    clock = ManualClock()
    async with ApiServer(rig, settings(socket_path), clock=clock):
        client = await LineClient.open(socket_path)
        await subscribe(client, 1, rate_hz=10)
        for step in range(1, 4):
            clock.advance_to(step * 0.1 + 0.0005)
        lines = await statuses_so_far(client, 2)
        await client.close()
    calls = [line["status_calls"] for line in lines]
    assert calls == sorted(calls) and len(set(calls)) == 3


async def test_a_late_tick_is_not_followed_by_a_burst(socket_path, rig):
    clock = ManualClock()
    async with ApiServer(rig, settings(socket_path), clock=clock):
        client = await LineClient.open(socket_path)
        await subscribe(client, 1, rate_hz=10)
        clock.advance_to(1.05)  # ten periods pass at once (a stalled loop)
        assert len(await statuses_so_far(client, 2)) == 1
        for step in range(1, 11):
            clock.advance_to(1.0505 + step * 0.1)  # then the stream carries on at its rate
        assert len(await statuses_so_far(client, 3)) == 10
        await client.close()


async def test_subscribing_again_changes_the_rate(socket_path, rig):
    clock = ManualClock()
    async with ApiServer(rig, settings(socket_path), clock=clock) as server:
        client = await LineClient.open(socket_path)
        await subscribe(client, 1, rate_hz=2)
        await subscribe(client, 2, rate_hz=20)
        for step in range(1, 101):
            clock.advance_to(step * 0.01 + 0.0005)
        assert len(await statuses_so_far(client, 3)) == 20
        assert server.stats()["subscribers"] == 1
        await client.close()


async def test_client_library_subscription_yields_status_dicts(socket_path, rig):
    clock = ManualClock()
    async with (
        ApiServer(rig, settings(socket_path), clock=clock),
        await ApiClient.connect(socket_path) as client,
    ):
        stream = client.subscribe(rate_hz=5)
        first = await anext(stream)
        clock.advance_to(0.2001)
        second = await anext(stream)
        await stream.aclose()
    assert first["state"] == "IDLE" and second["status_calls"] > first["status_calls"]


# --- clients that misbehave or vanish -------------------------------------------------


class Ticker:
    """A periodic task on the server's loop, standing in for the control cycle's neighbours.

    Ticks are scheduled at absolute deadlines; a tick that fires a whole period or
    more late counts the periods it missed instead of bursting to catch up.
    """

    def __init__(self, period_s: float, ticks_wanted: int):
        self.loop = asyncio.get_running_loop()
        self.period_s = period_s
        self.ticks_wanted = ticks_wanted
        self.fired = 0
        self.missed = 0
        self.done = asyncio.Event()
        self._next = self.loop.time() + period_s
        self.loop.call_at(self._next, self._tick)

    def _tick(self) -> None:
        self.fired += 1
        late_periods = int((self.loop.time() - self._next) // self.period_s)
        self.missed += late_periods
        self._next += (1 + late_periods) * self.period_s
        if self.fired >= self.ticks_wanted:
            self.done.set()
        else:
            self.loop.call_at(self._next, self._tick)


async def test_a_subscriber_that_never_reads_stalls_neither_the_loop_nor_other_clients(
    socket_path, rig
):
    rig.padding = "p" * 65536  # fills the socket buffers of a non-reader within a few lines
    api = settings(
        socket_path, status_rate_hz=200.0, max_status_rate_hz=200.0, client_queue_lines=4
    )
    async with ApiServer(rig, api) as server:
        sleeper = await LineClient.open(socket_path)
        sleeper.stop_reading()
        sleeper.send({"id": 1, "cmd": "subscribe", "args": {"rate_hz": 200}})
        ticker = Ticker(period_s=0.005, ticks_wanted=200)
        async with asyncio.timeout(HANG_GUARD_S), await ApiClient.connect(socket_path) as busy:
            served = 0
            while not ticker.done.is_set() or server.stats()["status_lines_dropped"] < 20:
                await busy.request("setpoint", {"x_m": served * 1e-4})
                served += 1
            stats = server.stats()
        await sleeper.close()
    assert stats["status_lines_dropped"] >= 20  # the non-reader lost status lines...
    assert stats["clients"] == 2 and stats["subscribers"] == 1  # ...and was not cut off
    assert len(rig.executed) == served  # every request of the other client was served
    # The periodic task kept its schedule: at most one period missed for each tick that fired
    # (a loop blocked on the non-reader would fire no ticks at all).
    assert ticker.fired == 200
    assert ticker.missed <= ticker.fired


async def test_a_client_that_never_reads_its_replies_is_cut_off_after_the_stall_timeout(
    socket_path, rig
):
    rig.padding = "p" * 65536
    api = settings(socket_path, client_queue_lines=4, stalled_client_timeout_s=0.2)
    async with ApiServer(rig, api) as server:
        flooder = await LineClient.open(socket_path)
        flooder.stop_reading()
        flooder.send(b'{"id": 1, "cmd": "status"}\n' * 2000)  # 2000 replies of 64 KiB, never read
        async with asyncio.timeout(HANG_GUARD_S):
            await server.wait_for_clients(1)
            await server.wait_for_clients(0)
        assert server.stats()["stalled_clients_disconnected"] == 1
        async with await ApiClient.connect(socket_path) as other:
            await other.request("stop")
        flooder.writer.transport.abort()
    assert rig.status_calls < 100  # its requests were held back after the first few replies
    assert rig.executed == [("stop", {}, "api")]


async def test_a_client_that_disconnects_mid_stream_is_cleaned_up(socket_path, rig):
    clock = ManualClock()
    rig.padding = "p" * 65536
    async with ApiServer(
        rig, settings(socket_path, max_status_rate_hz=200.0), clock=clock
    ) as server:
        leaver = await LineClient.open(socket_path)
        await subscribe(leaver, 1, rate_hz=100)
        for step in range(1, 51):
            clock.advance_to(step * 0.01 + 0.0005)  # lines pile up unread
        leaver.writer.transport.abort()
        async with asyncio.timeout(HANG_GUARD_S):
            await server.wait_for_clients(0)
        assert server.stats()["subscribers"] == 0
        assert clock.pending_timers() == 0  # the stream's timer is gone too
        calls = rig.status_calls
        clock.advance_to(10.0)
        assert rig.status_calls == calls
        async with await ApiClient.connect(socket_path) as other:
            assert (await other.request("status"))["state"] == "IDLE"


async def test_clients_beyond_the_limit_are_turned_away_but_may_still_send_an_estop(
    socket_path, rig
):
    async with ApiServer(rig, settings(socket_path, max_clients=1)) as server:
        first = await LineClient.open(socket_path)
        first.send({"id": 1, "cmd": "stop"})
        assert (await first.read())["ok"] is True
        second = await LineClient.open(socket_path)
        second.send({"id": 2, "cmd": "status"})
        assert await second.read() == {
            "id": 2,
            "ok": False,
            "code": "bad_request",
            "error": "too many clients (at most 1; beyond that only estop is served); try again later",
        }
        assert await second.read() is None
        await second.close()
        third = await LineClient.open(socket_path)
        third.send({"id": 3, "cmd": "estop", "source": "cli"})
        reply = await third.read()
        assert (reply["id"], reply["ok"]) == (3, True)
        assert await third.read() is None
        await third.close()
        assert rig.executed[-1] == ("estop", {}, "cli")
        stats = server.stats()
        assert (stats["clients_turned_away"], stats["estops_beyond_the_limit"]) == (2, 1)
        await first.close()


async def test_silent_connections_beyond_the_limit_cannot_keep_an_estop_out(socket_path, rig):
    limit = 2
    async with ApiServer(rig, settings(socket_path, max_clients=limit)) as server:
        held = [await LineClient.open(socket_path) for _ in range(limit)]
        await server.wait_for_clients(limit)
        silent = [await LineClient.open(socket_path) for _ in range(limit)]  # fill the e-stop lane
        await server.wait_for_clients(limit, in_estop_lane=limit)
        estop = await LineClient.open(socket_path)
        estop.send({"id": 1, "cmd": "estop", "source": "cli"})
        reply = await estop.read()
        assert (reply["id"], reply["ok"]) == (1, True)
        # The one that waited longest was cut off to make room, without a reply.
        assert await silent[0].read() is None
        assert server.stats()["estop_lane_cut_off"] == 1
        for client in (*held, *silent, estop):
            await client.close()
    assert rig.executed == [("estop", {}, "cli")]


async def test_client_subscription_ends_and_requests_fail_when_the_daemon_goes_away(
    socket_path, rig
):
    server = ApiServer(rig, settings(socket_path))
    await server.start()
    client = await ApiClient.connect(socket_path)
    stream = client.subscribe(rate_hz=5)
    await anext(stream)
    await server.close()
    async with asyncio.timeout(HANG_GUARD_S):
        async for _ in stream:  # whatever was already on its way, then the end of the stream
            pass
    assert client.closed
    with pytest.raises(ApiError, match="closed the connection"):
        await client.request("stop")
    await client.close()


async def test_wait_for_daemon_connects_once_the_daemon_starts(socket_path, rig):
    waiting = asyncio.create_task(wait_for_daemon(socket_path, source="dashboard", retry_s=0.01))
    async with ApiServer(rig, settings(socket_path)) as server:
        async with asyncio.timeout(HANG_GUARD_S):
            client = await waiting
        await client.request("home")
        await client.close()
        assert server.stats()["connections"] == 1
    assert rig.executed == [("home", {}, "dashboard")]


# --- the socket file ---------------------------------------------------------------------


async def test_socket_file_is_owner_only_and_removed_on_close(socket_path, rig):
    old_umask = os.umask(0o000)  # the most permissive umask must not leak into the socket's mode
    try:
        async with ApiServer(rig, settings(socket_path)):
            mode = socket_path.stat().st_mode
            assert stat.S_ISSOCK(mode)
            assert stat.S_IMODE(mode) == 0o600
    finally:
        os.umask(old_umask)
    assert not socket_path.exists()


async def test_a_second_server_on_a_live_socket_is_refused_naming_who_holds_it(socket_path, rig):
    async with ApiServer(rig, settings(socket_path)):
        with pytest.raises(OperatorError) as refused:
            await ApiServer(RigDouble(), settings(socket_path)).start()
        user = pwd.getpwuid(os.getuid()).pw_name
        assert str(refused.value).startswith(f"another Poise daemon (pid {os.getpid()}, user {user}: ")
        assert str(refused.value).endswith(f") is already serving on {socket_path}")
        async with await ApiClient.connect(socket_path) as client:  # the first one still serves
            await client.request("stop")
    assert rig.executed == [("stop", {}, "api")]


async def test_a_stale_socket_file_is_replaced(socket_path, rig):
    leftover = socket.socket(socket.AF_UNIX, socket.SOCK_STREAM)
    leftover.bind(str(socket_path))  # a socket file nobody listens on, as a killed daemon leaves
    leftover.close()
    assert stat.S_ISSOCK(socket_path.stat().st_mode)
    async with (
        ApiServer(rig, settings(socket_path)),
        await ApiClient.connect(socket_path) as client,
    ):
        await client.request("stop")
    assert rig.executed == [("stop", {}, "api")]


async def test_a_path_holding_something_else_is_refused_and_left_alone(socket_path, rig):
    socket_path.write_text("not a socket")
    with pytest.raises(OperatorError, match="exists and is not a socket"):
        await ApiServer(rig, settings(socket_path)).start()
    assert socket_path.read_text() == "not a socket"


async def test_a_socket_in_a_missing_folder_is_a_one_line_error(tmp_path, rig):
    path = tmp_path / "no-such-folder" / "poise.sock"
    with pytest.raises(OperatorError, match=f"cannot create control socket {path}: No such file"):
        await ApiServer(rig, settings(path)).start()


# --- one client's flood -----------------------------------------------------------------


async def test_a_pipelined_flood_yields_to_the_event_loop_after_every_request(socket_path, rig):
    requests = 400
    turns = 0

    async def other_work() -> None:  # stands for the control cycle's reader callbacks
        nonlocal turns
        while True:
            turns += 1
            await asyncio.sleep(0)

    async with ApiServer(rig, settings(socket_path, client_request_burst=requests)):
        client = await LineClient.open(socket_path)
        ticker = asyncio.create_task(other_work())
        client.send(b"".join(b'{"id": %d, "cmd": "status"}\n' % i for i in range(requests)))
        started = turns
        for i in range(requests):
            assert (await client.read())["id"] == i
        ticker.cancel()
        await client.close()
    # Served without a break, the whole flood would have gone by in one or two turns.
    assert turns - started >= requests


async def test_status_requests_within_the_reuse_time_share_one_snapshot(socket_path, rig):
    clock = ManualClock()
    async with ApiServer(rig, settings(socket_path), clock=clock):
        client = await LineClient.open(socket_path)
        client.send(b"".join(b'{"id": %d, "cmd": "status"}\n' % i for i in range(20)))
        replies = [await client.read() for _ in range(20)]
        assert all(reply["ok"] for reply in replies) and rig.status_calls == 1
        client.send({"id": 20, "cmd": "stop"})  # a command: the next status is built afresh
        client.send({"id": 21, "cmd": "status"})
        assert (await client.read())["id"] == 20 and (await client.read())["id"] == 21
        assert rig.status_calls == 2
        clock.advance_to(1.0)
        client.send({"id": 22, "cmd": "status"})
        assert (await client.read())["id"] == 22 and rig.status_calls == 3
        await client.close()


async def test_a_client_past_its_rate_waits_and_every_request_is_answered(socket_path, rig):
    # 100 requests/s: a token takes 10 ms to come back, far longer than serving a request takes
    # even on a loaded machine, so nearly every request past the burst waits for one.
    limits = settings(socket_path, client_requests_per_s=100.0, client_request_burst=5)
    async with ApiServer(rig, limits) as server:
        client = await LineClient.open(socket_path)
        client.send(b"".join(b'{"id": %d, "cmd": "status"}\n' % i for i in range(30)))
        assert [(await client.read())["id"] for _ in range(30)] == list(range(30))
        assert server.stats()["rate_limit_waits"] >= 20
        await client.close()
