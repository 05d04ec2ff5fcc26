"""Lockstep speed of the simulated rig: simulated seconds per wall-clock second at 1 kHz.

The full protocol runs both ways: the rig sends one Telemetry frame per sample, a trivial host
decodes it with the real FrameDecoder and answers with one Drive (0.0) frame, and the rig
advances on that Drive. Measured through the in-process pipe and over a real pty (the host
reading the pty's slave end with add_reader on its raw file descriptor). Goals: >= 150x real
time in process, >= 15x over a pty, on the machine class where the reference below ran ~270x.

The reference row, measured in the same run, is the minimal loop those figures were set
against: a plain pure-float RK4 of the same cart-pole (same parameters, one 1 ms step per
sample) and the real protocol both ways by direct calls (encode_telemetry, FrameDecoder.feed,
encode_drive, FrameDecoder.feed), with no device logic, clock or transport. On a slower or busier
machine, judge the goals by each transport's speed as a fraction of the reference's:
in process >= 150/270 = 0.56, over a pty >= 15/270 = 0.056.

``--callgrind N`` instead counts machine instructions per sample (valgrind's callgrind, user
space only) of N lockstep samples in process and of N reference samples: repeatable whatever the
machine's load, so two versions of the code compare by ratio.

Prints figures only.

    .venv/bin/python bench/bench_sim.py [--seconds S] [--repeats N] [--callgrind N]
"""

from __future__ import annotations

import argparse
import asyncio
import gc
import math
import os
import time
import tty
from dataclasses import replace

from callgrind import mark, region_instructions  # bench/callgrind.py

import protocol
from daemon.config import demo_config_path, load_config
from daemon.config.plant import rig_spec
from sim_device.plant import drive_gains
from sim_device.rig import RigSpec, SimulatedRig
from sim_device.transports import InProcessPipe, PtyTransport, Transport

RATE_HZ = 1000
REFERENCE_SPEED = 270.0  # the reference loop's speed on the machine class the goals were set on
GOALS = {"in-process": 150.0, "pty": 15.0}


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


async def run_once(spec: RigSpec, kind: str, seconds: float, marked: bool = False) -> tuple[float, float]:
    """Simulated seconds per wall second, and per CPU second of this process, for one run.

    On a shared machine the wall figure depends on the other load; the CPU figure shows what
    the process would reach with a core to itself (the pty's kernel work is in both).
    ``marked`` brackets the timed part with callgrind marks.
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

    if marked:
        mark()
    host.write(protocol.encode(protocol.Configure(1, RATE_HZ, 100)))
    started, started_cpu = time.perf_counter(), time.process_time()
    await done
    wall_s, cpu_s = time.perf_counter() - started, time.process_time() - started_cpu
    if marked:
        mark()
    simulated_s = rig.sim_time_s
    close_host()
    rig.close()
    return simulated_s / wall_s, simulated_s / cpu_s


def reference_loop(spec: RigSpec, samples: int) -> None:
    """The minimal loop the goals were set against: plain RK4 and the protocol both ways, no device.

    One RK4 step of 1 ms per sample (the free cart-pole of sim_device/plant.py's docstring, with
    viscous and Coulomb friction and the drive's back-EMF; the derivative is a function called
    four times per step), then: the device encodes the sample's Telemetry, the host decodes it
    and encodes its Drive answer, the device decodes that and holds its drive for the next step.
    """
    params = spec.plant
    gain, back_emf = drive_gains(params.drive)
    ml = params.pendulum_mass_kg * params.com_distance_m
    mgl = ml * params.gravity_mps2
    jp, mt = params.pivot_inertia_kgm2, params.moving_mass_kg
    b = params.cart_viscous_n_per_mps + back_emf
    bp, coulomb = params.pivot_viscous_nms_per_rad, params.cart_coulomb_n
    per_m, per_rad = spec.sensors.cart_counts_per_m, spec.sensors.pendulum_counts_per_rev / (2 * math.pi)
    sin, cos, floor, nan = math.sin, math.cos, math.floor, math.nan

    def derivative(v: float, th: float, w: float, force: float) -> tuple[float, float]:
        s, c = sin(th), cos(th)
        q_x = force - b * v - coulomb * ((v > 0.0) - (v < 0.0)) - ml * s * w * w
        q_th = mgl * s - bp * w
        mlc = ml * c
        det = mt * jp - mlc * mlc
        return (jp * q_x + mlc * q_th) / det, (mlc * q_x + mt * q_th) / det

    encode_telemetry, encode_drive = protocol.encode_telemetry, protocol.encode_drive
    host_feed, device_feed = protocol.FrameDecoder().feed, protocol.FrameDecoder().feed
    h = 1.0 / RATE_HZ
    h2 = h / 2
    x, v, th, w = 0.0, 0.0, math.pi, 0.0
    drive = 0.0
    for seq in range(samples):
        force = gain * drive
        a1, al1 = derivative(v, th, w, force)
        v2, th2, w2 = v + h2 * a1, th + h2 * w, w + h2 * al1
        a2, al2 = derivative(v2, th2, w2, force)
        v3, w3 = v + h2 * a2, w + h2 * al2
        a3, al3 = derivative(v3, th + h2 * w2, w3, force)
        v4, w4 = v + h * a3, w + h * al3
        a4, al4 = derivative(v4, th + h * w3, w4, force)
        x += h / 6 * (v + 2 * v2 + 2 * v3 + v4)
        th += h / 6 * (w + 2 * w2 + 2 * w3 + w4)
        v += h / 6 * (a1 + 2 * a2 + 2 * a3 + a4)
        w += h / 6 * (al1 + 2 * al2 + 2 * al3 + al4)
        frame = encode_telemetry(seq & 0xFFFF, seq * 1000, floor(x * per_m + 0.5),
                                 floor((th - math.pi) * per_rad + 0.5), 0, 0, 0, drive, nan, nan, 0)
        for telemetry in host_feed(frame):
            for command in device_feed(encode_drive(seq & 0xFFFF, 0.0, telemetry.seq)):
                drive = command.drive


def reference_speed(spec: RigSpec, seconds: float) -> tuple[float, float]:
    """The reference loop's simulated seconds per wall second and per CPU second."""
    samples = round(seconds * RATE_HZ)
    started, started_cpu = time.perf_counter(), time.process_time()
    reference_loop(spec, samples)
    wall_s, cpu_s = time.perf_counter() - started, time.process_time() - started_cpu
    return seconds / wall_s, seconds / cpu_s


