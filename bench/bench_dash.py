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
import struct
import subprocess
import termios
import threading
import time
from pathlib import Path

from sim_daemon import CONFIG, POISE, REPO, NotBalancing, balance, simulated_daemon

CLOCK_TICKS_PER_S = os.sysconf("SC_CLK_TCK")
SETTLE_S = 2.0  # let the dashboard finish starting before a window is timed


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


async def measure(
    name: str, seconds: float, dash_pid: int, daemon_pid: int, tty: Terminal
) -> None:
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
    async with simulated_daemon() as (daemon, client):
        tty = Terminal(columns, rows)
        env = {k: v for k, v in os.environ.items() if k not in ("COLUMNS", "LINES")}
        dash = subprocess.Popen(
            [*POISE, "dash", "--config", str(CONFIG), "--socket", str(client.socket_path)],
            cwd=REPO,  # `python -m` looks in the working folder first: this checkout's dashboard
            env={**env, "PYTHONPATH": str(REPO), "TERM": "xterm-256color"},
            stdin=tty.slave, stdout=tty.slave, stderr=tty.slave, start_new_session=True,
        )
        try:
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
        finally:
            dash.kill()
            dash.wait()


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="length of each timed window")
    parser.add_argument("--size", default="140x44", help="terminal size, COLUMNSxROWS")
    options = parser.parse_args()
    width, height = (int(part) for part in options.size.lower().split("x"))
    asyncio.run(main(options.seconds, width, height))
