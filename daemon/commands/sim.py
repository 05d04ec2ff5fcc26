"""`poise sim`: run a simulated rig on a pseudo-terminal or a loopback TCP port until stopped.

Every fault the rig latches (its watchdog when the host stops commanding it,
an injected driver fault, the e-stop button) is said on stderr with its
simulated time. Stopped (SIGINT, SIGTERM), it takes no more samples, lets the host read what
it has sent, and prints on stderr how many Telemetry frames it sent (in all,
and since its last accepted Configure: the stream the host last saw from seq 0).

The rig is built from a rig config (the demo rig by default): the same plant
parameters, encoder resolutions, sample rate and watchdog the daemon would use
with the real rig. Fault options inject faults at simulated times (seconds
since the simulator started) or at random with ``--seed``.
"""

from __future__ import annotations

import argparse
import math
import signal
import sys
from typing import TYPE_CHECKING

from daemon.commands import add_config_argument, config_path
from daemon.errors import OperatorError

if TYPE_CHECKING:
    from sim_device.faults import FaultEvent, FaultPlan

NAME = "sim"
# On SIGINT/SIGTERM the rig stops sampling and waits this long at most for the host to read what
# it has sent before closing the port.
DRAIN_TIMEOUT_S = 2.0
HELP = "run a simulated rig on a pty or a TCP port until Ctrl-C (prints where to connect)"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_argument(parser)
    where = parser.add_mutually_exclusive_group(required=True)
    where.add_argument("--pty", action="store_true", help="serve on a new pseudo-terminal")
    where.add_argument("--tcp", type=int, metavar="PORT", help="serve on 127.0.0.1:PORT (socket:// URL)")
    parser.add_argument("--lockstep", action="store_true",
                        help="one sample per drive command instead of wall-clock pacing")
    parser.add_argument("--seed", type=int, default=0, help="seed for every random draw (default 0)")
    sensors = parser.add_argument_group("sensor imperfections")
    sensors.add_argument("--encoder-noise-counts", metavar="SIGMA", default="0.5",
                         help="Gaussian noise on both encoders, standard deviation in counts")
    sensors.add_argument("--jitter-us", metavar="US", default="0",
                         help="sample-time jitter, standard deviation in microseconds")
    sensors.add_argument("--supply-v", metavar="V",
                         help="measure and report this supply voltage (default: not fitted)")
    faults = parser.add_argument_group("fault injection (times are simulated seconds since start)")
    faults.add_argument("--drop-rate", metavar="P", default="0", help="drop this fraction of sent frames")
    faults.add_argument("--corrupt-rate", metavar="P", default="0",
                        help="garble one byte in this fraction of sent frames")
    faults.add_argument("--stall", action="append", default=[], metavar="AT_S:DURATION_MS",
                        help="send nothing for DURATION_MS from AT_S (repeatable)")
    faults.add_argument("--reset-at", action="append", default=[], metavar="S",
                        help="reset the device at S (repeatable)")
    faults.add_argument("--glitch", action="append", default=[], metavar="AT_S:COUNTS[:cart]",
                        help="pendulum (or cart) encoder jumps by COUNTS at AT_S (repeatable)")
    faults.add_argument("--stuck-switch", choices=("neg", "pos"), help="this limit switch reads active throughout")
    faults.add_argument("--noisy-switch", metavar="neg|pos:P",
                        help="this limit switch reads wrong in a fraction P of samples")
    faults.add_argument("--driver-fault-at", action="append", default=[], metavar="S",
                        help="the motor driver reports a fault at S (repeatable)")
    faults.add_argument("--cart-encoder-dead-at", metavar="S",
                        help="the cart encoder stops counting at S (unplugged, or its belt slipped)")
    faults.add_argument("--pendulum-encoder-dead-at", metavar="S",
                        help="the pendulum encoder stops counting at S (unplugged, or its coupling slipped)")
    faults.add_argument("--supply-sag", action="append", default=[], metavar="AT_S:V",
                        help="the measured supply voltage drops to V at AT_S (needs --supply-v; repeatable)")
    faults.add_argument("--impulse", action="append", default=[], metavar="AT_S:NS",
                        help="horizontal impulse (N s, +x positive) at the pendulum's centre of mass")
    faults.add_argument("--cart-impulse", action="append", default=[], metavar="AT_S:NS",
                        help="horizontal impulse (N s) on the cart")
    faults.add_argument("--initial-angle-deg", metavar="D",
                        help="start the pendulum at D degrees (0 upright, 180 hanging)")


