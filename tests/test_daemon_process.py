"""The real daemon (`poise run`, real time) against the simulator in another process (`poise sim --pty`).

- `poise run --port socket://127.0.0.1:PORT` against `poise sim --tcp PORT`:
  the handshake over TCP, and the link up at the configured rate.
- kill -9 of the daemon while it balances: the simulator's own watchdog cuts
  the drive within its timeout (the daemon cannot help: it is dead).
- The control API under malformed and hostile input, a client that never
  reads, and a client that hangs up mid-stream: clear errors, and the rig
  holding its cart keeps going (no fault, no loop stall) throughout.

The rig config used has no limit switches (homing declares the present
position the centre, so the tests need no half-minute homing run in real time)
and the default link, loop and device-watchdog timeouts, on the shared test
machine as on a user's.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import os
import re
import signal
import sys
import time

import pytest
from test_daemon_support import write_rig_config

from daemon.api.client import ApiClient, wait_for_daemon
from daemon.errors import CommandRefused
from protocol import F_WATCHDOG, ST_ARMED, FaultReport, FrameDecoder, Telemetry

pytestmark = pytest.mark.realtime

POISE = [sys.executable, "-m", "daemon.cli"]
WATCHDOG_MS = 50  # the default, as every timeout here
EDITS = {"has_limit_switches": "false", "device_watchdog_ms": str(WATCHDOG_MS)}
EXTRA = ""
START_TIMEOUT_S = 60.0


async def start_sim(config, where: tuple[str, ...] = ("--pty",)) -> tuple[asyncio.subprocess.Process, str]:
    """`poise sim` on a pty (or ``("--tcp", PORT)``); returns it and the address it says to connect to."""
    sim = await asyncio.create_subprocess_exec(
        *POISE, "sim", *where, "--config", str(config), stdout=asyncio.subprocess.PIPE
    )
    async with asyncio.timeout(START_TIMEOUT_S):
        line = (await sim.stdout.readline()).decode()
    return sim, line.rsplit("connect to ", 1)[1].strip()


async def start_daemon(config, port_url: str, socket_path: str):
    daemon = await asyncio.create_subprocess_exec(
        *POISE, "run", "--config", str(config), "--port", port_url,
        stdout=asyncio.subprocess.DEVNULL, stderr=asyncio.subprocess.PIPE,
    )
    try:
        async with asyncio.timeout(START_TIMEOUT_S):
            client = await wait_for_daemon(socket_path, retry_s=0.1)
    except TimeoutError:
        daemon.kill()
        _out, err = await daemon.communicate()
        raise AssertionError(f"daemon did not start: {err.decode()[-2000:]}") from None
    return daemon, client


@contextlib.asynccontextmanager
async def sim_and_daemon(config, socket_path: str, where: tuple[str, ...] = ("--pty",)):
    """The simulator and the daemon as subprocesses; both are gone when the block ends, however."""
    sim, address = await start_sim(config, where)
    daemon = None
    try:
        daemon, client = await start_daemon(config, address, socket_path)
        await take_into_use(client)
        yield address, daemon, client
    finally:
        if daemon is not None and daemon.returncode is None:
            daemon.kill()
            await daemon.wait()
        await stop(sim)


async def stop(process: asyncio.subprocess.Process) -> None:
    if process.returncode is None:
        process.send_signal(signal.SIGTERM)
        async with asyncio.timeout(START_TIMEOUT_S):
            await process.wait()


async def wait_for_state(client: ApiClient, *states: str, timeout_s: float = 60.0) -> dict:
    async with asyncio.timeout(timeout_s):
        while True:
            status = await client.request("status")
            if status["state"] in states:
                return status
            assert status["state"] not in ("FAULT", "ESTOP"), status["faults"]
            await asyncio.sleep(0.05)  # polling a remote daemon's status, as a CLI user would


async def take_into_use(client: ApiClient) -> None:
    """The operator's reset of a just powered-up rig: the daemon comes up in FAULT showing the
    rig's F_RESET (PROTOCOL.md §9.1) and is IDLE once reset."""
    status = await client.request("status")  # served only after the handshake
    assert (status["state"], [f["name"] for f in status["faults"]]) == ("FAULT", ["device.reset"])
    await client.request("reset")
    await wait_for_state(client, "IDLE", timeout_s=10.0)


async def ready(client: ApiClient) -> None:
    await client.request("home")
    await wait_for_state(client, "IDLE")
    await client.request("arm")
    await wait_for_state(client, "READY")


async def swing_up(client: ApiClient) -> None:
    async with asyncio.timeout(60.0):
        while True:
            try:
                await client.request("swing_up")
                break
            except CommandRefused as refused:
                assert "hanging_still" in str(refused) or "link.rate" in str(refused), refused
                await asyncio.sleep(0.1)
    await wait_for_state(client, "BALANCE")


def read_pty_frames(path: str, seconds: float) -> list:
    """Everything the simulator sends on ``path`` over the next ``seconds``, decoded."""
    decoder = FrameDecoder()
    fd = os.open(path, os.O_RDONLY | os.O_NOCTTY | os.O_NONBLOCK)
    messages = []
    deadline = time.monotonic() + seconds
    try:
        while time.monotonic() < deadline:
            try:
                messages += decoder.feed(os.read(fd, 65536))
            except BlockingIOError:
                time.sleep(0.01)
    finally:
        os.close(fd)
    return messages


