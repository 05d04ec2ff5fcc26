"""The supervisor as the control API and the control cycle see it: commands, samples, stops, status."""

from __future__ import annotations

import json
import math

import pytest

from daemon.config import demo_config_path, parse_config
from daemon.errors import CommandRefused
from daemon.supervisor import Action, Command, Event, Output, State, Supervisor, Trip
from daemon.supervisor.prechecks import Health, PrecheckLimits, prearm_failures
from protocol.messages import F_DRIVER, F_ESTOP, F_RESET, SW_END_STOP, SW_ESTOP_BUTTON, SW_LIMIT_NEG

HANGING = math.pi


class Rig:
    """A supervisor on a virtual clock, fed samples the way the control cycle will."""

    def __init__(self, extra: str = ""):
        self.t_s = 0.0
        self.config = parse_config(demo_config_path().read_text() + extra)
        self.sup = Supervisor(self.config, clock=lambda: self.t_s)

    def sample(self, x_m=0.0, v_mps=0.0, theta_rad=HANGING, omega_radps=0.0, drive=0.0, switches=0, faults=0,
               supply_v=math.nan, dt_s=0.002):  # fmt: skip
        """One sample; returns the trip it newly latched, if any (its decision is ``self.decided``)."""
        self.t_s += dt_s
        self.decided = self.sup.on_sample(
            self.t_s, x_m, v_mps, theta_rad, omega_radps, drive, switches, faults, supply_v
        )
        return self.decided.trip

    def do(self, command: str, **args) -> dict:
        result, _transition = self.sup.execute(command, args, "api")
        return result

    def connect(self) -> None:
        self.sup.notify(Event.LINK_UP, "link", self.t_s)
        self.sup.note_link(rate_hz=500.0, device_watchdog_active=True)
        self.sample()

    def speed_up(self, v_mps: float, theta_rad: float = 0.0) -> None:
        """Bring the cart to ``v_mps`` in steps the drive could give (the encoder checks judge every
        sample), with the pendulum turning at 1 rad/s, so a still reading never has to balance the
        cart's motion."""
        v = self.sup.v_mps
        while v != v_mps:
            v = min(v + 0.1, v_mps) if v_mps > v else max(v - 0.1, v_mps)
            self.sample(v_mps=v, theta_rad=theta_rad, omega_radps=1.0)

    def balancing(self) -> None:
        self.connect()
        self.do("home")
        self.sup.notify(Event.HOMING_DONE, "control", self.t_s)
        self.do("arm")
        self.do("swing_up")
        self.sup.notify(Event.CAUGHT, "control", self.t_s)
        self.sample(theta_rad=0.01)
        assert self.sup.machine.state is State.BALANCE


def test_a_whole_run_connect_home_arm_swing_up_catch_stop_ends_idle():
    rig = Rig()
    rig.balancing()
    assert rig.do("stop") == {"state": "STOPPING", "previous": "BALANCE"}
    ramp_v = 0.3
    while rig.sup.machine.state is State.STOPPING:
        assert rig.sup.machine.output is Output.RAMP
        ramp_v = rig.sup.machine.ramp.velocity_setpoint(rig.t_s)
        rig.sample(v_mps=ramp_v, theta_rad=0.0)
    assert rig.sup.machine.state is State.IDLE
    assert rig.sup.machine.output is Output.OFF
    texts = [e["text"] for e in rig.sup.status()["events"]]
    assert texts[-1].startswith("STOPPING -> IDLE on stop_complete: cart stopped")


def test_motion_commands_report_every_failed_prearm_check_at_once_and_change_nothing():
    rig = Rig()
    rig.connect()
    rig.sup.note_link(rate_hz=430.0, device_watchdog_active=False)
    with pytest.raises(CommandRefused) as refused:
        rig.do("arm")
    assert refused.value.reason == (
        "arm: pre-arm checks failed: link.rate: telemetry at 430.0 Hz, configured 500 Hz; "
        "device.watchdog: the rig's watchdog is not active; cart.homed: cart not homed"
    )
    assert rig.sup.machine.state is State.IDLE
    assert rig.sup.status()["events"][-1]["kind"] == "refused"


