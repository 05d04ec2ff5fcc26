"""The daemon's event-loop lag and per-sample latency with 0, 1 and 3 dashboards attached.

`poise run --sim` (the demo rig, real time, its simulated rig in the daemon's
own event loop) is started once, homed, and armed, so the cycle runs its hold
loop with every interlock armed. Then for each dashboard count, that many
`poise dash` processes draw on real terminals (detached tmux sessions of
140x44). Each step runs WINDOW_S seconds after the
dashboards have connected; the daemon's own figures are read over the control
API (status: loop lag from the watchdog's ticks, read->write latency from the
cycle's timing ring), and each figure is also given as a ratio to the run with
no dashboard, measured minutes apart on the same machine.

Needs tmux. Run: ``python bench/bench_dashboards.py [--window S]``.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from daemon.api.client import ApiClient, wait_for_daemon

POISE = [sys.executable, "-m", "daemon.cli"]
COUNTS = (0, 1, 3)
WINDOW_S = 20.0


async def status(socket_path: Path) -> dict:
    async with await ApiClient.connect(socket_path, source="cli") as client:
        return await client.request("status")


async def command(socket_path: Path, name: str) -> None:
    async with await ApiClient.connect(socket_path, source="cli") as client:
        await client.request(name)


async def wait_state(socket_path: Path, state: str, limit_s: float = 60.0) -> None:
    deadline = time.monotonic() + limit_s
    while (await status(socket_path))["state"] != state:
        if time.monotonic() > deadline:
            raise SystemExit(f"the daemon did not reach {state}")
        await asyncio.sleep(0.2)


def start_dashboards(folder: Path, socket_path: Path, count: int) -> Path:
    tmux_socket = folder / f"tmux-{count}.sock"
    for index in range(count):
        command_line = (
            f"env -u COLUMNS -u LINES {sys.executable} -m daemon.cli dash --socket {socket_path}"
        )
        subprocess.run(
            ["tmux", "-S", str(tmux_socket), "new-session", "-d", "-s", f"dash{index}", "-x", "140",
             "-y", "44", command_line],
            check=True, cwd=REPO,
        )
    return tmux_socket


async def measure(socket_path: Path, window_s: float) -> dict:
    """Loop lag and latency over the last ``window_s`` (the rings hold about 8 s of samples)."""
    await asyncio.sleep(window_s)
    now = await status(socket_path)
    return {
        "lag_p99_ms": now["loop"]["lag_ms_p99"],
        "lag_max_ms": now["loop"]["lag_ms_max"],
        "gap_max_ms": now["loop"]["read_gap_ms_worst"],
        "latency_p50_us": now["link"]["latency_us_p50"],
        "latency_p99_us": now["link"]["latency_us_p99"],
        "faults": [f["name"] for f in now["faults"]],
    }


async def main(window_s: float) -> None:
    if shutil.which("tmux") is None:
        raise SystemExit("bench_dashboards: needs tmux")
    folder = Path(tempfile.mkdtemp(prefix="poise-bench-dash-"))
    socket_path = folder / "rig.sock"
    config = folder / "rig.toml"
    config.write_text(
        (REPO / "configs" / "kestrel-1.toml").read_text()
        .replace('db_path = "kestrel-1-runs.db"', f'db_path = "{folder / "runs.db"}"')
    )
    daemon = await asyncio.create_subprocess_exec(
        *POISE, "run", "--sim", "--config", str(config), "--socket", str(socket_path),
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, cwd=REPO,
    )
    results = {}
    try:
        await (await wait_for_daemon(socket_path, retry_s=0.2)).close()
        await command(socket_path, "reset")  # the simulated rig's power-up flag
        await command(socket_path, "home")
        await wait_state(socket_path, "IDLE")
        await command(socket_path, "arm")
        await wait_state(socket_path, "READY")
        for count in COUNTS:
            tmux_socket = (
                await asyncio.to_thread(start_dashboards, folder, socket_path, count) if count else None
            )
            await asyncio.sleep(3.0)  # the dashboards connect and settle
            load = os.getloadavg()[0]
            results[count] = await measure(socket_path, window_s) | {"load": load}
            if tmux_socket is not None:
                kill = ["tmux", "-S", str(tmux_socket), "kill-server"]
                await asyncio.to_thread(subprocess.run, kill, check=False)
            await asyncio.sleep(2.0)
    finally:
        daemon.terminate()
        await daemon.wait()
    base = results[0]
    print(f"daemon with N dashboards attached ({window_s:g} s each; ratios to N = 0):")
    print(" N  loop lag p99 / max ms   worst read gap ms   latency p50 / p99 us   load  faults")
    for count, r in results.items():
        ratio = (
            f"  (x{r['lag_p99_ms'] / base['lag_p99_ms']:.2f} lag p99, "
            f"x{r['latency_p99_us'] / base['latency_p99_us']:.2f} latency p99)"
            if count
            else ""
        )
        print(
            f" {count}  {r['lag_p99_ms']:7.2f} / {r['lag_max_ms']:6.2f}        {r['gap_max_ms']:7.2f}"
            f"          {r['latency_p50_us']:7.1f} / {r['latency_p99_us']:7.1f}     "
            f"{r['load']:4.2f}  {','.join(r['faults']) or 'none'}{ratio}"
        )


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--window", type=float, default=WINDOW_S, help="seconds measured per step")
    asyncio.run(main(parser.parse_args().window))
