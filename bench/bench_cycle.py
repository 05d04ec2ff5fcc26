"""Control-cycle figures: per-sample compute cost by stage, and read->write latency over a pty.

1. In-loop, wall clock: the cycle's own per-stage timers (monotonic_ns) while
   the demo rig balances on the simulated rig in lockstep over a pty, median
   and p99 of the last 4096 samples.
2. Replay, CPU time (time.thread_time, so other processes on a loaded machine
   do not count): Kestrel-1 telemetry of the plant balancing under its LQR is
   fed, one frame at a time over a socket pair, to a real ControlCycle in the
   BALANCE state (os.read -> decode -> estimate -> control -> interlocks ->
   encode -> os.write -> recorder queue). Printed: the whole cycle per
   sample, and each stage run on its own over the same samples (decode,
   estimate, control, interlocks, encode+write, record); "glue" is the whole
   cycle less the stages (the os.read, bookkeeping, the cycle's own timers;
   thread_time counts the kernel's side of the read too). Timers are read
   once per block of samples, never per sample. Last, for scale, a bare
   loop over the same frames and socket: os.read -> decode -> a fixed LQR
   gain on positions and plain differences -> encode -> os.write, with no
   estimator, mode logic, interlocks, timers, link bookkeeping or recording:
   the floor the protocol and the interpreter set on this machine.
3. Read->write latency: the daemon in this process, the simulated rig in real
   time at 1 kHz in another process (`poise sim --pty`, the Wren-2 rig), the
   rig idle (each frame answered with a zero drive: the same read, decode,
   estimate, interlock, encode and write path); median and p99 of the last
   4096 samples.

``--callgrind N`` instead runs the replay of part 2 under
``valgrind --tool=callgrind`` for N samples and prints machine instructions
per sample (user space only), whole cycle and per stage: repeatable whatever the machine's load,
so two versions of the code can be compared by ratio. Each region of the
replay is bracketed by a call of os.getppid, on which callgrind dumps its
counts (``--dump-before=os_getppid``).

Prints figures only; the machines are shared, so compare within one run.
Usage: .venv/bin/python bench/bench_cycle.py [--seconds S] [--samples N] [--callgrind N]
"""

from __future__ import annotations

import argparse
import asyncio
import copy
import gc
import math
import os
import socket
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
from callgrind import mark, region_instructions  # bench/callgrind.py

from daemon.config import PoiseConfig, parse_config
from daemon.control.homing import Homing
from daemon.control.rig_setup import ControlSet, build_control_set
from daemon.link.link import Link
from daemon.recording import Recorder, RunMetadata
from daemon.runtime.cycle import ControlCycle
from daemon.runtime.embedded_sim import SimOptions
from daemon.runtime.pacing import lockstep
from daemon.runtime.service import PoiseService
from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import Event, Output, State, Supervisor, Transition, state_code_table
from protocol import (
    ST_ARMED,
    ST_LOCKSTEP,
    ST_WATCHDOG_ACTIVE,
    FrameDecoder,
    LinkStats,
    Telemetry,
    encode,
    encode_drive,
)
from sim_device.plant import Plant, cart_counts, pendulum_counts

BLOCK = 64  # samples between timer reads and socket drains in the replay
REGIONS = (
    "harness", "cycle", "decode", "estimate", "control", "interlocks", "encode+write", "record", "bare loop",
)


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


# ---------------------------------------------------------------------- 1. in the loop


async def balancing_in_lockstep(folder: str, seconds: float) -> tuple[dict, dict]:
    text = config_text("kestrel-1.toml", folder, {})
    service = PoiseService(parse_config(text), text, sim=SimOptions(lockstep=True), serve_api=False)
    await service.start()
    try:
        cycle = service.cycle
        service.execute("reset", {}, "api")  # the simulated rig's power-up flag
        service.execute("home", {}, "api")
        await cycle.waiters.wait_for_state({State.IDLE, State.FAULT})
        service.execute("arm", {}, "api")
        await swing_up_when_still(service)
        await cycle.waiters.wait_for_state({State.BALANCE, State.FAULT, State.IDLE})
        await cycle.waiters.wait_until(cycle.t_s + seconds)
        assert service.supervisor.machine.state is State.BALANCE, "the pendulum did not stay up"
        return cycle.timing.compute_us(), cycle.timing.stage_us()
    finally:
        await service.close()