@pytest.mark.slow
async def test_kill_9_of_the_daemon_while_balancing_leaves_the_drive_off_within_the_watchdog(tmp_path):
    config = write_rig_config(tmp_path, extra=EXTRA, edits=EDITS)
    socket_path = str(tmp_path / "poise.sock")
    async with sim_and_daemon(config, socket_path) as (pty_path, daemon, client):
        await ready(client)
        await swing_up(client)
        await asyncio.sleep(0.5)  # let it balance for a moment of real time
        assert (await client.request("status"))["state"] == "BALANCE"
        daemon.kill()
        await daemon.wait()
        frames = await asyncio.to_thread(read_pty_frames, pty_path, 1.0)
    reports = [m for m in frames if type(m) is FaultReport and m.faults & F_WATCHDOG]
    assert reports, "the simulator never reported its watchdog"
    period_ms = 1000.0 / 500
    assert WATCHDOG_MS <= reports[0].detail <= WATCHDOG_MS + 2 * period_ms  # ms since the last command
    telemetry = [m for m in frames if type(m) is Telemetry]
    assert telemetry and telemetry[-1].drive_applied == 0.0
    assert not telemetry[-1].status & ST_ARMED and telemetry[-1].faults & F_WATCHDOG


@pytest.mark.slow
async def test_hostile_api_clients_do_not_disturb_a_holding_rig(tmp_path):
    config = write_rig_config(tmp_path, extra=EXTRA, edits=EDITS)
    socket_path = str(tmp_path / "poise.sock")
    async with sim_and_daemon(config, socket_path) as (_pty_path, daemon, client):
        await ready(client)
        before = await client.request("status")

        reader, writer = await asyncio.open_unix_connection(socket_path)
        replies = []
        for line in (b"{not json\n", b'{"id": 1, "cmd": "fly"}\n',
                     b'{"id": 2, "cmd": "setpoint", "args": {"x_m": "far"}}\n',
                     b'{"id": 3, "cmd": "setpoint", "args": {"x_m": 5.0}}\n', b"[1, 2, 3]\n"):
            writer.write(line)
            replies.append(json.loads(await reader.readline()))
        assert [reply["ok"] for reply in replies] == [False] * 5
        assert all("\n" not in reply["error"] and reply["error"] for reply in replies)
        assert "fly" in replies[1]["error"] and "x_m" in replies[2]["error"]
        assert "soft limits" in replies[3]["error"]
        writer.write(b"x" * 70_000 + b"\n")  # longer than api.max_line_bytes
        oversize = json.loads(await reader.readline())
        assert not oversize["ok"] and "longer than" in oversize["error"]
        assert await reader.read() == b""  # and the connection is closed
        writer.close()

        # A subscriber that never reads, and one that hangs up mid-stream.
        _slow_reader, slow = await asyncio.open_unix_connection(socket_path)
        slow.write(b'{"id": 1, "cmd": "subscribe", "args": {"rate_hz": 50}}\n')
        hasty_reader, hasty = await asyncio.open_unix_connection(socket_path)
        hasty.write(b'{"id": 1, "cmd": "subscribe", "args": {"rate_hz": 50}}\n')
        await hasty_reader.readline()
        hasty.transport.abort()
        await asyncio.sleep(2.0)  # real time passes with the slow subscriber connected

        after = await client.request("status")
        slow.transport.abort()
        await client.close()
        await stop(daemon)
        assert daemon.returncode == 0
    assert after["state"] == "READY" and after["faults"] == [], after["faults"]
    # The cycle kept answering telemetry all along (how many frames it answered rather than
    # stepped over depends on the machine's load, so only "it kept going" is checked here).
    assert after["link"]["frames_rx"] > before["link"]["frames_rx"]
    assert after["cycle"]["samples"] > before["cycle"]["samples"]


@pytest.mark.slow
async def test_the_daemon_runs_a_rig_on_a_tcp_port_with_the_link_up_at_the_configured_rate(tmp_path):
    config = write_rig_config(tmp_path, extra=EXTRA, edits=EDITS)
    socket_path = str(tmp_path / "poise.sock")
    # Port 0: the simulator binds a free loopback port and prints its socket:// URL.
    async with sim_and_daemon(config, socket_path, ("--tcp", "0")) as (url, daemon, client):
        assert re.fullmatch(r"socket://127\.0\.0\.1:\d+", url)
        status = await client.request("status")  # served only after the handshake and a first rate
        await client.close()
        await stop(daemon)
        assert daemon.returncode == 0
    assert status["state"] == "IDLE" and status["faults"] == []
    assert status["rig"]["id"] == "kestrel-1"
    link = status["link"]
    assert link["connected"] is True
    # The rate is counted against the rig's own sample times, so a loaded machine does not skew it.
    assert link["rate_hz"] == pytest.approx(500.0, rel=0.05)
    assert link["frames_rx"] > 0 and link["frames_tx"] > 0 and link["crc_failures"] == 0
