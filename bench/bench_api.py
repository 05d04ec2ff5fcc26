"""Print what the control API costs the event loop it shares with the daemon.

Usage: .venv/bin/python bench/bench_api.py [--seconds 3] [--subscribers 4]

Figures, printed and never asserted (the machines are shared; compare within one run):
- request round trip (client -> server -> stand-in target -> client) over a real Unix socket;
- status fan-out: subscribers at 50 Hz each, status lines queued and dropped;
- lateness of a 1 ms periodic timer on the same loop, alone and then with a
  subscriber that never reads plus a client sending requests as fast as it can.
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import tempfile
import time
from pathlib import Path

from daemon.api.client import ApiClient
from daemon.api.server import ApiServer
from daemon.config.service import ApiSettings

TICK_S = 0.001


class StandInTarget:
    """Answers like a supervisor would, with a status of realistic size (~2 KB of JSON)."""

    def execute(self, command: str, args: dict, source: str) -> dict:
        return {"command": command}

    def status(self) -> dict:
        return {
            "state": "BALANCE",
            "t_s": time.monotonic(),
            "x_m": 0.01,
            "theta_rad": 0.002,
            "interlocks": [
                {"name": f"check{i}", "state": "armed", "margin": 0.5} for i in range(10)
            ],
            "events": [
                {"t_s": 1.0, "kind": "mode", "source": "cli", "text": "x" * 40} for _ in range(20)
            ],
        }


async def tick_lateness_us(seconds: float) -> list[float]:
    """Run a periodic timer for ``seconds``; return how late each tick fired, in microseconds."""
    loop = asyncio.get_running_loop()
    lateness: list[float] = []
    done = asyncio.Event()
    deadline = loop.time() + TICK_S
    end = loop.time() + seconds

    def tick() -> None:
        nonlocal deadline
        lateness.append((loop.time() - deadline) * 1e6)
        deadline += TICK_S
        if deadline > end:
            done.set()
        else:
            loop.call_at(max(deadline, loop.time()), tick)

    loop.call_at(deadline, tick)
    await done.wait()
    return lateness


def describe(name: str, values: list[float], unit: str) -> str:
    ordered = sorted(values)
    p99 = ordered[min(len(ordered) - 1, int(0.99 * len(ordered)))]
    return (
        f"{name:50s} n={len(values):6d}  p50={statistics.median(values):8.1f} {unit}"
        f"  p99={p99:8.1f} {unit}  max={ordered[-1]:8.1f} {unit}"
    )


async def main(seconds: float, subscriber_count: int) -> None:
    folder = Path(tempfile.mkdtemp(prefix="poise-bench-"))
    settings = ApiSettings(socket_path=str(folder / "api.sock"), max_status_rate_hz=200.0)
    async with ApiServer(StandInTarget(), settings) as server:
        print(describe("timer lateness, API idle", await tick_lateness_us(seconds), "us"))

        async with await ApiClient.connect(settings.socket_path) as client:
            round_trips = []
            end = time.perf_counter() + seconds
            while time.perf_counter() < end:
                start = time.perf_counter()
                await client.request("setpoint", {"x_m": 0.0})
                round_trips.append((time.perf_counter() - start) * 1e6)
            print(describe("request round trip", round_trips, "us"))

        readers = [await ApiClient.connect(settings.socket_path) for _ in range(subscriber_count)]

        async def drain(client: ApiClient) -> None:
            async for _ in client.subscribe(rate_hz=50):
                pass

        reading = [asyncio.create_task(drain(client)) for client in readers]
        _, sleeper_writer = await asyncio.open_unix_connection(settings.socket_path)
        sleeper_writer.transport.pause_reading()
        sleeper_writer.write(b'{"id": 1, "cmd": "subscribe", "args": {"rate_hz": 200}}\n')

        async def hammer(client: ApiClient) -> None:
            while True:
                await client.request("status")

        hammerer = await ApiClient.connect(settings.socket_path)
        hammering = asyncio.create_task(hammer(hammerer))
        before = server.stats()
        lateness = await tick_lateness_us(seconds)
        after = server.stats()
        hammering.cancel()
        label = f"timer lateness, busy ({subscriber_count} subscribers + hung + hammer)"
        print(describe(label, lateness, "us"))
        print(
            f"{'in that busy window':50s} requests={after['requests'] - before['requests']}"
            f"  status lines queued={after['status_lines_queued'] - before['status_lines_queued']}"
            f"  dropped={after['status_lines_dropped'] - before['status_lines_dropped']}"
        )
        for task in reading:
            task.cancel()
        for client in [*readers, hammerer]:
            await client.close()
        sleeper_writer.transport.abort()


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=3.0)
    parser.add_argument("--subscribers", type=int, default=4)
    options = parser.parse_args()
    asyncio.run(main(options.seconds, options.subscribers))
