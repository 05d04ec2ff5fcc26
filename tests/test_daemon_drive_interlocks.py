"""Track and drive interlocks tripped on the simulated rig over a real pty, in lockstep.

- The stopping-distance check, with the default settings of the demo rig: a
  hostile excitation (a step far stronger than the hold loop, which the daemon
  refuses as a command, swapped in for one it accepts) drives the cart
  toward the end; the trip's category 1 stop halts it within the distance the
  check predicted, before the limit switch.
- Drive saturation held beyond its time (a step at the drive limit).
- A dead cart encoder (the simulator's CartEncoderDead fault) under a
  sustained drive: the encoder check (encoder.cart_dead) switches the drive
  off within a few samples, long before the drive plausibility time.
- Supply voltage out of range: a rig that measures its supply sags below it.

For each: the right reason latched, the drive in the next frame the device
received (zero, or for a controlled stop the ramp's and then zero), the trip
stored in the run store, and a reset that leaves the rig idle and disarmed.
The scenario configs with shortened times are scenarios of our own.
"""

from __future__ import annotations

import subprocess
import sys

import pytest
from test_daemon_support import (
    check_drive_off_trip,
    drives_after_trip,
    execute_when_still,
    homed_and_ready,
    latched,
    recorded_samples,
    reset_to_idle,
    run_for,
    running_service,
    stored_trips,
    wait_for,
)

from daemon.control.excitation import Excitation
from daemon.supervisor import Output, State
from protocol import CAP_SUPPLY_VOLTAGE, SW_END_STOP, SW_LIMIT_NEG, SW_LIMIT_POS
from sim_device.faults import CartEncoderDead, SupplySag

KESTREL_SWITCH_M = 0.45 - 0.03  # half the 0.90 m track, less the switch inset


async def hostile_step(service, volts: float) -> None:
    """Run a 5 s step excitation of ``volts`` from READY.

    The daemon refuses a step its model predicts to take the cart off the track, and these are
    such steps. The interlocks are there for motion that is hostile anyway (a model that is
    wrong, a fault), so a step the daemon accepts is started and its signal swapped for this one.
    """
    await execute_when_still(service, "excite", {"kind": "step", "duration_s": 5.0})
    service.cycle.modes.excitation = Excitation("step", volts, 5.0)


async def test_a_stopping_distance_trip_with_default_settings_stops_before_the_limit_switch(tmp_path):
    async with running_service(tmp_path) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        # 2 V on top of the hold loop, which asks for at most 2 m/s^2 against it: the cart
        # accelerates toward +x at about 5 m/s^2 until the check sees it cannot stop in time.
        await hostile_step(service, 2.0)
        await wait_for(service, State.FAULT)
        assert latched(service) == ["track.stopping_distance"]
        trip = service.supervisor.machine.faults[0].values
        assert trip["v_mps"] > 0.5
        assert service.supervisor.machine.output is Output.RAMP
        await run_for(service, 2.0)
        assert service.supervisor.machine.output is Output.OFF
        assert abs(service.rig.state[1]) < 0.01
        samples = recorded_samples(service)
        excite_from = next(i for i, row in enumerate(samples) if row["mode"] == State.EXCITE)
        samples = samples[excite_from:]  # homing before it runs onto the switches on purpose
        assert {row["mode"] for row in samples} == {State.EXCITE, State.FAULT}
        furthest_m = max(row["x_m"] for row in samples)
        # The stop fits in the distance the check predicted, so the cart never reaches the switch.
        assert furthest_m - trip["x_m"] <= trip["needed_m"]
        assert service.rig.state[0] < KESTREL_SWITCH_M and furthest_m < KESTREL_SWITCH_M
        assert not any(row["switches"] & (SW_LIMIT_NEG | SW_LIMIT_POS | SW_END_STOP) for row in samples)
        assert [stored["name"] for stored in await stored_trips(service)] == ["track.stopping_distance"]
        await reset_to_idle(service)


