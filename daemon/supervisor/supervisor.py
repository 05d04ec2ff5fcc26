"""The supervisor of one rig: operator commands, per-sample interlocks, status snapshots.

The control cycle asks it once per telemetry frame (``on_sample``) and gets one
:class:`~daemon.supervisor.decision.Decision`: ``CONTROL`` -> the decision's
state's controller, ``RAMP`` -> the cart velocity loop on the decision's
``ramp_velocity_mps``, ``OFF`` -> zero drive in this very frame. Operator
commands (``execute``, the control API's target), trips found between samples
(``trip``) and link events (``notify``) each hand back the
:class:`~daemon.supervisor.decision.Transition` they made, and the caller
passes it to the same one transition handler the cycle uses (the cycle's
:meth:`apply`). It does no I/O; time comes from the injected ``clock``
(commands) or is passed in (samples).
"""

from __future__ import annotations

import math
from collections.abc import Callable

from daemon.config import PoiseConfig
from daemon.errors import CommandRefused
from daemon.operator_commands import MOTION_COMMANDS
from daemon.supervisor.decision import Decision, Output, Transition
from daemon.supervisor.encoder_checks import EncoderChecks
from daemon.supervisor.fault_hints import fault_hint
from daemon.supervisor.interlocks import (
    Action,
    Checks,
    InterlockLimits,
    SampleInterlocks,
    Trip,
    stopping_distance_m,
)
from daemon.supervisor.machine import LogEntry, StateMachine
from daemon.supervisor.prechecks import Health, PrecheckLimits, prearm_failures
from daemon.supervisor.states import (
    COMMAND_NAMES,
    LATCHED_STATES,
    Command,
    Event,
    State,
    suggested_command,
)
from protocol.messages import SW_ESTOP_BUTTON

_ALL_CHECKS = (
    Checks.TRACK | Checks.SWITCHES | Checks.MOTION | Checks.PENDULUM_RATE | Checks.ENCODERS
)

#: Per-sample checks by state; the rig's e-stop and fault flags are checked in every state.
#: A stop ramp (in STOPPING, or in FAULT or ESTOP after a category 1 trip) adds the limit
#: switches and the encoders to its state's checks.
CHECKS_BY_STATE: dict[State, Checks] = {
    State.DISCONNECTED: Checks.NONE,
    State.IDLE: Checks.NONE,
    # position unknown; runs onto the switches
    State.HOMING: Checks.MOTION | Checks.PENDULUM_RATE | Checks.ENCODERS,
    State.READY: _ALL_CHECKS,
    State.SWING_UP: Checks.TRACK | Checks.SWITCHES | Checks.MOTION | Checks.ENCODERS,
    State.BALANCE: _ALL_CHECKS,
    State.STOPPING: _ALL_CHECKS,
    State.EXCITE: _ALL_CHECKS,
    State.FAULT: Checks.NONE,
    State.ESTOP: Checks.NONE,
}

# For the per-sample path: plain ints (IntFlag arithmetic is slow) and the enum member looked up
# once (a member read through its class costs as much as a dozen float operations).
_CHECK_MASKS = {state: int(mask) for state, mask in CHECKS_BY_STATE.items()}
_RAMP_CHECKS = int(Checks.SWITCHES | Checks.ENCODERS)
_ENCODERS = int(Checks.ENCODERS)
_DRIVE_OFF = Action.DRIVE_OFF
_RAMP = Output.RAMP
#: Entering these starts a new controller: the sustained-condition timers start afresh.
_FRESH_TIMERS_STATES = frozenset({State.READY, State.SWING_UP, State.BALANCE, State.EXCITE})


