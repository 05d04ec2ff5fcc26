"""The real state machine against the state table in docs/states.md, written apart from the code.

Each state is reached by a path written out here by hand (not searched in the
machine's own table), then every command and event is tried on a fresh machine
in that state: a pair the docs list must be accepted and lead to a target they
name; every other pair must be refused and change nothing.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from daemon.config import demo_config_path, parse_config
from daemon.errors import CommandRefused
from daemon.operator_commands import Command
from daemon.supervisor.interlocks import Action, Trip
from daemon.supervisor.machine import StateMachine
from daemon.supervisor.states import Event, State

DOC = Path(__file__).resolve().parents[1] / "docs" / "states.md"
TRIGGERS = [*Command, *Event]
BY_NAME = {trigger.value: trigger for trigger in TRIGGERS}
ARGS = {
    Command.SETPOINT: {"x_m": 0.05},
    Command.EXCITE: {"kind": "chirp", "duration_s": 5.0},
}

C, E, S = Command, Event, State
#: How an operator and the rig get the machine into each state, step by step.
PATHS: dict[State, list] = {
    S.DISCONNECTED: [],
    S.IDLE: [E.LINK_UP],
    S.HOMING: [E.LINK_UP, C.HOME],
    S.READY: [E.LINK_UP, C.HOME, E.HOMING_DONE, C.ARM],
    S.SWING_UP: [E.LINK_UP, C.HOME, E.HOMING_DONE, C.ARM, C.SWING_UP],
    S.BALANCE: [E.LINK_UP, C.HOME, E.HOMING_DONE, C.ARM, C.BALANCE],
    S.STOPPING: [E.LINK_UP, C.HOME, E.HOMING_DONE, C.ARM, C.STOP],
    S.EXCITE: [E.LINK_UP, C.HOME, E.HOMING_DONE, C.ARM, C.EXCITE],
    S.FAULT: [E.LINK_UP, E.DEVICE_FAULT],
    S.ESTOP: [E.LINK_UP, C.ESTOP],
}


def documented_table() -> dict[tuple[State, object], set[State]]:
    """(state, trigger) -> the states docs/states.md says it may lead to."""
    table: dict[tuple[State, object], set[State]] = {}
    rows = re.findall(
        r"^\| ([A-Z_, a-z]+) \| `([a-z_]+)` \| ([A-Za-z_ ]+?) \|", DOC.read_text(), re.MULTILINE
    )
    assert len(rows) > 20, "the state table in docs/states.md was not found"
    for sources, trigger_name, targets in rows:
        states = (
            list(State) if sources == "every state" else [State[s] for s in sources.split(", ")]
        )
        trigger = BY_NAME[trigger_name]
        for state in states:
            named = {state} if targets == "unchanged" else {State[t] for t in targets.split(" or ")}
            assert (state, trigger) not in table, f"docs list {state.name} on {trigger_name} twice"
            table[(state, trigger)] = named
    return table


DOCUMENTED = documented_table()


def machine_in(state: State) -> StateMachine:
    machine = StateMachine(parse_config(demo_config_path().read_text()))
    for step, trigger in enumerate(PATHS[state]):
        fire(machine, trigger, t_s=0.1 * step)
    assert machine.state is state
    return machine


def fire(machine: StateMachine, trigger, t_s: float) -> State:
    trip = Trip("cart.overspeed", Action.CONTROLLED_STOP, "test trip", {"v_mps": 2.0})
    return machine.apply(
        trigger,
        "api",
        t_s,
        args=ARGS.get(trigger),
        trip=trip if trigger is Event.INTERLOCK_TRIP else None,
    )


def test_every_state_has_a_documented_way_in():
    assert set(PATHS) == set(State)


@pytest.mark.parametrize("state", list(State), ids=lambda s: s.name)
@pytest.mark.parametrize("trigger", TRIGGERS, ids=lambda t: t.value)
def test_the_machine_does_what_the_documented_table_says(state, trigger):
    machine = machine_in(state)
    if (state, trigger) in DOCUMENTED:
        reached = fire(machine, trigger, t_s=5.0)
        assert reached in DOCUMENTED[(state, trigger)]
    else:
        with pytest.raises(
            CommandRefused, match=f"^{trigger.value}: not allowed in {state.name}: "
        ):
            fire(machine, trigger, t_s=5.0)
        assert machine.state is state


def test_a_stop_after_a_fall_retries_the_swing_up_only_when_the_config_asks_for_it():
    """The guard of STOPPING on stop_complete, both ways (docs/states.md, last column)."""
    for after_fall, expected in (("retry", State.SWING_UP), ("idle", State.IDLE)):
        text = demo_config_path().read_text() + f'\n[stop]\nafter_fall = "{after_fall}"\n'
        machine = StateMachine(parse_config(text))
        for step, trigger in enumerate(
            PATHS[State.SWING_UP] + [Event.CAUGHT, Event.FALL, Event.STOP_COMPLETE]
        ):
            fire(machine, trigger, t_s=0.1 * step)
        assert machine.state is expected, after_fall
