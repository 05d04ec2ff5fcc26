"""Control-cycle figures: per-sample compute cost and read->write latency over a pty.

1. Compute, in-loop: the cycle's own per-stage timers (decode + estimate +
   control + interlocks + encode) while the demo rig balances on the simulated
   rig in lockstep over a pty, median and p99 of the last 4096 samples.
2. Compute, tight loop: the same stages called back to back on recorded
   telemetry frames without any I/O in between (the best case, caches warm).
3. Read->write latency: the daemon in this process, the simulated rig in real
   time at 1 kHz in another process (`poise sim --pty`, the Wren-2 rig), the
   rig idle (each frame answered with a zero drive: the same read, decode,
   estimate, interlock, encode and write path); median and p99 of the last
   4096 samples.

Prints figures only; the machines are shared, so compare within one run.
Usage: .venv/bin/python bench/bench_cycle.py [--seconds S]
"""

from __future__ import annotations

import argparse
import asyncio
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
from daemon.config import parse_config
from daemon.runtime.embedded_sim import SimOptions
from daemon.runtime.service import PoiseService
from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import State
from protocol import Telemetry


def config_text(base: str, folder: str, edits: dict[str, str]) -> str:
    lines = []
    for line in (REPO / "configs" / base).read_text().splitlines():
        key = line.split("=")[0].strip()
        if key == "db_path":
            line = f'db_path = "{folder}/runs.db"'
        elif key == "socket_path":
            line = f'socket_path = "{folder}/poise.sock"'
        elif key in edits:
            line = f"{key} = {edits[key]}"
        lines.append(line)
    return "\n".join(lines) + "\n"


async def balancing_in_lockstep(folder: str, seconds: float) -> tuple[dict, dict, list[bytes]]:
    text = config_text("kestrel-1.toml", folder, {})
    service = PoiseService(parse_config(text), text, sim=SimOptions(lockstep=True), serve_api=False)
    await service.start()
    frames: list[bytes] = []
    try:
        cycle = service.cycle
        service.execute("home", {}, "api")
        await cycle.wait_for_state({State.IDLE, State.FAULT})
        service.execute("arm", {}, "api")
        await swing_up_when_still(service)
        await cycle.wait_for_state({State.BALANCE, State.FAULT, State.IDLE})
        await cycle.wait_until(cycle.t_s + seconds)
        assert service.supervisor.machine.state is State.BALANCE, "the pendulum did not stay up"
        compute, stages = cycle.timing.compute_us(), cycle.timing.stage_us()
        frames = [chunk + b"\x00" for _, chunk, _ in service.link.stats.rx_frames]
    finally:
        await service.close()
    return compute, stages, frames


def tight_loop(folder: str, frames: list[bytes], repeats: int) -> list[float]:
    """Per-sample cost (us) of decode+estimate+control+interlocks+encode with no I/O in between."""
    from daemon.control.rig_setup import build_control_set
    from daemon.supervisor import Supervisor
    from protocol import FrameDecoder, encode_drive

    config = parse_config(config_text("kestrel-1.toml", folder, {}))
    controls = build_control_set(config)
    supervisor = Supervisor(config, clock=lambda: 0.0)
    decoder = FrameDecoder()
    estimator, balance = controls.estimator, controls.balance
    costs = []
    clock = time.perf_counter_ns
    for _ in range(repeats):
        for frame in frames:
            t0 = clock()
            messages = decoder.feed(frame)
            tm = messages[0]
            if type(tm) is not Telemetry:
                continue
            x, v, th, w = estimator.update(tm.cart_counts, tm.pendulum_counts, tm.drive_applied)
            drive = balance.update(x, v, th, w)
            supervisor.on_sample(tm.t_us * 1e-6, x, v, th, w, drive, tm.switches, tm.faults,
                                 tm.supply_v)
            encode_drive(tm.seq, drive, tm.seq)
            costs.append((clock() - t0) / 1000.0)
    return costs


async def latency_over_pty(folder: str, seconds: float) -> tuple[dict, int, int]:
    text = config_text("wren-2.toml", folder, {})
    config_path = Path(folder) / "wren.toml"
    config_path.write_text(text)
    sim = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "daemon.cli", "sim", "--pty", "--config", str(config_path),
        stdout=asyncio.subprocess.PIPE,
    )
    try:
        pty_path = (await sim.stdout.readline()).decode().rsplit("connect to ", 1)[1].strip()
        service = PoiseService(parse_config(text), text, port_url=pty_path, serve_api=False)
        await service.start()
        try:
            cycle = service.cycle
            await asyncio.sleep(seconds)  # idle: every telemetry frame is still answered
            latency = cycle.timing.latency_us()
            return latency, cycle.samples, cycle.missed
        finally:
            await service.close()
    finally:
        sim.terminate()
        await sim.wait()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=5.0, help="balance / hold time per part")
    args = parser.parse_args()
    print(f"bench_cycle: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.2f}")
    with tempfile.TemporaryDirectory() as folder:
        compute, stages, frames = asyncio.run(balancing_in_lockstep(folder, args.seconds))
        print("1. in-loop compute per sample (Kestrel-1 balancing, lockstep over a pty):")
        print(f"   decode+estimate+control+interlocks+encode  median {compute['p50']:.2f} us  "
              f"p99 {compute['p99']:.2f} us")
        for name, figures in stages.items():
            print(f"   {name:<10} median {figures['p50']:7.2f} us  p99 {figures['p99']:7.2f} us")
        costs = sorted(tight_loop(folder, frames, 50))
        print(f"2. tight-loop compute per sample ({len(costs)} samples, no I/O): "
              f"median {statistics.median(costs):.2f} us  p99 {costs[int(0.99 * len(costs))]:.2f} us")
    with tempfile.TemporaryDirectory() as folder:
        latency, samples, missed = asyncio.run(latency_over_pty(folder, args.seconds))
        print("3. read->write latency (Wren-2 at 1 kHz, simulator in real time in another process):")
        print(f"   median {latency['p50']:.1f} us  p99 {latency['p99']:.1f} us  max {latency['max']:.1f} us"
              f"  ({samples} samples answered, {missed} overtaken by a newer one)")


if __name__ == "__main__":
    main()