# ---------------------------------------------------------------------- 2. replay


def balancing_frames(config: PoiseConfig, count: int) -> list[bytes]:
    """Telemetry frames of the plant (no sensor noise) balancing under the configured LQR.

    It starts 5 cm off centre, tilted 3 degrees, so the first second is a recovery and the
    rest a quantisation-limited hold, as in a balance run.
    """
    controls = build_control_set(config)
    plant = Plant(controls.params, (0.05, 0.0, math.radians(3.0), 0.0))
    per_m, per_rev = config.encoders.cart_counts_per_m, config.encoders.pendulum_counts_per_rev
    dt_us = round(1e6 / config.sampling.rate_hz)
    status = ST_ARMED | ST_WATCHDOG_ACTIVE | ST_LOCKSTEP  # lockstep: no overrun trips under valgrind
    estimator, balance, limit = controls.estimator, controls.balance, config.drive.limit
    x, _v, th, _w = plant.state
    estimator.reset(cart_counts(x, per_m), pendulum_counts(th, per_rev))
    frames, drive = [], 0.0
    for i in range(count):
        x, _v, th, _w = plant.state
        cart, pendulum = cart_counts(x, per_m), pendulum_counts(th, per_rev)
        frames.append(encode(Telemetry(
            (i + 1) & 0xFFFF, 1_000_000 + i * dt_us, cart, pendulum, 0, 0, status, drive,
            math.nan, math.nan, 0,
        )))
        drive = max(-limit, min(limit, balance.update(*estimator.update(cart, pendulum, drive))))
        plant.step(drive, dt_us * 1e-6)
    return frames


