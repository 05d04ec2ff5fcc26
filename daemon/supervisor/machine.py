"""The supervisor state machine: applies operator commands and internal events.

Every change goes through :meth:`StateMachine.apply`, which looks the
(state, trigger) pair up in :data:`~daemon.supervisor.states.TRANSITIONS`,
checks the command's arguments, and only then changes anything. A pair not in
the table, or bad arguments, raise :class:`~daemon.errors.CommandRefused` with
the reason, and nothing changes. Each accepted transition is logged with its
cause and source.

Guards where the table names two targets:

- ``STOPPING --stop_complete-->`` SWING_UP when the stop followed a fall, the
  config says ``stop.after_fall = "retry"`` and retries remain; else IDLE.
- ``FAULT/ESTOP --reset-->`` IDLE when the link is up, DISCONNECTED when not.

Stops (IEC 60204-1): the machine's :attr:`output` says what drives the cart.
``CONTROL`` means the active mode's controller, ``RAMP`` a category 1 stop
following :attr:`ramp`, ``OFF`` zero drive (category 0, or the end of a
category 1 stop). The most severe request wins: a drive-off request during a
ramp switches the drive off at once; nothing turns OFF back into a ramp.

E-stop and faults latch. Only an operator ``reset`` clears them; it is refused
while a ramp is still running or the rig's e-stop button is still pressed
(ISO 13850: reset only after the device is released), and it leaves the rig
disarmed, so it never restarts motion by itself.
"""

from __future__ import annotations

import logging
import math
from collections import Counter, deque
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from daemon.control.excitation import EXCITE_KINDS
from daemon.errors import CommandRefused
from daemon.supervisor.decision import Output
from daemon.supervisor.interlocks import Action, Trip
from daemon.supervisor.states import (
    LATCHED_STATES,
    MOTION_STATES,
    TRANSITIONS,
    Command,
    Event,
    State,
    Trigger,
)
from daemon.supervisor.stop_ramp import StopRamp

if TYPE_CHECKING:
    from daemon.config import PoiseConfig

log = logging.getLogger("poise.supervisor")

EVENT_HISTORY = 20
MAX_EXCITE_DURATION_S = 600.0


@dataclass(frozen=True, slots=True)
class LogEntry:
    t_s: float
    kind: str  # "transition", "refused", "fault", "ignored"
    source: str
    text: str


@dataclass(frozen=True, slots=True)
class Fault:
    name: str
    reason: str
    t_s: float
    values: dict[str, float] = field(default_factory=dict)


#: Why a pair is refused, by state, when the table has no entry for it.
_STATE_HINTS = {
    State.DISCONNECTED: "rig not connected",
    State.IDLE: "rig is disarmed (arm first)",
    State.HOMING: "homing in progress (stop first)",
    State.READY: "rig is armed and holding",
    State.SWING_UP: "swing-up in progress (stop first)",
    State.BALANCE: "balancing (stop first)",
    State.STOPPING: "stopping",
    State.EXCITE: "excitation run in progress (stop first)",
    State.FAULT: "fault latched (reset first)",
    State.ESTOP: "e-stop latched (reset first)",
}


