"""Each interlock tripped on the simulated rig over a real pty, by fault injection or a hostile command.

For every trip: the right reason is latched, the command frames the device
received after it carry no drive (or, for a controlled stop, the ramp runs and
then the drive is off), the trip is stored in the run store with the last link
frames each way, and an operator reset leaves the rig idle and disarmed.
"""

from __future__ import annotations

import pytest
from test_daemon_support import (
    check_drive_off_trip,
    device_received,
    homed_and_ready,
    latched,
    reset_to_idle,
    run_for,
    running_service,
    stored_trips,
    wait_for,
)

from daemon.errors import CommandRefused
from daemon.runtime.embedded_sim import RIG_LINKS
from daemon.supervisor import Output, State
from protocol import Stop
from sim_device.faults import DriverFault, FaultPlan, Stall, StuckSwitch


async def test_stuck_limit_switch_trips_the_limit_switch_interlock_with_the_drive_off(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.schedule_fault(service.rig.sim_time_s, StuckSwitch("pos"))
        await wait_for(service, State.FAULT)
        await check_drive_off_trip(service, "track.limit_switch")


async def test_driver_fault_flag_trips_with_the_drive_off_and_reset_leaves_the_rig_idle(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.schedule_fault(service.rig.sim_time_s, DriverFault())
        await wait_for(service, State.FAULT)
        await check_drive_off_trip(service, "device.driver")
        await reset_to_idle(service)
        await run_for(service, 0.2)  # the device's cleared flag stays cleared: no new trip
        assert service.supervisor.machine.state is State.IDLE


async def test_device_reset_trips_device_reset_and_the_link_comes_back(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.reset()
        await wait_for(service, State.FAULT)
        assert latched(service) == ["device.reset"]
        assert not service.supervisor.machine.homed
        await run_for(service, 0.2)  # telemetry resumes after the link configures the device again
        trips = await stored_trips(service)
        assert [trip["name"] for trip in trips] == ["device.reset"]
        await reset_to_idle(service)


@pytest.mark.parametrize("link", RIG_LINKS)
async def test_stalled_device_trips_link_timeout_and_the_device_gets_a_stop(tmp_path, link):
    async with running_service(tmp_path, link=link) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.schedule_fault(service.rig.sim_time_s, Stall(duration_ms=1500))
        await wait_for(service, State.FAULT)
        assert latched(service) == ["link.timeout"]
        await wait_for(service, State.IDLE, State.FAULT)
        await run_for(service, 0.1)  # telemetry is back after the stall
        assert any(type(m) is Stop for m in device_received(service))
        assert [trip["name"] for trip in await stored_trips(service)] == ["link.timeout"]
        await reset_to_idle(service)


@pytest.mark.parametrize("link", RIG_LINKS)
async def test_cut_link_trips_link_lost(tmp_path, link):
    async with running_service(tmp_path, link=link) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.transport.close()  # the cable is pulled: the pty goes away
        await wait_for(service, State.FAULT)
        assert latched(service) == ["link.lost"]
        assert [trip["name"] for trip in await stored_trips(service)] == ["link.lost"]
        service.execute("reset", {}, "api")
        assert service.supervisor.machine.state is State.DISCONNECTED


@pytest.mark.realtime
async def test_corrupted_frames_above_the_allowed_rate_trip_link_crc(tmp_path):
    # The line garbles nothing until the rig is holding; then every second frame. In real time
    # (a lockstep rig would wait for the answer to a lost frame), with the default timeouts: the
    # CRC-rate trip needs about ten bad frames, while a link timeout would need fifteen in a row.
    async with running_service(
        tmp_path, faults=FaultPlan(corrupt_rate=1e-12), lockstep=False
    ) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.transport.corrupt_rate = 0.5
        await wait_for(service, State.FAULT)
        service.rig.transport.corrupt_rate = 0.0
        await check_drive_off_trip(service, "link.crc")


def shove(service, cart_ns: float, over_s: float = 0.016) -> None:
    """A blow of ``cart_ns`` on the cart, spread over ``over_s`` as a hand's is (one impulse a
    sample): all at once it would outrun any acceleration the drive can give, which the encoder
    glitch check takes for a miscount."""
    period_s = 1.0 / service.config.sampling.rate_hz
    pieces = round(over_s / period_s)
    start_s = service.rig.sim_time_s + period_s / 2  # each piece due at a sample of its own
    for k in range(pieces):
        service.rig.schedule_impulse(start_s + k * period_s, cart_ns=cart_ns / pieces)


async def test_overspeed_from_a_shove_on_the_cart_starts_a_controlled_stop(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        # The hanging pendulum takes part of a blow on the cart: the cart moves as 0.78 kg
        # (M + m - (m l)^2 / J_pivot), so 1.6 N s would give 2.05 m/s at once; spread over 16 ms
        # against the back-EMF's braking (about 30 m/s^2 at that speed) it still passes 1.5 m/s,
        # from which the stop fits in the room (0.33 of 0.36 m at the deceleration it counts on).
        shove(service, 1.6)
        await wait_for(service, State.FAULT)
        assert latched(service) == ["cart.overspeed"]
        assert service.supervisor.machine.output is Output.RAMP
        await run_for(service, 2.0)
        assert service.supervisor.machine.output is Output.OFF
        assert service.cycle.last_drive == 0.0
        assert abs(service.rig.state[1]) < 0.05
        await reset_to_idle(service)


async def test_hostile_set_point_near_the_end_plus_a_shove_trips_the_stopping_distance(tmp_path):
    async with running_service(tmp_path) as service:  # default stop deceleration
        service.start_recording("test")
        await homed_and_ready(service)
        service.execute("setpoint", {"x_m": 0.3}, "api")
        await run_for(service, 4.0)
        assert service.supervisor.machine.state is State.READY
        shove(service, 0.9)  # ~1 m/s toward the end 6 cm away
        await wait_for(service, State.FAULT)
        assert latched(service) == ["track.stopping_distance"]
        await run_for(service, 2.0)
        assert service.supervisor.machine.output is Output.OFF
        assert abs(service.rig.state[0]) < 0.45 - 0.03  # never reached the limit switch


async def test_rig_button_latches_estop_reset_refused_until_released(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.press_estop()
        await wait_for(service, State.ESTOP)
        assert latched(service) == ["estop.button"]
        assert service.rig.device.armed is False
        await run_for(service, 0.1)
        with pytest.raises(CommandRefused, match="button is still pressed"):
            service.execute("reset", {}, "api")
        service.rig.release_estop()
        await run_for(service, 0.05)
        await reset_to_idle(service)
        await run_for(service, 0.2)
        assert service.supervisor.machine.state is State.IDLE
