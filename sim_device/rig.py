"""A whole simulated rig, assembled and ready to run inside an asyncio event loop.

:class:`SimulatedRig` puts the plant, the sensors, the device firmware, a
clock, a transport and the fault plan together and is the API for whoever
owns the rig in-process (``poise sim``, the daemon's simulated mode, tests):

    rig = SimulatedRig(spec, PtyTransport(), lockstep=True, seed=7)
    rig.start()                      # inside a running loop; says hello
    print(rig.where)                 # the pty path to open with pyserial
    rig.schedule_impulse(2.0, pendulum_ns=0.05)
    ...
    rig.close()

Every method must be called from the thread running the rig's event loop
(use ``loop.call_soon_threadsafe`` from elsewhere).
"""

from __future__ import annotations

import asyncio
import math
from dataclasses import dataclass

from sim_device.clocks import LockstepClock, RealTimeClock, SampleClock
from sim_device.device import DeviceIdentity, SimulatedDevice
from sim_device.faults import (
    FaultEvent,
    FaultPlan,
    FaultSchedule,
    FaultyLine,
    Impulse,
    derived_seed,
)
from sim_device.plant import Plant, PlantParams, State
from sim_device.sensors import SensorParams, Sensors
from sim_device.transports import Transport

__all__ = ["RigSpec", "SimulatedRig"]

HANGING_AT_REST: State = (0.0, 0.0, math.pi, 0.0)
NO_FAULTS = FaultPlan()
DRAIN_POLL_S = 0.01


@dataclass(frozen=True)
class RigSpec:
    """Everything physical about a simulated rig: its mechanics, its sensors, its identity.

    ``max_integration_step_s`` bounds the plant's RK4 step: the device integrates each sample
    in as few sub-steps as keep every step at or below it (one per sample at 1 kHz).
    """

    plant: PlantParams
    sensors: SensorParams
    identity: DeviceIdentity
    max_integration_step_s: float = 1e-3

    def __post_init__(self) -> None:
        if not self.max_integration_step_s >= 1e-6:
            raise ValueError(
                f"max_integration_step_s must be >= 1e-6 s (got {self.max_integration_step_s!r})"
            )


class SimulatedRig:
    """One simulated rig on one transport.

    ``lockstep`` takes one sample per drive command (deterministic; real-time
    pacing resumes after ``lockstep_grace_s`` of host silence); otherwise the
    rig samples on the wall clock. ``seed`` fixes every random draw (sensor
    noise, jitter, line faults, switch chatter). ``uptime_us`` is the device clock's
    reading when the rig starts (time since its power-up).
    """

    def __init__(
        self,
        spec: RigSpec,
        transport: Transport,
        *,
        lockstep: bool = False,
        seed: int = 0,
        faults: FaultPlan = NO_FAULTS,
        lockstep_grace_s: float = 0.5,
        uptime_us: int = 0,
    ):
        self.spec = spec
        self.faults = faults
        if faults.line_faults:
            transport = FaultyLine(transport, faults.drop_rate, faults.corrupt_rate, seed)
        self.transport = transport
        self.clock: SampleClock = LockstepClock(lockstep_grace_s) if lockstep else RealTimeClock()
        state0 = HANGING_AT_REST
        if faults.initial_angle_rad is not None:
            state0 = (0.0, 0.0, faults.initial_angle_rad, 0.0)
        self.plant = Plant(spec.plant, state0)
        self.device = SimulatedDevice(
            spec.identity,
            self.plant,
            Sensors(spec.sensors, derived_seed(seed, "sensors")),
            transport,
            self.clock,
            FaultSchedule(faults, seed),
            max_step_us=round(spec.max_integration_step_s * 1e6),
            uptime_us=uptime_us,
        )

    def start(self, loop: asyncio.AbstractEventLoop | None = None) -> None:
        """Open the transport on ``loop`` (default: the running loop) and say hello."""
        self.device.start(loop or asyncio.get_running_loop())

    def close(self) -> None:
        self.device.close()

    async def stop_sampling(self, drain_timeout_s: float) -> None:
        """Take no more samples, then wait (up to ``drain_timeout_s``) until the host has read
        everything sent, so closing loses nothing a reading host would have had."""
        self.clock.stop()
        deadline = asyncio.get_running_loop().time() + drain_timeout_s
        while self.transport.unread_bytes() and asyncio.get_running_loop().time() < deadline:
            await asyncio.sleep(DRAIN_POLL_S)

    @property
    def where(self) -> str:
        """Where a host connects: a pty path, a ``socket://`` URL, or the pipe's name."""
        return self.transport.where

    @property
    def sim_time_s(self) -> float:
        """Simulated seconds since the rig started (not reset by a device reset)."""
        return self.device.sim_time_us * 1e-6

    @property
    def state(self) -> State:
        """The plant's true state ``(x_m, v_mps, theta_rad, omega_radps)``."""
        return self.plant.state

    def schedule_fault(self, at_sim_time_s: float, event: FaultEvent) -> None:
        """Inject ``event`` at the first sample at or after ``at_sim_time_s``."""
        self.device.schedule.add(at_sim_time_s, event)

    def schedule_impulse(self, at_sim_time_s: float, pendulum_ns: float = 0.0, cart_ns: float = 0.0) -> None:
        """Strike the pendulum (horizontally, at its centre of mass) and/or the cart later."""
        self.schedule_fault(at_sim_time_s, Impulse(pendulum_ns, cart_ns))

    def apply_impulse_now(self, pendulum_ns: float = 0.0, cart_ns: float = 0.0) -> None:
        """Strike the pendulum and/or the cart now (N s, +x positive)."""
        self.device.apply_fault(Impulse(pendulum_ns, cart_ns))

    def press_estop(self) -> None:
        self.device.press_estop()

    def release_estop(self) -> None:
        self.device.release_estop()

    def reset(self) -> None:
        """Reset the device now (as a brown-out would)."""
        self.device.reset()
