"""Print what the dashboard costs in CPU, drawing on a real pseudo-terminal against a real daemon.

Usage: .venv/bin/python bench/bench_dash.py [--seconds 10] [--size 140x44]

The daemon runs as `poise run --sim` (real time, in its own process, recording
into a temporary folder) and `poise dash` runs on a pty of the given size, as in
a terminal window; a thread reads and discards what it draws. The figures are
the dashboard process's CPU time (user + system, all threads, from
/proc/PID/stat) per wall-clock second, with the rig at rest and then balancing,
plus the bytes it wrote to the terminal and the daemon's own CPU beside it.
Printed, never asserted: the machines are shared, compare within one run.
"""

from __future__ import annotations

import argparse
import asyncio
import fcntl
import os
import signal
import struct
import subprocess
import sys
import tempfile
import termios
import threading
import time
from collections.abc import Callable
from pathlib import Path

from daemon.api.client import ApiClient, ApiError
from daemon.errors import CommandRefused

REPO = Path(__file__).resolve().parent.parent
CONFIG = REPO / "configs" / "kestrel-1.toml"
CLOCK_TICKS_PER_S = os.sysconf("SC_CLK_TCK")
SETTLE_S = 2.0  # let the dashboard finish starting before a window is timed
WAIT_LIMIT_S = 60.0


def cpu_s(pid: int) -> float:
    """User + system CPU seconds of process ``pid`` so far (all its threads)."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / CLOCK_TICKS_PER_S  # utime, stime: fields 14, 15


class Terminal:
    """A pty of ``columns`` x ``rows`` whose output a thread reads and counts."""

    def __init__(self, columns: int, rows: int):
        self.master, self.slave = os.openpty()
        fcntl.ioctl(self.slave, termios.TIOCSWINSZ, struct.pack("HHHH", rows, columns, 0, 0))
        self.bytes_read = 0
        threading.Thread(target=self._drain, daemon=True).start()

    def _drain(self) -> None:
        while True:
            try:
                chunk = os.read(self.master, 65536)
            except OSError:
                return
            if not chunk:
                return
            self.bytes_read += len(chunk)


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


async def measure(name: str, seconds: float, dash_pid: int, daemon_pid: int, tty: Terminal) -> None:
    dash0, daemon0, bytes0 = cpu_s(dash_pid), cpu_s(daemon_pid), tty.bytes_read
    t0 = time.monotonic()
    await asyncio.sleep(seconds)
    wall = time.monotonic() - t0
    dash = (cpu_s(dash_pid) - dash0) / wall
    daemon = (cpu_s(daemon_pid) - daemon0) / wall
    written = (tty.bytes_read - bytes0) / wall / 1000.0
    print(
        f"{name:12s} dashboard {dash * 1000.0:6.0f} ms CPU/s ({dash:5.1%} of a core)"
        f"  terminal output {written:7.1f} kB/s   daemon {daemon:5.1%}",
        flush=True,
    )


async def main(seconds: float, columns: int, rows: int) -> None:
    folder = Path(tempfile.mkdtemp(prefix="poise-bench-dash-"))
    socket_path = folder / "bench.sock"
    cli = (sys.executable, "-m", "daemon.cli")
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    daemon = subprocess.Popen(
        [*cli, "run", "--sim", "--config", str(CONFIG), "--socket", str(socket_path)],
        cwd=folder, env=env, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    dash = None
    try:
        async with asyncio.timeout(WAIT_LIMIT_S):
            while True:
                try:
                    client = await ApiClient.connect(socket_path, source="api")
                    break
                except ApiError:
                    await asyncio.sleep(0.1)
        tty = Terminal(columns, rows)
        dash_env = {k: v for k, v in env.items() if k not in ("COLUMNS", "LINES")}
        dash = subprocess.Popen(
            [*cli, "dash", "--config", str(CONFIG), "--socket", str(socket_path)],
            cwd=folder, env={**dash_env, "TERM": "xterm-256color"},
            stdin=tty.slave, stdout=tty.slave, stderr=tty.slave, start_new_session=True,
        )
        print(f"poise dash on a {columns}x{rows} pty, {seconds:g} s per window", flush=True)
        await asyncio.sleep(SETTLE_S)
        await measure("at rest", seconds, dash.pid, daemon.pid, tty)
        try:
            await balance(client)
        except (NotBalancing, TimeoutError) as exc:
            print(f"balancing    not measured: {exc or 'timed out'}", flush=True)
        else:
            await asyncio.sleep(SETTLE_S)
            await measure("balancing", seconds, dash.pid, daemon.pid, tty)
        await client.close()
    finally:
        if dash is not None:
            dash.kill()
            dash.wait()
        daemon.send_signal(signal.SIGTERM)
        daemon.wait(timeout=WAIT_LIMIT_S)


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="length of each timed window")
    parser.add_argument("--size", default="140x44", help="terminal size, COLUMNSxROWS")
    options = parser.parse_args()
    width, height = (int(part) for part in options.size.lower().split("x"))
    asyncio.run(main(options.seconds, width, height))