async def test_drive_saturated_beyond_its_time_starts_a_controlled_stop(tmp_path):
    # Our scenario: Kestrel-1 started low, its drive limited to 4 V, and a step at that limit. The
    # command stays saturated while the back-EMF holds the cart near 0.5 m/s; 0.3 s of it is
    # allowed here, over well before the cart nears the end of the track. At 4 V the drive brakes
    # at 10.4 m/s^2 or more, so the stop's deceleration is derived as 5.09 m/s^2.
    async with running_service(
        tmp_path, edits={"limit": "4.0"}, extra="[interlocks]\nsaturation_time_s = 0.3\n"
    ) as service:
        service.start_recording("test")
        await homed_and_ready(service)
        await hostile_step(service, 4.0)
        await wait_for(service, State.FAULT)
        assert latched(service) == ["drive.saturation"]
        fault = service.supervisor.machine.faults[0]
        assert fault.values["held_s"] > 0.3
        # A category 1 stop: a ramp from the cart's speed, whose drive falls from the next frame on
        # (on a voltage drive it starts by holding the speed against the back-EMF), then drive off.
        ramp = service.supervisor.machine.ramp
        assert service.supervisor.machine.output is Output.RAMP and ramp.v0_mps > 0.3
        await run_for(service, 0.05)
        drives = drives_after_trip(service, "drive.saturation")
        assert len(drives) > 10 and all(later < drives[0] for later in drives[5:])
        await run_for(service, 2.0)
        assert service.supervisor.machine.output is Output.OFF
        assert service.cycle.last_drive == 0.0
        assert service.rig.device.armed is False  # the device was sent its Stop at the ramp's end
        assert abs(service.rig.state[1]) < 0.01
        trips = await stored_trips(service)
        assert [trip["name"] for trip in trips] == ["drive.saturation"]
        assert trips[0]["rx_frames"] and trips[0]["tx_frames"]
        await reset_to_idle(service)


async def test_drive_without_cart_motion_from_a_dead_cart_encoder_switches_the_drive_off(tmp_path):
    # The cart encoder stops counting as a 7 V step starts (above the 6 V plausibility threshold,
    # 0.2 s allowed here, our scenario); the encoder check sees it first.
    async with running_service(tmp_path, extra="[interlocks]\nstall_time_s = 0.2\n") as service:
        service.start_recording("test")
        await homed_and_ready(service)
        service.rig.schedule_fault(service.rig.sim_time_s, CartEncoderDead())
        await run_for(service, 0.05)
        await hostile_step(service, 7.0)
        await wait_for(service, State.FAULT)
        await check_drive_off_trip(service, "encoder.cart_dead")
        fault = service.supervisor.machine.faults[0]
        assert abs(fault.values["model_m"]) > 0.001
        # 7 V from rest moves the cart 1 mm in about 12 ms: x = a t^2 / 2 with a near 22 m/s^2.
        assert fault.t_s - service.cycle.modes.excite_start_s < 0.05
        await reset_to_idle(service)


async def test_supply_sagging_below_its_range_switches_the_drive_off(tmp_path):
    supply_range = "[interlocks]\nsupply_min_v = 10.5\nsupply_max_v = 13.5\n"
    async with running_service(tmp_path, extra=supply_range, supply_v=12.0) as service:
        assert service.hello.capabilities & CAP_SUPPLY_VOLTAGE
        service.start_recording("test")
        await homed_and_ready(service)
        assert service.supervisor.supply_v == 12.0
        now_s = service.rig.sim_time_s
        service.rig.schedule_fault(now_s, SupplySag(9.0))
        service.rig.schedule_fault(now_s + 0.1, SupplySag(12.0))  # a brown-out that recovers
        await wait_for(service, State.FAULT)
        await check_drive_off_trip(service, "drive.supply")
        assert service.supervisor.machine.faults[0].values["supply_v"] == 9.0
        report = {row["name"]: row for row in service.supervisor.interlock_report()}
        assert report["drive.supply"]["state"] == "tripped"
        await run_for(service, 0.2)
        await reset_to_idle(service)


@pytest.mark.parametrize(
    ("option", "message"),
    [
        (["--supply-sag", "1:9"], "poise: --supply-sag: the rig measures no supply voltage (give --supply-v)"),
        (["--supply-v", "12", "--supply-sag", "1"], "poise: --supply-sag: expected AT_S:V, got '1'"),
        (["--supply-v", "0"], "poise: --supply-v: '0' must be between 0.1 and 1000"),
        (["--cart-encoder-dead-at", "soon"], "poise: --cart-encoder-dead-at: 'soon' is not a number"),
    ],
)
def test_malformed_supply_and_encoder_fault_options_of_poise_sim_get_one_line(option, message):
    result = subprocess.run(
        [sys.executable, "-m", "daemon.cli", "sim", "--pty", *option],
        capture_output=True, text=True, timeout=60, check=False,
    )
    assert (result.returncode, result.stderr.strip(), result.stdout) == (2, message, "")