class Replay:
    """A ControlCycle balancing Kestrel-1, fed frames over a socket pair, and its parts on their own.

    Each region is prepared (objects built, inputs computed) before it is timed; what is timed
    is a block function ``block(start, stop)`` run over all the frames.
    """

    def __init__(self, config: PoiseConfig, folder: str, frames: list[bytes]):
        self.config = config
        self.frames = frames
        self.telemetry = [m for f in frames for m in FrameDecoder(LinkStats()).feed(f)]
        self.recorder = Recorder(Path(folder) / "replay.db")
        self.recorder.start_run(RunMetadata(
            rig_id=config.rig.id, config_text="", software_version="bench", protocol_version="1",
            firmware_version="bench", drive_kind=config.drive.kind, mode_names=state_code_table(),
        ))
        self.cycle_end, self.peer = socket.socketpair()
        self.cycle_end.setblocking(False)
        self.peer.setblocking(False)
        self._designed = build_control_set(config)
        first = self.telemetry[0]
        self._designed.estimator.reset(first.cart_counts, first.pendulum_counts)  # as homing leaves it
        self.trips: list[str] = []
        self._finish: list[Callable[[], None]] = []

    def close(self) -> None:
        self.recorder.close()
        self.cycle_end.close()
        self.peer.close()

    def _controls(self) -> ControlSet:
        return copy.deepcopy(self._designed)

    def _balancing_supervisor(self) -> Supervisor:
        """A supervisor taken to BALANCE through its own commands and events (no swing-up)."""
        supervisor = Supervisor(self.config, clock=lambda: 0.0)
        supervisor.note_link(float(self.config.sampling.rate_hz), device_watchdog_active=True)
        supervisor.notify(Event.LINK_UP, "bench", 0.0)
        supervisor.execute("home", {}, "bench")
        supervisor.notify(Event.HOMING_DONE, "bench", 0.0)
        supervisor.execute("arm", {}, "bench")
        supervisor.on_sample(0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0, 0, float("nan"))  # held upright
        supervisor.execute("balance", {}, "bench")
        assert supervisor.machine.state is State.BALANCE
        return supervisor

    @staticmethod
    def _drain(sock: socket.socket) -> None:
        try:
            while sock.recv(65536):
                pass
        except BlockingIOError:
            pass

    def timed(self, block: Callable[[int, int], None], drain: socket.socket | None) -> float:
        """CPU seconds of ``block`` over all frames, the timer read once per BLOCK samples."""
        n, total, clock = len(self.frames), 0.0, time.thread_time
        for start in range(0, n, BLOCK):
            t = clock()
            block(start, min(n, start + BLOCK))
            total += clock() - t
            if drain is not None:
                self._drain(drain)
        return total

    def harness(self) -> tuple[Callable, socket.socket]:
        """The replay's own cost: writing the telemetry frames into the socket."""
        write, fd, frames = os.write, self.peer.fileno(), self.frames

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                write(fd, frames[i])

        return block, self.cycle_end

    def whole_cycle(self) -> tuple[Callable, socket.socket]:
        controls = self._controls()
        supervisor = self._balancing_supervisor()
        cycle = ControlCycle(
            supervisor, controls, Homing(controls.params, self.config.homing),
            put_sample=self.recorder.put_sample,
            on_trip=lambda trip, t_s: self.trips.append(f"{trip.name} at {t_s:.3f} s"),
            on_link_lost=self.trips.append,
            on_telemetry_resumed=lambda: None,
        )
        link = Link(self.cycle_end.fileno(), 500, time.monotonic, on_device_reset=print,
                    on_fault_report=print, on_write_error=print)
        loop = asyncio.new_event_loop()
        cycle.attach(link, loop)
        cycle.set_pacing(lockstep(supervisor.limits))  # as the frames' status bit says
        loop.remove_reader(cycle.fd)  # the replay calls the reader callback itself
        cycle.device_armed = True  # nothing to arm on a socket pair
        link.stream_started = True  # nor to configure: these frames are this link's stream
        # Enter BALANCE: bumpless reset from the measured state, gc off.
        cycle.apply(Transition(State.IDLE, State.BALANCE, Output.OFF, Output.CONTROL, "bench"))
        write, fd, frames, on_readable = os.write, self.peer.fileno(), self.frames, cycle.on_readable

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                write(fd, frames[i])
                on_readable()

        def finish() -> None:
            loop.close()
            state = supervisor.machine.state
            if state is not State.BALANCE or cycle.samples != len(frames):
                self.trips.append(f"replay ended in {state.name} after {cycle.samples} samples")

        self._finish.append(finish)
        return block, self.peer

    def decode(self) -> tuple[Callable, None]:
        feed, frames = FrameDecoder(LinkStats()).feed, self.frames

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                feed(frames[i])

        return block, None

    def estimates(self) -> list[tuple[float, float, float, float]]:
        update = self._controls().estimator.update
        states, applied = [], 0.0
        for tm in self.telemetry:
            states.append(update(tm.cart_counts, tm.pendulum_counts, applied))
            applied = tm.drive_applied
        return states

    def estimate(self) -> tuple[Callable, None]:
        update, telemetry = self._controls().estimator.update, self.telemetry

        def block(start: int, stop: int) -> None:
            applied = telemetry[start - 1].drive_applied if start else 0.0
            for i in range(start, stop):
                tm = telemetry[i]
                update(tm.cart_counts, tm.pendulum_counts, applied)
                applied = tm.drive_applied

        return block, None

    def _balance(self, states: list):
        controls = self._controls()
        controls.balance.reset(states[0], 0.0)
        return controls.window.has_fallen, controls.balance

    def drives(self, states: list) -> list[float]:
        _fallen, balance = self._balance(states)
        return [balance.update(*state) for state in states]

    def control(self, states: list) -> tuple[Callable, None]:
        has_fallen, balance = self._balance(states)
        update = balance.update

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                x, v, th, w = states[i]
                if not has_fallen(th):
                    balance.set_point_m = 0.0
                    update(x, v, th, w)

        return block, None

    def interlocks(self, states: list, drives: list) -> tuple[Callable, None]:
        on_sample, telemetry = self._balancing_supervisor().on_sample, self.telemetry

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                tm = telemetry[i]
                x, v, th, w = states[i]
                on_sample(tm.t_us * 1e-6, x, v, th, w, drives[i], tm.switches, tm.faults, tm.supply_v)

        return block, None

    def encode_and_write(self, drives: list) -> tuple[Callable, socket.socket]:
        write, fd, telemetry = os.write, self.cycle_end.fileno(), self.telemetry

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                write(fd, encode_drive(i & 0xFFFF, drives[i], telemetry[i].seq))

        return block, self.peer

    def record(self, states: list, drives: list) -> tuple[Callable, None]:
        put, telemetry = self.recorder.put_sample, self.telemetry

        def block(start: int, stop: int) -> None:
            for i in range(start, stop):
                tm = telemetry[i]
                x, v, th, w = states[i]
                put((tm.seq, tm.t_us, 0, tm.cart_counts, tm.pendulum_counts, tm.switches, tm.faults,
                     x, v, th, w, drives[i], drives[i], 5, 10.0))

        return block, None

    def bare_loop(self) -> tuple[Callable, socket.socket]:
        """The floor: read, decode, ``u = -K s`` on counts and differences, encode, write."""
        controls = self._controls()
        k0, k1, k2, k3 = (float(k) for k in controls.design.k)
        scaling = controls.estimator.scaling
        m_per_count, rad_per_count = scaling.cart_quantum_m, scaling.pendulum_quantum_rad
        rate = float(self.config.sampling.rate_hz)
        read, write, feed = os.read, os.write, FrameDecoder(LinkStats()).feed
        cycle_fd, peer_fd, frames = self.cycle_end.fileno(), self.peer.fileno(), self.frames
        previous = [0.0, 0.0]

        def block(start: int, stop: int) -> None:
            x0, th0 = previous
            for i in range(start, stop):
                write(peer_fd, frames[i])
                for tm in feed(read(cycle_fd, 65536)):
                    x = tm.cart_counts * m_per_count
                    th = tm.pendulum_counts * rad_per_count - math.pi
                    u = -(k0 * x + k1 * (x - x0) * rate + k2 * th + k3 * (th - th0) * rate)
                    x0, th0 = x, th
                    write(cycle_fd, encode_drive(i & 0xFFFF, u, tm.seq))
            previous[:] = x0, th0

        return block, self.peer

    def run(self, marked: bool = False) -> dict[str, float]:
        """CPU seconds of each region in REGIONS; ``marked`` brackets each with a callgrind dump."""
        states = self.estimates()
        drives = self.drives(states)
        prepare = {
            "harness": self.harness,
            "cycle": self.whole_cycle,
            "decode": self.decode,
            "estimate": self.estimate,
            "control": lambda: self.control(states),
            "interlocks": lambda: self.interlocks(states, drives),
            "encode+write": lambda: self.encode_and_write(drives),
            "record": lambda: self.record(states, drives),
            "bare loop": self.bare_loop,
        }
        # Everything is built before the first region and torn down after the last, and
        # automatic garbage collection is off throughout (as in the daemon while the drive
        # may move), so each region's count is its own blocks and nothing else.
        blocks = {name: prepare[name]() for name in REGIONS}
        seconds = {}
        gc.disable()
        for name in REGIONS:
            if marked:
                mark()  # callgrind: the counts up to here go to the previous region's dump
            seconds[name] = self.timed(*blocks[name])
        if marked:
            mark()
        gc.enable()
        for finish in self._finish:
            finish()
        return seconds