def test_every_prearm_check_can_fail_together_each_with_its_id():
    limits = PrecheckLimits.from_config(Rig().config)
    health = Health(
        link_connected=True, link_rate_hz=200.0, device_watchdog_active=False, config_problems=("no gains",),
        homed=True, x_m=0.4, theta_rad=2.0, omega_radps=1.0, switches=SW_ESTOP_BUTTON | SW_LIMIT_NEG | SW_END_STOP,
        faults=F_DRIVER, supply_v=math.nan,
    )  # fmt: skip
    ids = [f.id for f in prearm_failures(Command.SWING_UP, health, limits)]
    # The flag checks are the interlocks' own (flag_trips), so their ids are the trips' names.
    assert ids == ["link.rate", "device.watchdog", "config.valid", "estop.button", "device.driver",
                   "track.end_stop", "track.limit_switch", "track.soft_limit",
                   "pendulum.hanging_still"]  # fmt: skip
    assert prearm_failures(Command.SETPOINT, health, limits) == []


def test_swing_up_needs_the_pendulum_hanging_still_and_balance_needs_it_in_the_catch_window():
    rig = Rig()
    rig.connect()
    rig.do("home")
    rig.sup.notify(Event.HOMING_DONE, "control", rig.t_s)
    rig.do("arm")
    rig.sample(theta_rad=HANGING + 0.2, omega_radps=0.5)
    with pytest.raises(
        CommandRefused, match="pendulum.hanging_still: pendulum 11.5 deg from hanging"
    ):
        rig.do("swing_up")
    with pytest.raises(CommandRefused, match="pendulum.in_catch_window"):
        rig.do("balance")
    rig.sample(theta_rad=-0.1, omega_radps=0.2)  # held near upright by hand
    assert rig.do("balance")["state"] == "BALANCE"


def test_estop_during_balance_category_1_ramps_from_the_measured_speed_then_switches_off():
    # IEC 60204-1:2016, 9.2.2, stop category 1: controlled stop with power available, power removed
    # once stopped.
    rig = Rig()
    rig.balancing()
    rig.speed_up(0.45)
    rig.sup.execute("estop", {}, "dashboard")
    machine = rig.sup.machine
    assert (machine.state, machine.output) == (State.ESTOP, Output.RAMP)
    assert machine.ramp.velocity_setpoint(rig.t_s) == 0.45  # no jump in the set-point
    while machine.output is Output.RAMP:
        rig.sample(v_mps=machine.ramp.velocity_setpoint(rig.t_s), theta_rad=0.0, omega_radps=1.0)
    assert machine.output is Output.OFF
    assert machine.state is State.ESTOP  # still latched


def test_estop_category_0_switches_the_drive_off_at_once():
    # IEC 60204-1:2016, 9.2.2, stop category 0: immediate removal of power to the actuators.
    rig = Rig("\n[stop]\ncategory = 0\n")
    rig.balancing()
    rig.do("estop")
    assert (rig.sup.machine.state, rig.sup.machine.output) == (State.ESTOP, Output.OFF)


def test_rig_button_latches_estop_and_reset_waits_for_its_release_then_never_restarts_motion():
    # ISO 13850:2015: resetting the e-stop is only possible once the device is released, and the reset
    # alone must not restart the machine.
    rig = Rig("\n[stop]\ncategory = 0\n")
    rig.balancing()
    trip = rig.sample(switches=SW_ESTOP_BUTTON, faults=F_ESTOP)
    assert trip.name == "estop.button"
    assert rig.sup.machine.state is State.ESTOP
    assert rig.sup.status()["events"][-1]["source"] == "rig-button"
    assert rig.sample(switches=SW_ESTOP_BUTTON, faults=F_ESTOP) is None  # acted on once
    with pytest.raises(CommandRefused, match="e-stop button is still pressed"):
        rig.do("reset")
    rig.sample(faults=F_ESTOP)  # released; the rig's latch is cleared by the link layer on reset
    assert rig.do("reset") == {"state": "IDLE", "previous": "ESTOP"}
    assert rig.sup.machine.output is Output.OFF
    assert rig.sup.status()["faults"] == []
    assert rig.sample(faults=F_ESTOP) is None  # the same latch still showing does not re-trip
    with pytest.raises(CommandRefused, match="estop.button"):
        rig.do("arm")
    rig.sample()
    assert rig.do("arm")["state"] == "READY"


def test_a_track_trip_latches_fault_with_reason_and_values_once():
    rig = Rig()
    rig.balancing()
    trip = rig.sample(x_m=0.37, v_mps=0.0, theta_rad=0.0)
    assert trip.name == "track.soft_limit"
    assert rig.sup.machine.state is State.FAULT
    assert rig.sample(x_m=0.37, theta_rad=0.0) is None
    faults = rig.sup.status()["faults"]
    assert len(faults) == 1
    assert faults[0]["reason"].startswith("track.soft_limit: cart at +0.370 m")
    assert faults[0]["values"]["x_m"] == 0.37


