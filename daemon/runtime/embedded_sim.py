"""The built-in simulated rig of ``poise run --sim`` and ``poise session --sim``, from the rig config.

The simulated rig runs in the daemon's own event loop on a pseudo-terminal, so
the daemon talks to it through pyserial and the port's file descriptor exactly
as it would to real hardware (same bytes, same timing model, same watchdog).
"""

from __future__ import annotations

import asyncio
from dataclasses import dataclass, field

from daemon.config import PoiseConfig, plant_params
from sim_device.device import DeviceIdentity
from sim_device.faults import FaultPlan
from sim_device.rig import RigSpec, SimulatedRig
from sim_device.sensors import SensorParams
from sim_device.transports import PtyTransport


@dataclass(frozen=True)
class SimOptions:
    """How to run the built-in rig: lockstep (deterministic, fast) or real time, and its faults."""

    lockstep: bool = False
    seed: int = 0
    faults: FaultPlan = field(default_factory=FaultPlan)


def rig_spec(config: PoiseConfig) -> RigSpec:
    """The simulated rig a config describes: its plant, its encoders and its identity."""
    return RigSpec(
        plant=plant_params(config),
        sensors=SensorParams(
            cart_counts_per_m=config.encoders.cart_counts_per_m,
            pendulum_counts_per_rev=config.encoders.pendulum_counts_per_rev,
        ),
        identity=DeviceIdentity(
            device_id=config.rig.id,
            sample_rate_hz=config.sampling.rate_hz,
            watchdog_ms=config.sampling.device_watchdog_ms,
        ),
    )


def start_embedded_rig(
    config: PoiseConfig, options: SimOptions, loop: asyncio.AbstractEventLoop
) -> SimulatedRig:
    """Start the simulated rig on a fresh pty in ``loop``; connect to ``rig.where``."""
    rig = SimulatedRig(
        rig_spec(config),
        PtyTransport(),
        lockstep=options.lockstep,
        seed=options.seed,
        faults=options.faults,
    )
    rig.start(loop)
    return rig