def replay_cpu_us(folder: str, samples: int, marked: bool = False) -> tuple[dict[str, float], list[str]]:
    """CPU microseconds per sample of each replay region (the cycle's without the harness)."""
    config = parse_config(config_text("kestrel-1.toml", folder, {}))
    replay = Replay(config, folder, balancing_frames(config, samples))
    gc.collect()
    gc.freeze()
    try:
        seconds = replay.run(marked)
    finally:
        replay.close()
    return without_harness({name: s * 1e6 / samples for name, s in seconds.items()}), replay.trips


def without_harness(per_sample: dict[str, float]) -> dict[str, float]:
    """Take the replay's own cost (writing telemetry into the socket) out of the regions that include it."""
    harness = per_sample.pop("harness")
    per_sample["cycle"] -= harness
    per_sample["bare loop"] -= harness
    return per_sample


def print_breakdown(title: str, figures: dict[str, float], unit: str, digits: int) -> None:
    stages = {name: value for name, value in figures.items() if name not in ("cycle", "bare loop")}
    print(title)
    print(f"   whole cycle (read .. record)  {figures['cycle']:10.{digits}f} {unit}")
    for name, value in stages.items():
        print(f"   {name:<28}  {value:10.{digits}f} {unit}")
    print(f"   {'glue (whole - stages)':<28}  {figures['cycle'] - sum(stages.values()):10.{digits}f} {unit}")
    bare = figures["bare loop"]
    print(f"   for scale, the bare loop      {bare:10.{digits}f} {unit}  (read, decode, u = -K s, encode,"
          f" write; the whole cycle is {figures['cycle'] / bare:.1f}x this)")