class Supervisor:
    """One rig's supervisor. Every change hands back the :class:`Transition` it made (or None).

    Slotted: :meth:`on_sample` stores the sample's measurements here every sample.
    """

    __slots__ = (
        "_last_trip_name",
        "_steady",
        "clock",
        "config",
        "config_problems",
        "device_watchdog_active",
        "drive",
        "encoders",
        "faults",
        "interlocks",
        "limits",
        "link_rate_hz",
        "machine",
        "omega_radps",
        "precheck_limits",
        "supply_v",
        "switches",
        "t_s",
        "theta_rad",
        "v_mps",
        "x_m",
    )

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
        self.encoders = EncoderChecks.from_config(config)
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
        self._steady = self._steady_decision()

    # ------------------------------------------------------------------ control API

    def execute(self, command: str, args: dict, source: str) -> tuple[dict, Transition | None]:
        """Carry out an operator command: its result and the transition it made.

        Raises CommandRefused (nothing changed) when the command does not apply now.
        """
        if command not in COMMAND_NAMES:
            raise CommandRefused(
                f"{command}: unknown command (known: {', '.join(sorted(COMMAND_NAMES))})"
            )
        cmd = Command(command)
        m = self.machine
        t_s = self.clock()
        m.button_held = self.switches & SW_ESTOP_BUTTON != 0  # as last measured
        before = (m.state, m.output, m.setpoint_m)
        try:
            if cmd in MOTION_COMMANDS and m.allows(cmd):
                failures = prearm_failures(cmd, self.health(), self.precheck_limits)
                if failures:
                    raise CommandRefused(
                        f"{command}: pre-arm checks failed: " + "; ".join(map(str, failures))
                    )
            state = m.apply(
                cmd, source, t_s, args=args, v_mps=self.v_mps, cause=f"operator {command}"
            )
        except CommandRefused as refused:
            m.record(t_s, "refused", source, refused.reason)
            raise
        if state is not before[0] and state in _FRESH_TIMERS_STATES:
            self.interlocks.reset_timers()
        return {"state": state.name, "previous": before[0].name}, self._changed(before)

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
        drive_applied: float,
        switches: int,
        faults: int,
        supply_v: float,
        seen: tuple[Event, str] | None = None,
    ) -> Decision:
        """This sample's decision, from its raw measurements and the mode event seen in it, if any
        (``seen``: the event and what was seen).

        The interlocks run first, on the raw measurements (positions from the encoders,
        velocities by raw difference) and the drive the device says it applied over the last
        period; a trip that persists over several samples is acted on once, when it first
        appears. Then the mode event (caught, fall, homing or excitation ended), if one was
        seen in this sample and still applies. Then the stop ramp, if one runs.
        """
        self.t_s = t_s
        self.x_m = x_m
        self.v_mps = v_mps
        self.theta_rad = theta_rad
        self.omega_radps = omega_radps
        self.drive = drive_applied
        self.switches = switches
        self.faults = faults
        self.supply_v = supply_v
        m = self.machine
        before_state, before_output = m.state, m.output
        checks = _CHECK_MASKS[before_state]
        if before_output is _RAMP:
            checks |= _RAMP_CHECKS
        found = self.interlocks.check(
            t_s, checks, x_m, v_mps, omega_radps, drive_applied, switches, faults, supply_v
        )
        if checks & _ENCODERS:  # a lying encoder outranks what the other checks made of it
            encoder_trip = self.encoders.check(t_s, v_mps, theta_rad, omega_radps, drive_applied)
            if encoder_trip is not None and (found is None or found.action is not _DRIVE_OFF):
                found = encoder_trip
        else:
            self.encoders.pause()
        if found is None and seen is None and m.ramp is None:  # the common sample: no change
            self._last_trip_name = None
            return self._steady
        new_trip = None
        if found is None:
            self._last_trip_name = None
        elif found.name != self._last_trip_name:
            self._last_trip_name = found.name
            if self._latch(found, t_s, "interlock"):
                new_trip = found
        if seen is not None:
            self._apply_event(seen[0], "control", t_s, seen[1])
        ramp = m.ramp
        if ramp is not None:
            self._follow_ramp(t_s, v_mps)
            ramp = m.ramp
        ramp_v = 0.0 if ramp is None else ramp.follower_setpoint(t_s)
        if m.state is before_state and m.output is before_output and new_trip is None:
            if ramp is None:
                return self._steady
            return Decision(_RAMP, before_state, m.setpoint_m, ramp_v)
        transition = self._changed((before_state, before_output, m.setpoint_m))
        return Decision(m.output, m.state, m.setpoint_m, ramp_v, transition, new_trip)

    def trip(self, found: Trip, t_s: float, source: str = "interlock") -> Transition | None:
        """Act on a trip found outside the per-sample check (link watchdog, error rates, device).

        A trip already latched under the same name changes nothing and is not logged again.
        """
        m = self.machine
        before = (m.state, m.output, m.setpoint_m)
        self._latch(found, t_s, source)
        return self._changed(before)

    def notify(
        self, event: Event, source: str, t_s: float, cause: str = "", trip: Trip | None = None
    ) -> Transition | None:
        """Apply an internal event (link up or down, device reset); one that does not apply in the
        present state is logged and ignored. Returns the transition made, if any."""
        m = self.machine
        before = (m.state, m.output, m.setpoint_m)
        self._apply_event(event, source, t_s, cause, trip)
        return self._changed(before)

    def log(self, t_s: float, kind: str, source: str, text: str) -> None:
        """Log something that changed no state (the device refused a Stop, say)."""
        self.machine.record(t_s, kind, source, text)

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

    def _latch(self, found: Trip, t_s: float, source: str) -> bool:
        """Latch a trip; False if it was latched already under the same name (nothing new)."""
        m = self.machine
        if m.state in LATCHED_STATES and any(f.name == found.name for f in m.faults):
            return False
        if found.estop:
            event = Event.ESTOP_BUTTON
            source = "rig-button"
        elif found.name == "device.reset":
            event = Event.DEVICE_RESET
        elif found.name.startswith("device."):
            event = Event.DEVICE_FAULT
        else:
            event = Event.INTERLOCK_TRIP
        self._apply_event(event, source, t_s, found.reason, found)
        return True

    def _apply_event(
        self, event: Event, source: str, t_s: float, cause: str = "", trip: Trip | None = None
    ) -> None:
        m = self.machine
        if not m.allows(event):
            m.record(
                t_s, "ignored", source,
                f"{event.value} in {m.state.name}" + (f": {cause}" if cause else ""),
            )
            return
        m.apply(event, source, t_s, cause=cause, v_mps=self.v_mps, trip=trip)
        if event is Event.CAUGHT:
            self.interlocks.reset_timers()

    def _changed(self, before: tuple[State, Output, float]) -> Transition | None:
        """The transition from ``before`` (state, output, set-point) to now, if any; keeps the
        steady decision up to date."""
        m = self.machine
        state, output, setpoint_m = before
        if m.state is state and m.output is output:
            if m.setpoint_m != setpoint_m:
                self._steady = self._steady_decision()
            return None
        self._steady = self._steady_decision()
        entry = m.events[-1] if m.events else None
        excitation = None
        if m.state is State.EXCITE and state is not State.EXCITE:
            args = m.excite_args
            excitation = (str(args["kind"]), float(args["amplitude"]), float(args["duration_s"]))
        return Transition(
            state, m.state, output, m.output, entry.text if entry else "", excitation
        )

    def _steady_decision(self) -> Decision:
        m = self.machine
        return Decision(m.output, m.state, m.setpoint_m)

    def _follow_ramp(self, t_s: float, v_mps: float) -> None:
        ramp = self.machine.ramp
        if ramp.complete(t_s, v_mps):
            self._apply_event(
                Event.STOP_COMPLETE, "supervisor", t_s, cause=f"cart stopped ({v_mps:+.4f} m/s)"
            )
        elif ramp.overdue(t_s):
            overdue = Trip(
                "stop.overdue",
                Action.DRIVE_OFF,
                f"cart still at {v_mps:+.3f} m/s {ramp.timeout_s:g} s after the stop ramp ended",
                {"v_mps": v_mps, "ramp_s": ramp.duration_s, "timeout_s": ramp.timeout_s},
            )
            self._latch(overdue, t_s, "supervisor")
