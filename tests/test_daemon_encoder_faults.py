"""Encoder faults on the simulated rig over a real pty, in lockstep: what the interlocks make of them.

Every check of motion here reads the simulator's plant (the true cart), never
the encoder the fault corrupts: :class:`PlantTrace` keeps the plant's state
and the drive the device held over each sample period.

- A dead encoder (cart or pendulum) in each motion state (homing, swing-up,
  balance, a stop ramp) switches the drive off before the true cart has moved
  2 cm beyond where it would have coasted from the fault on (the bound of
  daemon/supervisor/encoder_checks.py).
- An encoder glitch switches the drive off in the sample it appears, in
  balance and during a stop ramp; the balance never acts on the glitched
  angle.
- Every stop, with or without a glitch, never adds speed: after the trip the
  true |v| rises by at most one sample's worth of the drive's full force (the
  command already applied when the trip is seen holds until the device's next
  sample), the drive pushes along the cart's motion in at most that one
  sample, and the drive is zero and the device disarmed within the configured
  stop time (ramp duration plus ``stop.ramp_timeout_s``).

The figures are of Kestrel-1 (configs/kestrel-1.toml), a rig of our own scenario;
fault sizes are the ones a bench tester measured against the daemon.
"""

from __future__ import annotations

from dataclasses import dataclass

import pytest
from test_daemon_support import homed_and_ready, run_for, running_service, wait_for

from daemon.runtime.session import swing_up_when_still
from daemon.supervisor import State
from sim_device.drive import cart_force, drive_gains
from sim_device.faults import CartEncoderDead, EncoderGlitch, PendulumEncoderDead

MOVED_AGAINST_DRIVE_M = 0.02  # the bound the dead-encoder checks must keep


@dataclass(frozen=True, slots=True)
class PlantSample:
    t_s: float  # simulated time at the end of the period
    x_m: float
    v_mps: float
    drive: float  # the command the device held over the period that ended here
    armed: bool


class PlantTrace:
    """The true plant after every sample period, read from the simulator's own plant."""

    def __init__(self, service):
        self.rows: list[PlantSample] = []
        device = service.rig.device
        plant = device.plant
        step = plant.step

        def step_and_keep(command: float, dt_s: float) -> None:
            step(command, dt_s)
            self.rows.append(PlantSample(
                (device.sim_time_us + round(dt_s * 1e6)) * 1e-6, plant.x_m, plant.v_mps, command, device.armed
            ))

        plant.step = step_and_keep  # the device steps its plant once a sample

    def since(self, t_s: float) -> list[PlantSample]:
        """The periods ending at ``t_s`` (the sample) and after."""
        return [row for row in self.rows if row.t_s >= t_s - 1e-9]


def one_sample_of_full_drive_mps(service) -> float:
    """How much speed the drive's full force gives the cart alone in one sample period."""
    params = service.cycle.controls.params
    gain, _damping = drive_gains(params.drive)
    return gain * params.drive.limit / params.moving_mass_kg / service.config.sampling.rate_hz


def moved_beyond_coasting_m(rows: list[PlantSample], upto_s: float) -> float:
    """The largest distance the true cart got from where it would have coasted, from ``rows[0]`` to ``upto_s``."""
    start = rows[0]
    return max(
        abs(row.x_m - start.x_m - start.v_mps * (row.t_s - start.t_s)) for row in rows if row.t_s <= upto_s
    )


def drive_off_time_s(rows: list[PlantSample]) -> float:
    """When the device first held zero drive, disarmed, for good (NaN if it never did)."""
    for i, row in enumerate(rows):
        if all(later.drive == 0.0 and not later.armed for later in rows[i:]):
            return row.t_s
    return float("nan")


def check_stop_never_adds_speed(service, trace: PlantTrace, trip_t_s: float, v0_mps: float) -> None:
    """The stop from ``trip_t_s``: no speed added, no push along the motion beyond one sample, off in time."""
    at_trip, *rows = trace.since(trip_t_s)  # the first period after the trip is the latency one
    drive = service.cycle.controls.params.drive
    tolerance = one_sample_of_full_drive_mps(service)
    assert max(abs(row.v_mps) for row in rows) <= abs(at_trip.v_mps) + tolerance
    pushing = [row for row in rows if row.v_mps != 0.0 and cart_force(drive, row.drive, row.v_mps) * row.v_mps > 0.0]
    assert len(pushing) <= 1, [(row.t_s, row.drive, row.v_mps) for row in pushing]
    stop = service.config.stop
    off_s = drive_off_time_s(rows)
    assert off_s - trip_t_s <= abs(v0_mps) / stop.decel_mps2 + stop.ramp_timeout_s
    assert service.rig.device.armed is False and service.rig.device.drive_output == 0.0


async def state_within(service, within_s: float, *states: State) -> State:
    """The state once it is one of ``states``, or whatever it is ``within_s`` of rig time from now."""
    deadline_s = service.cycle.t_s + within_s
    while service.supervisor.machine.state not in states and service.cycle.t_s < deadline_s:
        await run_for(service, 0.01)
    return service.supervisor.machine.state


