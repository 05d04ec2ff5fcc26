"""A simulated rig's daemon in its own process, in real time, for scripts that watch it: start it, bring it to balance.

`poise run --sim` is started on Kestrel-1 with its run store and control socket
in a temporary folder; :func:`simulated_daemon` yields the process and an API
client connected to it, and stops the daemon (SIGTERM: a controlled stop) at
the end. Used by bench/bench_dash.py and docs/make_dashboard_svg.py.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import signal
import subprocess
import sys
import tempfile
from collections.abc import AsyncIterator, Callable
from pathlib import Path

from daemon.api.client import ApiClient, ApiError
from daemon.errors import CommandRefused

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "configs" / "kestrel-1.toml"
POISE = (sys.executable, "-m", "daemon.cli")
WAIT_LIMIT_S = 60.0


@contextlib.asynccontextmanager
async def simulated_daemon() -> AsyncIterator[tuple[subprocess.Popen, ApiClient]]:
    folder = Path(tempfile.mkdtemp(prefix="poise-sim-daemon-"))
    socket_path = folder / "poise.sock"
    daemon = subprocess.Popen(
        [*POISE, "run", "--sim", "--config", str(CONFIG), "--socket", str(socket_path)],
        cwd=folder,  # the config's relative run store lands here
        env={**os.environ, "PYTHONPATH": str(REPO)},
        stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    try:
        async with asyncio.timeout(WAIT_LIMIT_S):
            while True:
                try:
                    client = await ApiClient.connect(socket_path, source="api")
                    break
                except ApiError:
                    await asyncio.sleep(0.1)
        try:
            yield daemon, client
        finally:
            await client.close()
    finally:
        daemon.send_signal(signal.SIGTERM)
        daemon.wait(timeout=WAIT_LIMIT_S)


class NotBalancing(Exception):
    """The daemon could not be brought to balance (on a machine too loaded for real time)."""


async def first_status(client: ApiClient, wanted: Callable[[dict], bool]) -> dict:
    """The first status line for which ``wanted`` is true."""
    async with asyncio.timeout(WAIT_LIMIT_S):
        async for status in client.subscribe(20.0):
            if wanted(status):
                return status
    raise ConnectionError("the daemon closed the connection")


def in_state(*states: str) -> Callable[[dict], bool]:
    return lambda status: status.get("state") in states


def homed_or_fault(status: dict) -> bool:
    return status.get("state") == "FAULT" or (status.get("state") == "IDLE" and status.get("homed"))


async def balance(client: ApiClient, attempts: int = 3) -> None:
    """Home, arm and swing up; returns once the daemon balances the pendulum.

    A loaded machine can stall the daemon past its limits (loop.stall, device.watchdog):
    then the fault is reset and the whole sequence tried again, up to ``attempts`` times.
    """
    for _ in range(attempts):
        status = await first_status(client, in_state("IDLE", "FAULT"))
        if status["state"] == "FAULT":
            print(f"  (reset after {', '.join(f['reason'] for f in status['faults'])})", flush=True)
            await client.request("reset")
            await first_status(client, in_state("IDLE", "FAULT"))
        try:
            await client.request("home")
            status = await first_status(client, homed_or_fault)
            if status["state"] != "IDLE":
                continue
            await client.request("arm")
        except CommandRefused as refused:
            print(f"  ({refused})", flush=True)
            await asyncio.sleep(0.5)
            continue
        if await swing_up(client) == "BALANCE":
            return
    raise NotBalancing(f"no balance in {attempts} attempts")


async def swing_up(client: ApiClient) -> str:
    """Send swing_up once the pendulum hangs still; returns the state the swing-up ends in."""
    async with asyncio.timeout(WAIT_LIMIT_S):
        while True:
            try:
                await client.request("swing_up")
                break
            except CommandRefused as refused:
                if "hanging_still" not in refused.reason:
                    return "refused"
            await asyncio.sleep(0.2)
    status = await first_status(client, in_state("BALANCE", "FAULT", "IDLE"))
    return status["state"]


