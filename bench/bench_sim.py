"""Lockstep speed of the simulated rig: simulated seconds per wall-clock second at 1 kHz.

The full protocol runs both ways: the rig sends one Telemetry frame per sample, a trivial host
decodes it with the real FrameDecoder and answers with one Drive (0.0) frame, and the rig
advances on that Drive. Measured through the in-process pipe and over a real pty (the host
reading the pty's slave end with add_reader on its raw file descriptor). Prints figures; goals:
>= 150x real time in process, >= 15x over a pty.

    .venv/bin/python bench/bench_sim.py [--seconds S] [--repeats N]
"""

from __future__ import annotations

import argparse
import asyncio
import gc
import os
import time
import tty
from dataclasses import replace

import protocol
from daemon.commands.sim import rig_spec
from daemon.config import demo_config_path, load_config
from sim_device.rig import RigSpec, SimulatedRig
from sim_device.transports import InProcessPipe, PtyTransport, Transport

RATE_HZ = 1000


class TrivialHost:
    """Decodes everything; answers each Telemetry with Drive 0.0 until ``samples`` are done."""

    def __init__(self, write, samples: int, done: asyncio.Future):
        self.write = write
        self.samples = samples
        self.done = done
        self.decoder = protocol.FrameDecoder()
        self.received = 0
        self.drives = 0

    def feed(self, data: bytes) -> None:
        telemetry_type = protocol.Telemetry
        encode_drive = protocol.encode_drive
        for message in self.decoder.feed(data):
            if type(message) is not telemetry_type:
                continue
            self.received += 1
            if self.received >= self.samples:
                if not self.done.done():
                    self.done.set_result(None)
                return
            self.write(encode_drive(self.drives & 0xFFFF, 0.0, message.seq))
            self.drives += 1


async def run_once(spec: RigSpec, kind: str, seconds: float) -> tuple[float, float]:
    """Simulated seconds per wall second, and per CPU second of this process, for one run.

    On a shared machine the wall figure depends on the other load; the CPU figure shows what
    the process would reach with a core to itself (the pty's kernel work is in both).
    """
    loop = asyncio.get_running_loop()
    samples = round(seconds * RATE_HZ)
    done = loop.create_future()
    transport: Transport
    if kind == "in-process":
        pipe = InProcessPipe()
        transport = pipe.device_end
    else:
        transport = PtyTransport()
    rig = SimulatedRig(spec, transport, lockstep=True, lockstep_grace_s=5.0)
    rig.start(loop)
    if kind == "in-process":
        host = TrivialHost(pipe.host_end.write, samples, done)
        pipe.host_end.open(loop, host.feed)
        close_host = pipe.host_end.close
    else:
        fd = os.open(rig.where, os.O_RDWR | os.O_NOCTTY | os.O_NONBLOCK)
        tty.setraw(fd)

        def write(data: bytes) -> None:
            os.write(fd, data)

        host = TrivialHost(write, samples, done)
        loop.add_reader(fd, lambda: host.feed(os.read(fd, 65536)))

        def close_host() -> None:
            loop.remove_reader(fd)
            os.close(fd)

    host.write(protocol.encode(protocol.Configure(1, RATE_HZ, 100)))
    started, started_cpu = time.perf_counter(), time.process_time()
    await done
    wall_s, cpu_s = time.perf_counter() - started, time.process_time() - started_cpu
    simulated_s = rig.sim_time_s
    close_host()
    rig.close()
    return simulated_s / wall_s, simulated_s / cpu_s


async def main(seconds: float, repeats: int) -> None:
    spec = rig_spec(load_config(demo_config_path()))
    spec = replace(spec, identity=replace(spec.identity, sample_rate_hz=RATE_HZ))
    gc.freeze()
    print(f"lockstep at {RATE_HZ} Hz, demo rig, {seconds:g} simulated s per run, best and median of {repeats}")
    for kind, goal in (("in-process", 150.0), ("pty", 15.0)):
        runs = [await run_once(spec, kind, seconds) for _ in range(repeats)]
        wall = sorted(speed for speed, _ in runs)
        cpu = sorted(speed for _, speed in runs)
        print(
            f"  {kind:<10}  wall: best {wall[-1]:6.1f}x  median {wall[len(wall) // 2]:6.1f}x real time"
            f"  ({1e6 / RATE_HZ / wall[-1]:.1f} us per sample)   per CPU second: best {cpu[-1]:6.1f}x"
            f"  ({1e6 / RATE_HZ / cpu[-1]:.1f} us)   goal >= {goal:g}x"
        )
    print(f"  load average: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="simulated seconds per run")
    parser.add_argument("--repeats", type=int, default=5)
    arguments = parser.parse_args()
    asyncio.run(main(arguments.seconds, arguments.repeats))