def trip_time_s(service, name: str) -> float:
    faults = [fault for fault in service.supervisor.machine.faults if fault.name == name]
    assert faults, f"{name} not latched: {[f.name for f in service.supervisor.machine.faults]}"
    return faults[0].t_s


async def seeking(service) -> None:
    """Homing under way, the cart moving at its seek speed."""
    service.execute("home", {}, "api")
    await run_for(service, 0.5)
    assert service.supervisor.machine.state is State.HOMING


async def swinging(service) -> None:
    await homed_and_ready(service)
    await swing_up_when_still(service)
    await run_for(service, 1.0)
    assert service.supervisor.machine.state is State.SWING_UP


async def balancing(service) -> None:
    await homed_and_ready(service)
    await swing_up_when_still(service)
    assert await wait_for(service, State.BALANCE, State.FAULT, State.IDLE) is State.BALANCE
    await run_for(service, 1.0)


async def stopping(service) -> None:
    """A stop ramp under way: stopped while swinging up, the cart moving fast."""
    await homed_and_ready(service)
    await swing_up_when_still(service)
    await run_for(service, 1.0)
    while abs(service.supervisor.v_mps) < 0.3:  # catch the cart at speed
        await run_for(service, 0.002)
    service.execute("stop", {}, "api")
    assert service.supervisor.machine.state is State.STOPPING
    assert abs(service.supervisor.machine.ramp.v0_mps) >= 0.3
    await run_for(service, 0.01)


MOTION_STATES = {"homing": seeking, "swing-up": swinging, "balance": balancing, "stopping": stopping}
#: A reading that freezes while the encoder turns faster than the glitch bound allows is a glitch.
DEAD = {"cart": CartEncoderDead(), "pendulum": PendulumEncoderDead()}


@pytest.mark.parametrize("encoder", sorted(DEAD))
@pytest.mark.parametrize("motion", list(MOTION_STATES))
async def test_a_dead_encoder_switches_the_drive_off_before_the_cart_moves_2_cm_against_drive(
    tmp_path, encoder, motion
):
    async with running_service(tmp_path) as service:
        trace = PlantTrace(service)
        await MOTION_STATES[motion](service)
        fault_s = service.rig.sim_time_s
        service.rig.schedule_fault(fault_s, DEAD[encoder])
        assert await state_within(service, 3.0, State.FAULT) is State.FAULT
        [fault] = [f for f in service.supervisor.machine.faults if f.name.startswith("encoder.")]
        assert fault.name in (f"encoder.{encoder}_dead", f"encoder.{encoder}_glitch")
        assert fault.t_s >= fault_s
        await run_for(service, 0.05)
        rows = trace.since(fault_s)
        off_s = drive_off_time_s(rows)
        assert moved_beyond_coasting_m(rows, off_s) < MOVED_AGAINST_DRIVE_M
        assert service.rig.device.armed is False


GLITCHES = [
    pytest.param("balance", EncoderGlitch(600, "pendulum"), "encoder.pendulum_glitch", id="pendulum-600-balance"),
    pytest.param("balance", EncoderGlitch(200, "pendulum"), "encoder.pendulum_glitch", id="pendulum-200-balance"),
    pytest.param("balance", EncoderGlitch(20_000, "cart"), "encoder.cart_glitch", id="cart-20000-balance"),
    pytest.param("swing-up", EncoderGlitch(20_000, "cart"), "encoder.cart_glitch", id="cart-20000-swing-up"),
    pytest.param("stopping", EncoderGlitch(600, "pendulum"), "encoder.pendulum_glitch", id="pendulum-600-stopping"),
    pytest.param("stopping", EncoderGlitch(-20_000, "cart"), "encoder.cart_glitch", id="cart-20000-stopping"),
]


@pytest.mark.parametrize(("motion", "glitch", "name"), GLITCHES)
async def test_an_encoder_glitch_switches_the_drive_off_in_its_sample_and_the_stop_adds_no_speed(
    tmp_path, motion, glitch, name
):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        trace = PlantTrace(service)
        await MOTION_STATES[motion](service)
        glitch_s = service.rig.sim_time_s + 0.002
        service.rig.schedule_fault(glitch_s, glitch)
        assert await state_within(service, 1.0, State.FAULT) is State.FAULT
        await run_for(service, 0.1)
        tripped_s = trip_time_s(service, name)
        assert tripped_s == pytest.approx(glitch_s, abs=0.0021)  # the sample it appeared in
        check_stop_never_adds_speed(service, trace, tripped_s, 0.0)


async def test_a_controlled_stop_at_speed_brakes_from_its_first_command(tmp_path):
    async with running_service(tmp_path) as service:
        trace = PlantTrace(service)
        await stopping(service)
        ramp = service.supervisor.machine.ramp
        assert await state_within(service, 3.0, State.IDLE, State.FAULT) is State.IDLE
        await run_for(service, 0.05)
        # The operator's stop came between samples: the next sample is the first answered with it.
        next_sample_s = ramp.t0_s + 1.0 / service.config.sampling.rate_hz
        check_stop_never_adds_speed(service, trace, next_sample_s, ramp.v0_mps)
