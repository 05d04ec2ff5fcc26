"""The supervisor's transition table, checked for every state and every command or event.

Allowed pairs move to the state the table names; every other pair is refused
with a reason and changes nothing. Each state is reached through the real
machine by the shortest path of allowed triggers from DISCONNECTED.
"""

from __future__ import annotations

import copy
from collections import deque

import pytest

from daemon.config import demo_config_path, parse_config
from daemon.control.excitation_sizing import ExcitationSizing
from daemon.errors import CommandRefused
from daemon.supervisor.interlocks import Action, Trip
from daemon.supervisor.machine import Output, StateMachine
from daemon.supervisor.states import (
    LATCHED_STATES,
    MOTION_STATES,
    TRANSITIONS,
    Command,
    Event,
    State,
    state_code_table,
)

TRIGGERS = [*Command, *Event]
ARGS = {
    Command.SETPOINT: {"x_m": 0.05},
    Command.EXCITE: {"kind": "chirp", "duration_s": 5.0},  # the amplitude sized for the rig
}


def config(extra: str = ""):
    return parse_config(demo_config_path().read_text() + extra)


def fire(machine: StateMachine, trigger, t_s: float = 0.0, **kwargs) -> State:
    trip = Trip("cart.overspeed", Action.CONTROLLED_STOP, "test trip", {"v_mps": 2.0})
    if trigger is Event.INTERLOCK_TRIP:
        kwargs.setdefault("trip", trip)
    return machine.apply(trigger, "api", t_s, args=ARGS.get(trigger), **kwargs)


def shortest_paths() -> dict[State, list]:
    """For each state, the shortest trigger sequence from DISCONNECTED (breadth first over the table)."""
    paths = {State.DISCONNECTED: []}
    queue = deque([State.DISCONNECTED])
    while queue:
        state = queue.popleft()
        for (source, trigger), targets in TRANSITIONS.items():
            if source is state:
                for target in targets:
                    if target not in paths:
                        paths[target] = [*paths[state], trigger]
                        queue.append(target)
    return paths


PATHS = shortest_paths()


def machine_in(state: State, extra: str = "") -> StateMachine:
    machine = StateMachine(config(extra))
    for trigger in PATHS[state]:
        fire(machine, trigger)
    assert machine.state is state, f"path {PATHS[state]} ends in {machine.state.name}"
    return machine


def snapshot(machine: StateMachine) -> dict:
    return {
        key: copy.deepcopy(value)
        for key, value in vars(machine).items()
        if key not in ("events", "_on_entry", "_excitation")  # the last: the rig's fixed model
    }


def test_every_state_is_reachable_from_disconnected():
    assert set(PATHS) == set(State)


def test_state_codes_are_unique_small_ints_and_the_code_table_names_them():
    table = state_code_table()
    assert sorted(table) == list(range(len(State)))
    assert table[State.FAULT.value] == "FAULT"


@pytest.mark.parametrize("state", list(State), ids=lambda s: s.name)
@pytest.mark.parametrize("trigger", TRIGGERS, ids=lambda t: t.value)
def test_each_pair_moves_as_the_table_says_or_is_refused_changing_nothing(state, trigger):
    machine = machine_in(state)
    targets = TRANSITIONS.get((state, trigger))
    if trigger is Command.RESET and machine.output is Output.RAMP:
        targets = (
            None  # guard: no reset while a controlled stop is running (tested on its own below)
        )
    if targets is None:
        before = snapshot(machine)
        events_before = len(machine.events)
        with pytest.raises(CommandRefused) as refused:
            fire(machine, trigger, t_s=1.0)
        assert refused.value.reason.startswith(f"{trigger.value}: ")
        assert snapshot(machine) == before
        assert len(machine.events) == events_before
    else:
        new_state = fire(machine, trigger, t_s=1.0)
        assert new_state in targets
        assert machine.state is new_state
        last = machine.events[-1]
        assert (last.kind, last.source) == ("transition", "api")
        assert f"{state.name} -> {new_state.name} on {trigger.value}" in last.text


@pytest.mark.parametrize("state", list(State), ids=lambda s: s.name)
def test_estop_is_accepted_in_every_state_and_latches(state):
    machine = machine_in(state)
    assert fire(machine, Command.ESTOP) is State.ESTOP
    assert machine.faults[-1].name == "estop"


@pytest.mark.parametrize("state", sorted(MOTION_STATES), ids=lambda s: s.name)
def test_drive_is_powered_only_in_motion_states(state):
    assert machine_in(state).output in (Output.CONTROL, Output.RAMP)


@pytest.mark.parametrize(
    "state", [State.DISCONNECTED, State.IDLE, *LATCHED_STATES], ids=lambda s: s.name
)
def test_drive_is_off_in_resting_and_latched_states_reached_without_motion(state):
    assert machine_in(state).output is Output.OFF


def test_allowed_commands_are_exactly_the_table_entries():
    for state in State:
        machine = machine_in(state)
        assert machine.allowed_commands() == [c.value for c in Command if (state, c) in TRANSITIONS]