def _number(option: str, text: str, low: float = -math.inf, high: float = math.inf) -> float:
    try:
        value = float(text)
    except ValueError:
        raise OperatorError(f"{option}: {text!r} is not a number") from None
    if not math.isfinite(value):
        raise OperatorError(f"{option}: {text!r} is not a finite number")
    if not low <= value <= high:
        if high == math.inf:
            allowed = f">= {low:g}"
        elif low == -math.inf:
            allowed = f"<= {high:g}"
        else:
            allowed = f"between {low:g} and {high:g}"
        raise OperatorError(f"{option}: {text!r} must be {allowed}")
    return value


def _time(option: str, text: str) -> float:
    return _number(option, text, 0.0)


def _pair(option: str, text: str, shape: str) -> list[str]:
    parts = text.split(":")
    if len(parts) < 2 or not all(parts):
        raise OperatorError(f"{option}: expected {shape}, got {text!r}")
    return parts


def _count(option: str, text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise OperatorError(f"{option}: {text!r} is not a whole number of counts") from None


def fault_plan(args: argparse.Namespace) -> FaultPlan:
    """The :class:`FaultPlan` the fault options describe; OperatorError names a malformed option."""
    from sim_device.faults import (
        CartEncoderDead,
        DriverFault,
        EncoderGlitch,
        FaultPlan,
        Impulse,
        PendulumEncoderDead,
        Reset,
        Stall,
        StuckSwitch,
        SupplySag,
    )

    events: list[tuple[float, FaultEvent]] = []
    for text in args.stall:
        at, duration = _pair("--stall", text, "AT_S:DURATION_MS")[:2]
        events.append((_time("--stall", at), Stall(_number("--stall", duration, 0.0))))
    for text in args.reset_at:
        events.append((_time("--reset-at", text), Reset()))
    for text in args.glitch:
        parts = _pair("--glitch", text, "AT_S:COUNTS[:cart|pendulum]")
        if len(parts) > 3 or (len(parts) == 3 and parts[2] not in ("cart", "pendulum")):
            raise OperatorError(f"--glitch: expected AT_S:COUNTS[:cart|pendulum], got {text!r}")
        encoder = parts[2] if len(parts) == 3 else "pendulum"
        events.append((_time("--glitch", parts[0]), EncoderGlitch(_count("--glitch", parts[1]), encoder)))
    for text in args.driver_fault_at:
        events.append((_time("--driver-fault-at", text), DriverFault()))
    if args.cart_encoder_dead_at is not None:
        events.append((_time("--cart-encoder-dead-at", args.cart_encoder_dead_at), CartEncoderDead()))
    if args.pendulum_encoder_dead_at is not None:
        at_s = _time("--pendulum-encoder-dead-at", args.pendulum_encoder_dead_at)
        events.append((at_s, PendulumEncoderDead()))
    for text in args.supply_sag:
        parts = _pair("--supply-sag", text, "AT_S:V")
        if len(parts) != 2:
            raise OperatorError(f"--supply-sag: expected AT_S:V, got {text!r}")
        if args.supply_v is None:
            raise OperatorError("--supply-sag: the rig measures no supply voltage (give --supply-v)")
        events.append((_time("--supply-sag", parts[0]), SupplySag(_number("--supply-sag", parts[1], 0.0))))
    for option, texts, on_cart in (("--impulse", args.impulse, False), ("--cart-impulse", args.cart_impulse, True)):
        for text in texts:
            parts = _pair(option, text, "AT_S:NS")
            if len(parts) != 2:
                raise OperatorError(f"{option}: expected AT_S:NS, got {text!r}")
            size = _number(option, parts[1])
            impulse = Impulse(cart_ns=size) if on_cart else Impulse(pendulum_ns=size)
            events.append((_time(option, parts[0]), impulse))
    if args.stuck_switch:
        events.append((0.0, StuckSwitch(args.stuck_switch)))
    noisy_side, noisy_rate = None, 0.0
    if args.noisy_switch:
        parts = _pair("--noisy-switch", args.noisy_switch, "neg|pos:P")
        if len(parts) != 2 or parts[0] not in ("neg", "pos"):
            raise OperatorError(f"--noisy-switch: expected neg|pos:P, got {args.noisy_switch!r}")
        noisy_side, noisy_rate = parts[0], _number("--noisy-switch", parts[1], 0.0, 1.0)
    initial = None
    if args.initial_angle_deg is not None:
        initial = math.radians(_number("--initial-angle-deg", args.initial_angle_deg, -3600.0, 3600.0))
    return FaultPlan(
        events=tuple(events),
        drop_rate=_number("--drop-rate", args.drop_rate, 0.0, 1.0),
        corrupt_rate=_number("--corrupt-rate", args.corrupt_rate, 0.0, 1.0),
        noisy_switch=noisy_side,
        noisy_switch_rate=noisy_rate,
        initial_angle_rad=initial,
    )


def run(args: argparse.Namespace) -> int:
    import asyncio

    from daemon.config import load_config
    from daemon.config.plant import rig_spec
    from daemon.runtime import event_loop
    from protocol import FAULT_BIT_NAMES
    from sim_device.rig import SimulatedRig
    from sim_device.transports import PtyTransport, TcpTransport

    config = load_config(config_path(args))
    spec = rig_spec(
        config,
        encoder_noise_counts=_number("--encoder-noise-counts", args.encoder_noise_counts, 0.0, 1e6),
        jitter_us=_number("--jitter-us", args.jitter_us, 0.0, 1e6),
        supply_v=None if args.supply_v is None else _number("--supply-v", args.supply_v, 0.1, 1000.0),
    )
    plan = fault_plan(args)
    if args.tcp is not None and not 0 <= args.tcp <= 65535:
        raise OperatorError(f"--tcp: port {args.tcp} is not in 0..65535")
    transport = PtyTransport() if args.pty else TcpTransport(args.tcp)

    async def serve() -> None:
        loop = asyncio.get_running_loop()
        stopped = asyncio.Event()
        for signum in (signal.SIGINT, signal.SIGTERM):
            loop.add_signal_handler(signum, stopped.set)
        rig = SimulatedRig(spec, transport, lockstep=args.lockstep, seed=args.seed, faults=plan)

        def fault_latched(bit: int, detail: float) -> None:
            print(f"simulated rig latched {FAULT_BIT_NAMES.get(bit, hex(bit))} at "
                  f"{rig.sim_time_s:.3f} simulated seconds (detail {detail:g})",
                  file=sys.stderr, flush=True)

        rig.device.on_fault_latched = fault_latched
        try:
            rig.start(loop)
        except OSError as exc:
            raise OperatorError(f"--tcp: {exc.strerror}") from None
        pacing = "lockstep" if args.lockstep else "real time"
        print(
            f"simulated rig {spec.identity.device_id} ({pacing}, {spec.identity.sample_rate_hz} Hz) "
            f"ready: connect to {rig.where}",
            flush=True,
        )
        try:
            await stopped.wait()
            await rig.stop_sampling(DRAIN_TIMEOUT_S)
        finally:
            rig.close()
        device = rig.device
        print(
            f"simulated rig stopped after {rig.sim_time_s:.3f} simulated seconds; sent "
            f"{device.telemetry_sent} Telemetry frames, {device.stream_telemetry_sent} since its "
            f"last Configure; {rig.transport.tx_bytes_dropped} bytes dropped unread",
            file=sys.stderr,
        )

    event_loop.run(serve())  # timers to the microsecond: samples at even intervals
    return 0