def test_a_drive_off_trip_during_a_controlled_stop_switches_off_at_once():
    rig = Rig()
    rig.balancing()
    rig.speed_up(1.6)  # overspeed: controlled stop
    assert (rig.sup.machine.state, rig.sup.machine.output) == (State.FAULT, Output.RAMP)
    trip = rig.sample(v_mps=1.5, theta_rad=0.0, omega_radps=1.0, switches=SW_END_STOP)
    assert trip.name == "track.end_stop"
    assert rig.sup.machine.output is Output.OFF
    assert [f["reason"].split(":")[0] for f in rig.sup.status()["faults"]] == [
        "cart.overspeed",
        "track.end_stop",
    ]


def test_a_stop_that_does_not_slow_the_cart_becomes_a_drive_off_fault():
    rig = Rig()
    rig.balancing()
    rig.speed_up(0.2)
    rig.do("stop")
    for _ in range(1000):
        if rig.sup.machine.state is not State.STOPPING:
            break
        rig.sample(v_mps=0.2, theta_rad=0.0, omega_radps=1.0)
    assert (rig.sup.machine.state, rig.sup.machine.output) == (State.FAULT, Output.OFF)
    assert rig.sup.status()["faults"][-1]["reason"].startswith("stop.overdue")


def test_device_reset_while_idle_forgets_the_homing_and_latches_until_an_operator_reset():
    rig = Rig()
    rig.connect()
    rig.do("home")
    rig.sup.notify(Event.HOMING_DONE, "control", rig.t_s)
    assert rig.sample(faults=F_RESET).name == "device.reset"
    assert rig.sup.machine.state is State.FAULT
    assert not rig.sup.machine.homed
    for command in ("home", "arm"):  # ISO 13850: only a deliberate reset takes the rig back
        with pytest.raises(CommandRefused, match="fault latched"):
            rig.sup.execute(command, {}, "cli")
    rig.do("reset")
    assert rig.sup.machine.state is State.IDLE


def test_events_that_do_not_apply_are_logged_and_ignored():
    rig = Rig()
    rig.connect()
    assert rig.sup.notify(Event.CAUGHT, "control", rig.t_s) is None  # no transition
    assert rig.sup.machine.state is State.IDLE
    assert rig.sup.status()["events"][-1]["kind"] == "ignored"


def test_unknown_command_is_refused_naming_it():
    with pytest.raises(CommandRefused, match="^jump: unknown command"):
        Rig().sup.execute("jump", {}, "cli")


def test_status_is_json_able_and_carries_the_contract_keys():
    rig = Rig("\n[interlocks]\nsupply_min_v = 10.0\nsupply_max_v = 14.0\n")
    rig.balancing()
    rig.sample(x_m=0.1, v_mps=0.2, theta_rad=0.0, supply_v=12.5)
    status = json.loads(json.dumps(rig.sup.status()))
    for key in ("state", "allowed", "t_s", "x_m", "v_mps", "theta_rad", "omega_radps", "drive", "drive_limit",
                "setpoint_m", "interlocks", "faults", "events", "rig"):  # fmt: skip
        assert key in status, key
    assert status["state"] == "BALANCE"
    assert set(status["allowed"]) == {"setpoint", "stop", "estop"}
    rows = {row["name"]: row for row in status["interlocks"]}
    assert rows["track.soft_limit"] == {
        "name": "track.soft_limit", "state": "armed", "value": 0.1, "limit": pytest.approx(0.36),
        "margin": pytest.approx(0.26), "unit": "m",
    }  # fmt: skip
    assert rows["drive.supply"]["margin"] == pytest.approx(1.5)
    assert rows["drive.supply"]["limit"] == 14.0
    assert status["rig"]["soft_limit_m"] == pytest.approx(0.36)


def test_a_trip_that_goes_on_while_latched_is_latched_once():
    rig = Rig()
    rig.balancing()
    crc = Trip("link.crc", Action.DRIVE_OFF, "CRC failures above 5/s (burst 10)", {"total": 11.0})
    for _ in range(3):
        rig.sup.trip(crc, rig.t_s)
        rig.sample()
    rig.sup.trip(Trip("link.gaps", Action.DRIVE_OFF, "sequence gaps above 5/s", {}), rig.t_s)
    assert [fault.name for fault in rig.sup.machine.faults] == ["link.crc", "link.gaps"]
    assert rig.sup.machine.state is State.FAULT
