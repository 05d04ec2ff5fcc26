"""The supervisor of one rig: operator commands, per-sample interlocks, status snapshots.

This is the object the control API serves (``execute`` and ``status``) and the
control cycle feeds (``on_sample`` once per telemetry frame, ``trip`` for trips
found elsewhere, ``notify`` for link and controller events). It does no I/O;
time comes from the injected ``clock`` (commands) or is passed in (samples).

The control cycle reads :attr:`Supervisor.machine` ``.output`` after
``on_sample``: ``CONTROL`` -> the active mode's controller, ``RAMP`` -> follow
``machine.ramp.velocity_setpoint(t_s)``, ``OFF`` -> zero drive in the next frame.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from daemon.config import PoiseConfig
from daemon.errors import CommandRefused
from daemon.supervisor.interlocks import (
    Action,
    Checks,
    InterlockLimits,
    SampleInterlocks,
    Trip,
    stopping_distance_m,
)
from daemon.supervisor.fault_hints import fault_hint
from daemon.supervisor.machine import LogEntry, Output, StateMachine
from daemon.supervisor.prechecks import MOTION_COMMANDS, Health, PrecheckLimits, prearm_failures
from daemon.supervisor.states import (
    COMMAND_NAMES,
    LATCHED_STATES,
    Command,
    Event,
    State,
    suggested_command,
)
from protocol.messages import SW_ESTOP_BUTTON

_ALL_CHECKS = Checks.TRACK | Checks.SWITCHES | Checks.MOTION | Checks.PENDULUM_RATE

#: Per-sample checks by state; the rig's e-stop and fault flags are checked in every state.
CHECKS_BY_STATE: dict[State, Checks] = {
    State.DISCONNECTED: Checks.NONE,
    State.IDLE: Checks.NONE,
    State.HOMING: Checks.MOTION | Checks.PENDULUM_RATE,  # position unknown; runs onto the switches
    State.READY: _ALL_CHECKS,
    State.SWING_UP: Checks.TRACK | Checks.SWITCHES | Checks.MOTION,
    State.BALANCE: _ALL_CHECKS,
    State.STOPPING: _ALL_CHECKS,
    State.EXCITE: _ALL_CHECKS,
    State.FAULT: Checks.NONE,
    State.ESTOP: Checks.NONE,
}

# For the per-sample path: plain ints (IntFlag arithmetic is slow) and the enum member looked up
# once (a member read through its class costs as much as a dozen float operations).
_CHECK_MASKS = {state: int(mask) for state, mask in CHECKS_BY_STATE.items()}
_SWITCHES = int(Checks.SWITCHES)
_RAMP = Output.RAMP


class Supervisor:
    def __init__(
        self,
        config: PoiseConfig,
        clock: Callable[[], float],
        on_entry: Callable[[LogEntry], None] | None = None,
    ):
        """``clock`` gives seconds for operator commands; ``on_entry`` receives every log entry (recording)."""
        self.config = config
        self.clock = clock
        self.machine = StateMachine(config, on_entry)
        self.limits = InterlockLimits.from_config(config)
        self.interlocks = SampleInterlocks(self.limits)
        self.precheck_limits = PrecheckLimits.from_config(config)
        self.link_rate_hz = 0.0
        self.device_watchdog_active = False
        self.config_problems: tuple[str, ...] = ()
        self.drive = 0.0
        self.t_s = 0.0
        self.x_m = self.v_mps = self.theta_rad = self.omega_radps = 0.0
        self.switches = self.faults = 0
        self.supply_v = math.nan
        self._last_trip_name: str | None = None

    # ------------------------------------------------------------------ control API

    def execute(self, command: str, args: dict, source: str) -> dict:
        """Carry out an operator command; raises CommandRefused (nothing changed) when it does not apply."""
        if command not in COMMAND_NAMES:
            raise CommandRefused(
                f"{command}: unknown command (known: {', '.join(sorted(COMMAND_NAMES))})"
            )
        cmd = Command(command)
        m = self.machine
        t_s = self.clock()
        try:
            if cmd in MOTION_COMMANDS and m.allows(cmd):
                failures = prearm_failures(cmd, self.health(), self.precheck_limits)
                if failures:
                    raise CommandRefused(
                        f"{command}: pre-arm checks failed: " + "; ".join(map(str, failures))
                    )
            previous = m.state
            state = m.apply(
                cmd, source, t_s, args=args, v_mps=self.v_mps, cause=f"operator {command}"
            )
        except CommandRefused as refused:
            m.record(t_s, "refused", source, refused.reason)
            raise
        if state is not previous and state in (
            State.READY,
            State.SWING_UP,
            State.BALANCE,
            State.EXCITE,
        ):
            self.interlocks.reset_timers()
        return {"state": state.name, "previous": previous.name}

    def status(self) -> dict:
        m = self.machine
        return {
            "state": m.state.name,
            "allowed": m.allowed_commands(),
            "t_s": self.t_s,
            "x_m": self.x_m,
            "v_mps": self.v_mps,
            "theta_rad": self.theta_rad,
            "omega_radps": self.omega_radps,
            "drive": self.drive,
            "drive_limit": self.config.drive.limit,
            "setpoint_m": m.setpoint_m,
            "interlocks": self.interlock_report(),
            "homed": m.homed,
            "next": suggested_command(m.state, m.homed),
            "faults": [
                {
                    "name": f.name,
                    "reason": f"{f.name}: {f.reason}",
                    "t_s": f.t_s,
                    "values": f.values,
                    "hint": fault_hint(f.name),
                    "count": m.fault_counts[f.name],
                }
                for f in m.faults
            ],
            "events": [
                {"t_s": e.t_s, "kind": e.kind, "source": e.source, "text": e.text} for e in m.events
            ],
            "rig": {
                "id": self.config.rig.id,
                "name": self.config.rig.name,
                "track_length_m": self.config.track.length_m,
                "soft_limit_m": self.limits.soft_limit_m,
            },
        }

    # ------------------------------------------------------------------ control cycle

    def on_sample(
        self,
        t_s: float,
        x_m: float,
        v_mps: float,
        theta_rad: float,
        omega_radps: float,
        drive: float,
        switches: int,
        faults: int,
        supply_v: float,
    ) -> Trip | None:
        """Run the interlocks on one sample, after the controller; returns a new trip (to record) or None.

        A trip that persists over several samples is acted on once, when it first appears.
        """
        self.t_s = t_s
        self.x_m = x_m
        self.v_mps = v_mps
        self.theta_rad = theta_rad
        self.omega_radps = omega_radps
        self.drive = drive
        self.switches = switches
        self.faults = faults
        self.supply_v = supply_v
        m = self.machine
        m.button_held = switches & SW_ESTOP_BUTTON != 0
        checks = _CHECK_MASKS[m.state]
        if m.output is _RAMP:
            checks |= _SWITCHES
        found = self.interlocks.check(
            t_s, checks, x_m, v_mps, omega_radps, drive, switches, faults, supply_v
        )
        new_trip = None
        if found is None:
            self._last_trip_name = None
        elif found.name != self._last_trip_name:
            self._last_trip_name = found.name
            self.trip(found, t_s)
            new_trip = found
        if m.ramp is not None:
            self._follow_ramp(t_s, v_mps)
        return new_trip

    def trip(self, found: Trip, t_s: float, source: str = "interlock") -> None:
        """Act on a trip found by any interlock (per-sample, link watchdog, error rates).

        A trip already latched under the same name changes nothing and is not logged again.
        """
        m = self.machine
        if m.state in LATCHED_STATES and any(f.name == found.name for f in m.faults):
            return
        if found.estop:
            event = Event.ESTOP_BUTTON
            source = "rig-button"
        elif found.name == "device.reset":
            event = Event.DEVICE_RESET
        elif found.name.startswith("device."):
            event = Event.DEVICE_FAULT
        else:
            event = Event.INTERLOCK_TRIP
        self.notify(event, source, t_s, cause=found.reason, trip=found)

    def notify(
        self, event: Event, source: str, t_s: float, cause: str = "", trip: Trip | None = None
    ) -> bool:
        """Apply an internal event; one that does not apply in the present state is logged and ignored."""
        m = self.machine
        if not m.allows(event):
            m.record(
                t_s,
                "ignored",
                source,
                f"{event.value} in {m.state.name}" + (f": {cause}" if cause else ""),
            )
            return False
        m.apply(event, source, t_s, cause=cause, v_mps=self.v_mps, trip=trip)
        if event is Event.CAUGHT:
            self.interlocks.reset_timers()
        return True

    def note_link(self, rate_hz: float, device_watchdog_active: bool) -> None:
        """Link health for the pre-arm checks (the link layer calls this a few times a second)."""
        self.link_rate_hz = rate_hz
        self.device_watchdog_active = device_watchdog_active

    def health(self) -> Health:
        return Health(
            link_connected=self.machine.link_up,
            link_rate_hz=self.link_rate_hz,
            device_watchdog_active=self.device_watchdog_active,
            config_problems=self.config_problems,
            homed=self.machine.homed,
            x_m=self.x_m,
            theta_rad=self.theta_rad,
            omega_radps=self.omega_radps,
            switches=self.switches,
            faults=self.faults,
            supply_v=self.supply_v,
        )

    def interlock_report(self) -> list[dict]:
        """Each interlock with its present value, limit and margin (limit minus value)."""
        lim = self.limits
        checks = CHECKS_BY_STATE[self.machine.state]
        tripped = {f.name for f in self.machine.faults}
        room_m = lim.soft_limit_m - (self.x_m if self.v_mps >= 0.0 else -self.x_m)
        stop_needed_m = stopping_distance_m(self.v_mps, lim.stop_decel_mps2, lim.stop_lag_s)
        rows = [
            ("track.soft_limit", Checks.TRACK, abs(self.x_m), lim.soft_limit_m, "m"),
            ("track.stopping_distance", Checks.TRACK, stop_needed_m, room_m, "m"),
            ("cart.overspeed", Checks.MOTION, abs(self.v_mps), lim.max_cart_speed_mps, "m/s"),
            (
                "pendulum.overspeed",
                Checks.PENDULUM_RATE,
                abs(self.omega_radps),
                lim.max_pendulum_rate_radps,
                "rad/s",
            ),
            (
                "drive.saturation",
                Checks.MOTION,
                self.interlocks.saturated_for_s(self.t_s),
                lim.saturation_time_s,
                "s",
            ),
            (
                "drive.plausibility",
                Checks.MOTION,
                self.interlocks.stalled_for_s(self.t_s),
                lim.stall_time_s,
                "s",
            ),
        ]
        report = []
        for name, group, value, limit, unit in rows:
            state = "tripped" if name in tripped else "armed" if checks & group else "inactive"
            report.append(
                {
                    "name": name,
                    "state": state,
                    "value": value,
                    "limit": limit,
                    "margin": limit - value,
                    "unit": unit,
                }
            )
        if math.isfinite(lim.supply_min_v) or math.isfinite(lim.supply_max_v):
            above_min = self.supply_v - lim.supply_min_v
            below_max = lim.supply_max_v - self.supply_v
            limit, margin = (
                (lim.supply_min_v, above_min)
                if above_min <= below_max
                else (lim.supply_max_v, below_max)
            )
            state = (
                "tripped"
                if "drive.supply" in tripped
                else "inactive"
                if math.isnan(self.supply_v)
                else "armed"
            )
            report.append(
                {
                    "name": "drive.supply",
                    "state": state,
                    "value": self.supply_v,
                    "limit": limit,
                    "margin": margin,
                    "unit": "V",
                }
            )
        return report

    # ------------------------------------------------------------------ internals

    def _follow_ramp(self, t_s: float, v_mps: float) -> None:
        ramp = self.machine.ramp
        if ramp.complete(t_s, v_mps):
            self.notify(
                Event.STOP_COMPLETE, "supervisor", t_s, cause=f"cart stopped ({v_mps:+.4f} m/s)"
            )
        elif ramp.overdue(t_s):
            overdue = Trip(
                "stop.overdue",
                Action.DRIVE_OFF,
                f"cart still at {v_mps:+.3f} m/s {ramp.timeout_s:g} s after the stop ramp ended",
                {"v_mps": v_mps, "ramp_s": ramp.duration_s, "timeout_s": ramp.timeout_s},
            )
            self.trip(overdue, t_s, source="supervisor")