# --- guards where the table names two targets -------------------------------------------------


def test_operator_stop_ends_idle_and_disarmed():
    machine = machine_in(State.BALANCE)
    fire(machine, Command.STOP)
    assert fire(machine, Event.STOP_COMPLETE) is State.IDLE
    assert machine.output is Output.OFF


def test_a_fall_retries_swing_up_catch_retries_times_then_goes_idle():
    machine = machine_in(State.READY)
    fire(machine, Command.SWING_UP)
    retries = config().catch.retries
    for _ in range(retries):
        fire(machine, Event.CAUGHT)
        fire(machine, Event.FALL)
        assert fire(machine, Event.STOP_COMPLETE) is State.SWING_UP
    fire(machine, Event.CAUGHT)
    fire(machine, Event.FALL)
    assert fire(machine, Event.STOP_COMPLETE) is State.IDLE


def test_after_fall_idle_policy_never_retries():
    machine = machine_in(State.READY, '\n[stop]\nafter_fall = "idle"\n')
    fire(machine, Command.SWING_UP)
    fire(machine, Event.CAUGHT)
    fire(machine, Event.FALL)
    assert fire(machine, Event.STOP_COMPLETE) is State.IDLE


def test_stop_during_a_fall_stop_cancels_the_retry():
    machine = machine_in(State.READY)
    fire(machine, Command.SWING_UP)
    fire(machine, Event.CAUGHT)
    fire(machine, Event.FALL)
    fire(machine, Command.STOP)
    assert fire(machine, Event.STOP_COMPLETE) is State.IDLE


def test_reset_with_the_link_down_leaves_the_rig_disconnected():
    machine = machine_in(State.FAULT)
    fire(machine, Event.LINK_DOWN)
    assert fire(machine, Command.RESET) is State.DISCONNECTED


def test_reset_is_refused_while_the_controlled_stop_still_runs():
    machine = machine_in(State.BALANCE)
    fire(machine, Command.ESTOP, v_mps=0.4)  # stop category 1 in the demo config
    assert machine.output is Output.RAMP
    with pytest.raises(CommandRefused, match="controlled stop is still running"):
        fire(machine, Command.RESET)
    fire(machine, Event.STOP_COMPLETE)
    assert fire(machine, Command.RESET) is State.IDLE


# --- arguments --------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("command", "args", "message"),
    [
        (Command.SETPOINT, {}, "setpoint: x_m must be a finite number"),
        (Command.SETPOINT, {"x_m": "left"}, "setpoint: x_m must be a finite number"),
        (Command.SETPOINT, {"x_m": float("nan")}, "setpoint: x_m must be a finite number"),
        (Command.SETPOINT, {"x_m": 0.5}, "setpoint: x_m=0.5 outside the soft limits"),
        (
            Command.EXCITE,
            {"kind": "sine", "amplitude": 1.0, "duration_s": 1.0},
            "excite: kind must be one of",
        ),
        (
            Command.EXCITE,
            {"kind": "prbs", "amplitude": 13.0, "duration_s": 1.0},
            r"excite: amplitude must be in \(0, 12\]",
        ),
        (
            Command.EXCITE,
            {"kind": "step", "amplitude": 1.0, "duration_s": True},
            "excite: duration_s must be a finite",
        ),
        (
            Command.EXCITE,
            {"kind": "step", "amplitude": 2.0, "duration_s": 10.0},
            (r"excite: a 10 s step of amplitude 2 V is predicted to take the cart past the soft "
             r"limits ±0\.360 m; the largest safe amplitude here is 0\.\d+ V"),
        ),
    ],
)
def test_bad_arguments_are_refused_naming_command_and_field_and_nothing_changes(
    command, args, message
):
    machine = machine_in(State.READY)
    before = snapshot(machine)
    with pytest.raises(CommandRefused, match=message):
        machine.apply(command, "api", 1.0, args=args)
    assert snapshot(machine) == before


def test_an_excitation_without_amplitude_is_sized_for_the_rig_and_its_set_point():
    sizing = ExcitationSizing.from_config(config())
    machine = machine_in(State.READY)
    machine.apply(Command.EXCITE, "api", 1.0, args={"kind": "step", "duration_s": 10.0})
    assert machine.excite_args == {
        "kind": "step", "amplitude": sizing.default_amplitude("step", 10.0, 0.0), "duration_s": 10.0
    }
    offset = machine_in(State.READY)
    offset.apply(Command.SETPOINT, "api", 1.0, args={"x_m": 0.2})
    offset.apply(Command.EXCITE, "api", 1.0, args={"kind": "step", "duration_s": 10.0})
    assert 0.0 < offset.excite_args["amplitude"] < machine.excite_args["amplitude"]


def test_setpoint_inside_the_soft_limit_is_taken():
    machine = machine_in(State.READY)
    fire(machine, Command.SETPOINT)
    assert machine.setpoint_m == ARGS[Command.SETPOINT]["x_m"]
