"""Supervisor states, the triggers that move between them, and the transition table.

A trigger is either an operator :class:`Command` or an internal :class:`Event`.
:data:`TRANSITIONS` lists every allowed (state, trigger) pair and the state(s) it
may lead to; any pair not in the table is refused and changes nothing. Where an
entry names more than one target, the machine picks one by a documented guard
(see :mod:`daemon.supervisor.machine`). The integer codes of :class:`State` are
what the recorder stores per sample; :func:`state_code_table` gives code -> name.
"""

from __future__ import annotations

from enum import Enum, IntEnum

from daemon.operator_commands import Command


class State(IntEnum):
    DISCONNECTED = 0
    IDLE = 1  # connected, disarmed
    HOMING = 2
    READY = 3  # armed, holding the cart at its set-point
    SWING_UP = 4
    BALANCE = 5
    STOPPING = 6  # controlled deceleration, then off
    EXCITE = 7  # identification run
    FAULT = 8  # latched until an operator reset
    ESTOP = 9  # latched until an operator reset


class Event(str, Enum):
    """Internal events reported by the link, the control cycle and the interlocks."""

    LINK_UP = "link_up"
    LINK_DOWN = "link_down"
    HOMING_DONE = "homing_done"
    HOMING_FAILED = "homing_failed"
    CAUGHT = "caught"
    FALL = "fall"
    STOP_COMPLETE = "stop_complete"
    EXCITE_DONE = "excite_done"
    INTERLOCK_TRIP = "interlock_trip"
    DEVICE_FAULT = "device_fault"
    DEVICE_RESET = "device_reset"
    ESTOP_BUTTON = "estop_button"


Trigger = Command | Event

#: States in which the drive may be powered by a controller (or a stop ramp).
MOTION_STATES = frozenset(
    {State.HOMING, State.READY, State.SWING_UP, State.BALANCE, State.STOPPING, State.EXCITE}
)
LATCHED_STATES = frozenset({State.FAULT, State.ESTOP})
CONNECTED_STATES = frozenset(State) - {State.DISCONNECTED}

S = State
C = Command
E = Event


def _build() -> dict[tuple[State, Trigger], tuple[State, ...]]:
    table: dict[tuple[State, Trigger], tuple[State, ...]] = {}

    def allow(states, trigger: Trigger, *targets: State) -> None:
        for state in states:
            table[(state, trigger)] = targets if targets else (state,)

    # E-stop is accepted everywhere (also again while latched: logged, nothing else changes).
    for state in State:
        table[(state, C.ESTOP)] = (S.ESTOP,)
        table[(state, E.ESTOP_BUTTON)] = (S.ESTOP,)
    allow([S.DISCONNECTED], E.LINK_UP, S.IDLE)
    allow([S.IDLE], E.LINK_DOWN, S.DISCONNECTED)
    # The rig holds F_RESET (its power-up, or a reset since): the machine forgets the homing, and
    # only a deliberate operator reset (ClearFaults) takes the rig into use.
    allow([S.IDLE], E.DEVICE_RESET, S.FAULT)
    allow([S.IDLE], C.ARM, S.READY)
    allow([S.IDLE], C.HOME, S.HOMING)
    allow([S.READY], C.DISARM, S.IDLE)
    allow([S.READY], C.SWING_UP, S.SWING_UP)
    allow([S.READY], C.BALANCE, S.BALANCE)
    allow([S.READY], C.EXCITE, S.EXCITE)
    allow([S.READY, S.BALANCE], C.SETPOINT)
    allow([S.HOMING], E.HOMING_DONE, S.IDLE)
    allow([S.HOMING], E.HOMING_FAILED, S.FAULT)
    allow([S.SWING_UP], E.CAUGHT, S.BALANCE)
    allow([S.BALANCE], E.FALL, S.STOPPING)
    allow([S.EXCITE], E.EXCITE_DONE, S.READY)
    # Operator stop: controlled deceleration, then IDLE (disarmed).
    allow([S.HOMING, S.READY, S.SWING_UP, S.BALANCE, S.EXCITE], C.STOP, S.STOPPING)
    allow([S.STOPPING], C.STOP)  # cancels a pending swing-up retry
    # After a stop the rig is disarmed, unless the stop followed a fall and a retry is due.
    allow([S.STOPPING], E.STOP_COMPLETE, S.IDLE, S.SWING_UP)
    # Anything going wrong while the drive is powered latches a fault.
    moving = sorted(MOTION_STATES)
    allow(moving, E.INTERLOCK_TRIP, S.FAULT)
    allow(moving, E.LINK_DOWN, S.FAULT)
    allow(moving, E.DEVICE_RESET, S.FAULT)
    allow(moving + [S.IDLE], E.DEVICE_FAULT, S.FAULT)
    # Latched states record further trouble and link changes but stay latched.
    latched = sorted(LATCHED_STATES)
    allow(latched, E.INTERLOCK_TRIP)
    allow(latched, E.DEVICE_FAULT)
    allow(latched, E.DEVICE_RESET)
    allow(latched, E.LINK_DOWN)
    allow(latched, E.LINK_UP)
    allow(latched, E.STOP_COMPLETE)  # the category 1 ramp has ended: drive off
    # Reset: a deliberate action that never starts motion (ISO 13850).
    allow(latched, C.RESET, S.IDLE, S.DISCONNECTED)
    return table


TRANSITIONS: dict[tuple[State, Trigger], tuple[State, ...]] = _build()

COMMAND_NAMES = frozenset(c.value for c in Command)

#: The workflow's usual next step from each state (homed, not homed), or None where there is none.
_NEXT: dict[State, tuple[Command | None, Command | None]] = {
    State.DISCONNECTED: (None, None),
    State.IDLE: (Command.ARM, Command.HOME),
    State.HOMING: (None, None),
    State.READY: (Command.SWING_UP, Command.SWING_UP),
    State.SWING_UP: (None, None),
    State.BALANCE: (Command.STOP, Command.STOP),
    State.STOPPING: (None, None),
    State.EXCITE: (None, None),
    State.FAULT: (Command.RESET, Command.RESET),
    State.ESTOP: (Command.RESET, Command.RESET),
}


def suggested_command(state: State, homed: bool) -> str | None:
    """The command an operator would usually send next (shown as "next: ..."), or None."""
    command = _NEXT[state][0 if homed else 1]
    return None if command is None else command.value


def state_code_table() -> dict[int, str]:
    """Code -> name, stored with each recorded run."""
    return {state.value: state.name for state in State}
