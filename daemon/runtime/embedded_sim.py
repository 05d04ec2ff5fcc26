"""The built-in simulated rig of ``poise run --sim`` and ``poise session --sim``, from the rig config.

The rig is the one `poise sim` builds from the same config (:func:`rig_spec`).
It runs in the daemon's own event loop. By default it sits on a
pseudo-terminal, so the daemon talks to it through pyserial and the port's file
descriptor exactly as it would to real hardware (same bytes, same timing model,
same watchdog); it can also sit on a loopback TCP port (pyserial's
``socket://`` path) or on a socket pair (no pyserial). The daemon reads and
writes a :class:`~daemon.link.Port` the same way whichever it is, and the
integration tests run over each.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Literal

from daemon.config import PoiseConfig
from daemon.config.plant import rig_spec
from daemon.link import Port, adopt_stream, open_port
from sim_device.faults import FaultPlan
from sim_device.rig import SimulatedRig
from sim_device.transports import PtyTransport, SocketPairTransport, TcpTransport, Transport

#: The links the built-in rig can sit on.
RigLink = Literal["pty", "tcp", "socket pair"]
RIG_LINKS: tuple[RigLink, ...] = ("pty", "tcp", "socket pair")

#: Encoder noise of the built-in rig, counts rms on top of quantisation: a real encoder's edges
#: jitter with vibration and its counts with electrical noise, and this is what the estimator's
#: published figures assume (daemon/control/estimation.py). It makes ``--seed`` matter.
BUILT_IN_NOISE_COUNTS = 0.5


@dataclass(frozen=True)
class SimOptions:
    """How to run the built-in rig: lockstep (deterministic, fast) or real time, and its faults.

    ``supply_v`` fits the rig with a supply voltage measurement reading that voltage;
    ``encoder_noise_counts`` is the Gaussian noise on both encoders (seeded by ``seed``);
    ``link`` is what the rig sits on; ``uptime_us`` is how long the rig's device had been
    powered up before the daemon met it (its Telemetry.t_us counts from power-up).
    """

    lockstep: bool = False
    seed: int = 0
    faults: FaultPlan = field(default_factory=FaultPlan)
    supply_v: float | None = None
    encoder_noise_counts: float = BUILT_IN_NOISE_COUNTS
    link: RigLink = "pty"
    uptime_us: int = 0


@dataclass(frozen=True)
class EmbeddedRig:
    """The running built-in rig and how the daemon opens a port to it (again after a loss)."""

    rig: SimulatedRig
    open_port: Callable[[], Port]


def start_embedded_rig(
    config: PoiseConfig, options: SimOptions, loop: asyncio.AbstractEventLoop
) -> EmbeddedRig:
    """Start the simulated rig on a fresh link of ``options.link`` in ``loop``."""
    transport: Transport
    if options.link == "socket pair":
        transport = pair = SocketPairTransport()
        opener = lambda: adopt_stream(pair.connect_host(), pair.where)
    else:
        transport = PtyTransport() if options.link == "pty" else TcpTransport(0)
        opener = lambda: open_port(rig.where)
    rig = SimulatedRig(
        rig_spec(config, encoder_noise_counts=options.encoder_noise_counts, supply_v=options.supply_v),
        transport,
        lockstep=options.lockstep,
        seed=options.seed,
        faults=options.faults,
        uptime_us=options.uptime_us,
    )
    rig.start(loop)
    return EmbeddedRig(rig, opener)