def callgrind_instructions(samples: int) -> tuple[dict[str, float], list[str]]:
    """Instructions per sample of each replay region, counted by callgrind in a child process."""
    totals, stdout = region_instructions([__file__, "--replay", str(samples)], len(REGIONS))
    trips = [line for line in stdout.splitlines() if line.startswith("trip:")]
    return without_harness({name: total / samples for name, total in zip(REGIONS, totals)}), trips


# ---------------------------------------------------------------------- 3. latency


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
    parser.add_argument("--seconds", type=float, default=5.0, help="balance / idle time for parts 1 and 3")
    parser.add_argument("--samples", type=int, default=5000, help="samples replayed in part 2")
    parser.add_argument("--callgrind", type=int, metavar="N", help="only: instructions per sample over N samples")
    parser.add_argument("--replay", type=int, metavar="N", help=argparse.SUPPRESS)  # the callgrind child
    args = parser.parse_args()
    if args.replay:
        with tempfile.TemporaryDirectory() as folder:
            _figures, trips = replay_cpu_us(folder, args.replay, marked=True)
        for trip in trips:
            print(f"trip: {trip}")
        return
    if args.callgrind:
        figures, trips = callgrind_instructions(args.callgrind)
        print_breakdown(f"instructions per sample (callgrind, Kestrel-1 balancing replay, "
                        f"{args.callgrind} samples):", figures, "", 0)
        for trip in trips:
            print(f"   ! {trip}")
        return
    print(f"bench_cycle: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.2f}")
    with tempfile.TemporaryDirectory() as folder:
        compute, stages = asyncio.run(balancing_in_lockstep(folder, args.seconds))
    print("1. in-loop compute per sample, wall clock (Kestrel-1 balancing, lockstep over a pty):")
    print(f"   decode+estimate+control+interlocks+encode  median {compute['p50']:.2f} us  "
          f"p99 {compute['p99']:.2f} us")
    for name, figures in stages.items():
        print(f"   {name:<10} median {figures['p50']:7.2f} us  p99 {figures['p99']:7.2f} us")
    with tempfile.TemporaryDirectory() as folder:
        figures, trips = replay_cpu_us(folder, args.samples)
    print_breakdown(f"2. CPU per sample (thread_time; Kestrel-1 balancing replay, {args.samples} samples):",
                    figures, "us", 2)
    for trip in trips:
        print(f"   ! {trip}")
    with tempfile.TemporaryDirectory() as folder:
        latency, samples, missed = asyncio.run(latency_over_pty(folder, args.seconds))
    print("3. read->write latency (Wren-2 at 1 kHz, simulator in real time in another process):")
    print(f"   median {latency['p50']:.1f} us  p99 {latency['p99']:.1f} us  max {latency['max']:.1f} us"
          f"  ({samples} samples answered, {missed} overtaken by a newer one)")


if __name__ == "__main__":
    main()
