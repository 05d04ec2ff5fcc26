"""How the rig is paced, settled once at the handshake from what the device declared.

A rig paced by its own clock (real firmware, or the simulator in real time)
samples on its timer whatever the host does: the host must answer within the
overrun budget, and silence or a blocked event loop are judged on the wall
clock (``interlocks.link_timeout_ms``, ``interlocks.loop_stall_ms``). A
simulated rig in lockstep samples only when its last sample has been answered:
no answer is ever late, so the overrun and loop-stall checks have nothing to
judge, and silence means a dead simulator, judged on a wall-clock backstop of
``LOCKSTEP_SILENCE_S`` that a starved CI machine cannot reach (its device
watchdog runs on the rig's own clock, so it cannot trip on host starvation
either).

The safety checks take the :class:`Pacing` chosen here and never look at the
per-sample status bit; the cycle only checks that every Telemetry's ST_LOCKSTEP
bit agrees with it (a mismatch is a protocol error that stops the rig).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from daemon.supervisor import InterlockLimits
from protocol import CAP_LOCKSTEP, CAP_SIMULATED, ST_LOCKSTEP, DeviceHello

#: Wall-clock silence after which a lockstep rig counts as dead (it never waits that long).
LOCKSTEP_SILENCE_S = 2.0


class PacingRefused(Exception):
    """The device declares a pacing the host will not run (one line why)."""


@dataclass(frozen=True, slots=True)
class Pacing:
    lockstep: bool
    telemetry_status_bit: int  # what ST_LOCKSTEP must read in every Telemetry
    overrun_budget_us: float  # inf: never overruns
    silence_limit_s: float  # wall-clock silence that trips link.timeout
    stall_limit_s: float  # how late the watchdog's tick may run before loop.stall; inf: never

    @property
    def name(self) -> str:
        return "lockstep" if self.lockstep else "real time"


def real_time(limits: InterlockLimits) -> Pacing:
    return Pacing(False, 0, limits.overrun_budget_us, limits.link_timeout_s, limits.loop_stall_s)


def lockstep(limits: InterlockLimits) -> Pacing:
    silence_s = max(LOCKSTEP_SILENCE_S, limits.link_timeout_s)
    return Pacing(True, ST_LOCKSTEP, math.inf, silence_s, math.inf)


def pacing_for(hello: DeviceHello, limits: InterlockLimits) -> Pacing:
    """The pacing a device declares in its DeviceHello; PacingRefused if it makes no sense."""
    if not hello.capabilities & CAP_LOCKSTEP:
        return real_time(limits)
    if not hello.capabilities & CAP_SIMULATED:
        raise PacingRefused(
            f"device {hello.device_id!r} declares lockstep pacing (CAP_LOCKSTEP) but is not "
            "simulated (no CAP_SIMULATED): only a simulator may wait for the host"
        )
    return lockstep(limits)