def demo_spec() -> RigSpec:
    spec = rig_spec(load_config(demo_config_path()))
    return replace(spec, identity=replace(spec.identity, sample_rate_hz=RATE_HZ))


def best(runs: list[tuple[float, float]]) -> tuple[float, float]:
    """The best wall and the best CPU speed of ``runs``."""
    return max(speed for speed, _ in runs), max(speed for _, speed in runs)


def speed_line(name: str, runs: list[tuple[float, float]], note: str) -> str:
    wall = sorted(speed for speed, _ in runs)
    best_wall, best_cpu = best(runs)
    return (
        f"  {name:<10}  wall: best {best_wall:6.1f}x  median {wall[len(wall) // 2]:6.1f}x real time"
        f"  ({1e6 / RATE_HZ / best_wall:5.1f} us per sample)   per CPU second: best {best_cpu:6.1f}x"
        f"  ({1e6 / RATE_HZ / best_cpu:5.1f} us)   {note}"
    )


async def main(seconds: float, repeats: int) -> None:
    spec = demo_spec()
    gc.freeze()
    print(f"lockstep at {RATE_HZ} Hz, demo rig, {seconds:g} simulated s per run, best and median of {repeats}")
    runs: dict[str, list[tuple[float, float]]] = {"reference": [], "in-process": [], "pty": []}
    for _ in range(repeats):  # interleaved, so a change in the machine's load touches every row alike
        runs["reference"].append(reference_speed(spec, seconds))
        for kind in GOALS:
            runs[kind].append(await run_once(spec, kind, seconds))
    print(speed_line("reference", runs["reference"], f"(~{REFERENCE_SPEED:g}x where the goals were set)"))
    reference_wall, reference_cpu = best(runs["reference"])
    for kind, goal in GOALS.items():
        wall, cpu = best(runs[kind])
        print(speed_line(kind, runs[kind], f"goal >= {goal:g}x"))
        print(f"  {'':<10}  of the reference: {wall / reference_wall:.3f} wall, {cpu / reference_cpu:.3f} CPU"
              f"   goal >= {goal / REFERENCE_SPEED:.3g}")
    print("  (reference: plain RK4 and the protocol both ways by direct calls, no device logic)")
    print(f"  load average: {' '.join(f'{x:.2f}' for x in os.getloadavg())} on {os.cpu_count()} cores")


async def callgrind_child(samples: int) -> None:
    """Under callgrind: a short warm-up, then the marked regions (in process, reference)."""
    spec = demo_spec()
    await run_once(spec, "in-process", 0.2)
    reference_loop(spec, 200)
    gc.freeze()
    await run_once(spec, "in-process", samples / RATE_HZ, marked=True)
    reference_loop(spec, samples)
    mark()


def print_instructions(samples: int) -> None:
    (lockstep, reference), _stdout = region_instructions([__file__, "--callgrind-child", str(samples)], 2)
    lockstep_per, reference_per = lockstep / samples, reference / samples
    print(f"instructions per sample (callgrind, user space; lockstep at {RATE_HZ} Hz, demo rig, "
          f"{samples} samples):")
    print(f"  in-process  {lockstep_per:9.0f}   reference / in-process = {reference_per / lockstep_per:5.3f}"
          f"   goal >= {GOALS['in-process'] / REFERENCE_SPEED:.3g} (speed ratio)")
    print(f"  reference   {reference_per:9.0f}   (plain RK4 and the protocol both ways by direct calls)")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=10.0, help="simulated seconds per run")
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--callgrind", type=int, metavar="N", help="only: instructions per sample over N samples")
    parser.add_argument("--callgrind-child", type=int, metavar="N", help=argparse.SUPPRESS)
    arguments = parser.parse_args()
    if arguments.callgrind_child:
        asyncio.run(callgrind_child(arguments.callgrind_child))
    elif arguments.callgrind:
        print_instructions(arguments.callgrind)
    else:
        asyncio.run(main(arguments.seconds, arguments.repeats))
