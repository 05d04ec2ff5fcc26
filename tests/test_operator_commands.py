"""The one command table: what the docs and the dashboard say each command does is what it does."""

from __future__ import annotations

from pathlib import Path

import pytest

from daemon.config import demo_config_path, parse_config
from daemon.operator_commands import (
    COMMANDS,
    MOTION_COMMANDS,
    AnsweredBy,
    BadRequest,
    Command,
    api_table_markdown,
    validate_args,
)
from daemon.supervisor.machine import StateMachine
from daemon.supervisor.states import MOTION_STATES, Event, State
from daemon.ui.keys import OPERATOR_KEYS

REPO = Path(__file__).resolve().parents[1]


def test_readme_shows_the_api_table_made_from_the_command_table():
    assert api_table_markdown() in (REPO / "README.md").read_text()


def test_every_supervisor_command_is_in_the_table_once_and_nothing_else_is_sent_to_it():
    supervised = {
        name for name, spec in COMMANDS.items() if spec.answered_by is AnsweredBy.SUPERVISOR
    }
    assert supervised == {command.value for command in Command}


def machine_in_idle_homed() -> StateMachine:
    machine = StateMachine(parse_config(demo_config_path().read_text()))
    machine.apply(Event.LINK_UP, "link", 0.0)
    machine.apply(Command.HOME, "api", 0.1)
    machine.apply(Event.HOMING_DONE, "cycle", 1.0)
    return machine


@pytest.mark.parametrize(
    ("command", "then", "ends"),
    [
        # the words each command's summary gives for where it ends, checked on the real machine
        (Command.STOP, Event.STOP_COMPLETE, State.IDLE),
        (Command.HOME, Event.HOMING_DONE, State.IDLE),
        (Command.EXCITE, Event.EXCITE_DONE, State.READY),
    ],
)
def test_the_state_a_command_ends_in_is_the_one_its_summary_names(command, then, ends):
    machine = machine_in_idle_homed()
    if command is not Command.HOME:
        machine.apply(Command.ARM, "api", 2.0)
    args = {"kind": "chirp", "duration_s": 5.0} if command is Command.EXCITE else None
    machine.apply(command, "api", 3.0, args=args)
    machine.apply(then, "cycle", 9.0)
    assert machine.state is ends
    assert ends.name in COMMANDS[command.value].summary


def test_reset_ends_idle_and_disarmed_as_its_summary_says():
    machine = machine_in_idle_homed()
    machine.apply(Command.ESTOP, "api", 2.0)
    machine.apply(Event.STOP_COMPLETE, "cycle", 3.0)
    machine.apply(Command.RESET, "api", 4.0)
    assert machine.state is State.IDLE
    assert (
        "IDLE" in COMMANDS["reset"].summary and "never starts motion" in COMMANDS["reset"].summary
    )


def test_commands_asked_y_n_on_the_dashboard_are_those_that_run_the_prearm_checks():
    asked = {key.command for key in OPERATOR_KEYS if key.confirm}
    keyed = {key.command for key in OPERATOR_KEYS}
    assert asked == {command.value for command in MOTION_COMMANDS} & keyed


def starts_motion(command: Command) -> bool:
    """Whether the real machine, disarmed (IDLE) or holding (READY), starts a new motion on it."""
    starting = MOTION_STATES - {State.STOPPING}
    for armed in (False, True):
        machine = machine_in_idle_homed()
        if armed:
            machine.apply(Command.ARM, "api", 2.0)
        before = machine.state
        args = {"x_m": 0.0} if command is Command.SETPOINT else None
        if command is Command.EXCITE:
            args = {"kind": "chirp", "duration_s": 5.0}
        if machine.allows(command):
            after = machine.apply(command, "api", 3.0, args=args)
            if after in starting and after is not before:
                return True
    return False


@pytest.mark.parametrize("command", list(Command))
def test_a_command_has_a_motion_text_exactly_when_it_starts_motion(command):
    assert (command in MOTION_COMMANDS) == starts_motion(command)


@pytest.mark.parametrize(
    ("command", "args", "message"),
    [
        ("swing", {}, "unknown command 'swing'"),
        ("setpoint", {}, "setpoint: missing argument 'x_m'"),
        ("setpoint", {"x_m": True}, "setpoint: argument 'x_m' must be a finite number (got True)"),
        ("excite", {"kind": "sine", "duration_s": 1}, "excite: argument 'kind' must be one of"),
        ("arm", {"now": 1}, "arm: unknown argument 'now' (takes no arguments)"),
    ],
)
def test_a_bad_request_names_the_command_and_the_argument(command, args, message):
    with pytest.raises(BadRequest, match="^" + message.replace("(", r"\(").replace(")", r"\)")):
        validate_args(command, args)
