"""The built-in simulated rig of ``poise run --sim`` and ``poise session --sim``, from the rig config.

The rig is the one `poise sim` builds from the same config (:func:`rig_spec`).
It runs in the daemon's own event loop on a pseudo-terminal, so
the daemon talks to it through pyserial and the port's file descriptor exactly
as it would to real hardware (same bytes, same timing model, same watchdog).
"""

from __future__ import annotations

import asyncio
from dataclasses import dataclass, field

from daemon.config import PoiseConfig
from daemon.config.plant import rig_spec
from sim_device.faults import FaultPlan
from sim_device.rig import SimulatedRig
from sim_device.transports import PtyTransport

#: Encoder noise of the built-in rig, counts rms on top of quantisation: a real encoder's edges
#: jitter with vibration and its counts with electrical noise, and this is what the estimator's
#: published figures assume (daemon/control/estimation.py). It makes ``--seed`` matter.
BUILT_IN_NOISE_COUNTS = 0.5


@dataclass(frozen=True)
class SimOptions:
    """How to run the built-in rig: lockstep (deterministic, fast) or real time, and its faults.

    ``supply_v`` fits the rig with a supply voltage measurement reading that voltage;
    ``encoder_noise_counts`` is the Gaussian noise on both encoders (seeded by ``seed``).
    """

    lockstep: bool = False
    seed: int = 0
    faults: FaultPlan = field(default_factory=FaultPlan)
    supply_v: float | None = None
    encoder_noise_counts: float = BUILT_IN_NOISE_COUNTS


def start_embedded_rig(
    config: PoiseConfig, options: SimOptions, loop: asyncio.AbstractEventLoop
) -> SimulatedRig:
    """Start the simulated rig on a fresh pty in ``loop``; connect to ``rig.where``."""
    rig = SimulatedRig(
        rig_spec(config, encoder_noise_counts=options.encoder_noise_counts, supply_v=options.supply_v),
        PtyTransport(),
        lockstep=options.lockstep,
        seed=options.seed,
        faults=options.faults,
    )
    rig.start(loop)
    return rig