class StateMachine:
    """States, latches and stop ramp of one rig. Time is always passed in."""

    def __init__(self, config: PoiseConfig, on_entry: Callable[[LogEntry], None] | None = None):
        self.state = State.DISCONNECTED
        self.output = Output.OFF
        self.ramp: StopRamp | None = None
        self.homed = False
        self.link_up = False
        self.button_held = False  # the rig's e-stop button, as last measured
        self.setpoint_m = 0.0
        self.excite_args: dict[str, float | str] = {}
        self.faults: list[Fault] = []
        self.fault_counts: Counter[str] = Counter()  # how often each fault has latched since start
        self.events: deque[LogEntry] = deque(maxlen=EVENT_HISTORY)
        self.retries_left = 0
        self._after_stop = State.IDLE
        self._on_entry = on_entry
        self._stop = config.stop
        self._retries = config.catch.retries
        self._soft_limit_m = config.soft_limit_m
        self._drive_limit = config.drive.limit
        # sizes and checks excitation amplitudes on the plant model (numpy: imported for a machine
        # that runs, not for every importer of the supervisor package)
        from daemon.control.excitation_sizing import ExcitationSizing

        self._excitation = ExcitationSizing.from_config(config)
        self._estop_action = (
            Action.DRIVE_OFF if config.stop.category == 0 else Action.CONTROLLED_STOP
        )

    # ------------------------------------------------------------------ queries

    def allows(self, trigger: Trigger) -> bool:
        return (self.state, trigger) in TRANSITIONS

    def allowed_commands(self) -> list[str]:
        return [c.value for c in Command if (self.state, c) in TRANSITIONS]

    # ------------------------------------------------------------------ changes

    def apply(
        self,
        trigger: Trigger,
        source: str,
        t_s: float,
        *,
        cause: str = "",
        args: dict | None = None,
        v_mps: float = 0.0,
        trip: Trip | None = None,
    ) -> State:
        """Carry out ``trigger``; returns the new state or raises CommandRefused (nothing changed).

        ``v_mps`` is the measured cart velocity (a stop ramp starts from it);
        ``trip`` is the interlock trip behind an ``interlock_trip`` event.
        """
        previous = self.state
        targets = TRANSITIONS.get((previous, trigger))
        if targets is None:
            raise CommandRefused(
                f"{trigger.value}: not allowed in {previous.name}: {self._why_not(trigger)}"
            )
        checked = self._check_args(trigger, args or {})
        target = self._choose_target(trigger, targets)
        self._enter(previous, target, trigger, t_s, v_mps, trip, cause, checked)
        self.state = target
        text = f"{previous.name} -> {target.name} on {trigger.value}" + (
            f": {cause}" if cause else ""
        )
        self._record(LogEntry(t_s, "transition", source, text))
        return target

    def record(self, t_s: float, kind: str, source: str, text: str) -> None:
        """Log something that changed no state (a refusal, an ignored event)."""
        self._record(LogEntry(t_s, kind, source, text))

    # ------------------------------------------------------------------ internals

    def _why_not(self, trigger: Trigger) -> str:
        """Why ``trigger`` does not apply in the present state, in the operator's terms."""
        if trigger is Command.RESET:
            return "nothing to reset: no fault or e-stop is latched"
        if self.state is State.ESTOP and any(f.name == "estop.button" for f in self.faults):
            return "e-stop latched by the rig's button (release it, then reset)"
        return _STATE_HINTS[self.state]

    def _check_args(self, trigger: Trigger, args: dict) -> dict:
        if trigger is Command.SETPOINT:
            x_m = _number(args, "x_m", "setpoint")
            if abs(x_m) > self._soft_limit_m:
                raise CommandRefused(
                    f"setpoint: x_m={x_m:g} outside the soft limits ±{self._soft_limit_m:.3f} m"
                )
            return {"x_m": x_m}
        if trigger is Command.EXCITE:
            kind = args.get("kind")
            if kind not in EXCITE_KINDS:
                raise CommandRefused(
                    f"excite: kind must be one of {', '.join(EXCITE_KINDS)} (got {kind!r})"
                )
            duration_s = _number(args, "duration_s", "excite")
            if not 0.0 < duration_s <= MAX_EXCITE_DURATION_S:
                raise CommandRefused(
                    f"excite: duration_s must be in (0, {MAX_EXCITE_DURATION_S:g}] (got {duration_s:g})"
                )
            if args.get("amplitude") is None:  # left out: sized for the rig
                amplitude = self._excitation.default_amplitude(kind, duration_s, self.setpoint_m)
            else:
                amplitude = _number(args, "amplitude", "excite")
                if not 0.0 < amplitude <= self._drive_limit:
                    raise CommandRefused(
                        f"excite: amplitude must be in (0, {self._drive_limit:g}] (got {amplitude:g})"
                    )
                problem = self._excitation.problem(kind, amplitude, duration_s, self.setpoint_m)
                if problem is not None:
                    raise CommandRefused(problem)
            return {"kind": kind, "amplitude": amplitude, "duration_s": duration_s}
        if trigger is Command.RESET:
            if self.output is Output.RAMP:
                raise CommandRefused("reset: not yet: the controlled stop is still running")
            if self.state is State.ESTOP and self.button_held:
                raise CommandRefused(
                    "reset: the rig's e-stop button is still pressed: release it first"
                )
        return {}

    def _choose_target(self, trigger: Trigger, targets: tuple[State, ...]) -> State:
        if len(targets) == 1:
            return targets[0]
        if trigger is Command.RESET:
            return State.IDLE if self.link_up else State.DISCONNECTED
        return self._after_stop  # STOPPING --stop_complete-->

    def _enter(
        self,
        previous: State,
        target: State,
        trigger: Trigger,
        t_s: float,
        v_mps: float,
        trip: Trip | None,
        cause: str,
        args: dict,
    ) -> None:
        if trigger is Event.LINK_UP:
            self.link_up = True
        elif trigger is Event.LINK_DOWN:
            self.link_up = False
            self.homed = False  # the position count may not survive whatever broke the link
        elif trigger is Event.DEVICE_RESET:
            self.homed = False
        elif trigger is Event.HOMING_DONE:
            self.homed = True
        elif trigger is Command.SETPOINT:
            self.setpoint_m = args["x_m"]
        elif trigger is Command.EXCITE:
            self.excite_args = args
        elif trigger is Command.ARM:
            self.setpoint_m = 0.0
        elif trigger is Command.SWING_UP:
            self.retries_left = self._retries
        elif trigger is Command.RESET:
            self.faults.clear()

        if target in LATCHED_STATES:
            self._latch(trigger, t_s, v_mps, trip, cause)
        elif target is State.STOPPING:
            if trigger is Event.FALL:
                if self._stop.after_fall == "retry" and self.retries_left > 0:
                    self.retries_left -= 1
                    self._after_stop = State.SWING_UP
                else:
                    self._after_stop = State.IDLE
            else:
                self._after_stop = State.IDLE
            if previous is not State.STOPPING:
                self._start_ramp(t_s, v_mps)
        elif target in MOTION_STATES:
            self.output = Output.CONTROL
            self.ramp = None
        else:
            self.output = Output.OFF
            self.ramp = None

    def _latch(
        self, trigger: Trigger, t_s: float, v_mps: float, trip: Trip | None, cause: str
    ) -> None:
        if trigger is Event.STOP_COMPLETE:
            self._drive_off()
            return
        if trigger in (Event.LINK_UP, Command.RESET):
            return
        name = trip.name if trip is not None else trigger.value
        if self.state in LATCHED_STATES and any(fault.name == name for fault in self.faults):
            return  # latched for this reason already (a rate trip that goes on): nothing new
        action = self._action_for(trigger, trip)
        if trip is not None:
            self.faults.append(Fault(trip.name, trip.reason, t_s, dict(trip.values)))
        else:
            self.faults.append(Fault(name, cause or name, t_s))
        self.fault_counts[name] += 1
        if action is Action.DRIVE_OFF:
            self._drive_off()
        elif self.output is Output.CONTROL:
            self._start_ramp(t_s, v_mps)
        # already RAMP: keep the running ramp; already OFF: stays off (the most severe wins)

    def _action_for(self, trigger: Trigger, trip: Trip | None) -> Action:
        if trip is not None:
            return trip.action
        if trigger in (Command.ESTOP, Event.ESTOP_BUTTON):
            return self._estop_action
        return (
            Action.DRIVE_OFF
        )  # link lost, device fault or reset, homing failed: no trusted measurement

    def _start_ramp(self, t_s: float, v_mps: float) -> None:
        s = self._stop
        self.ramp = StopRamp(t_s, v_mps, s.decel_mps2, s.stopped_speed_mps, s.ramp_timeout_s)
        self.output = Output.RAMP

    def _drive_off(self) -> None:
        self.ramp = None
        self.output = Output.OFF

    def _record(self, entry: LogEntry) -> None:
        self.events.append(entry)
        log.info("%s [%s] %s", entry.kind, entry.source, entry.text)
        if self._on_entry is not None:
            self._on_entry(entry)


def _number(args: dict, name: str, command: str) -> float:
    value = args.get(name)
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise CommandRefused(f"{command}: {name} must be a finite number (got {value!r})")
    return float(value)
