"""Every operator command, once: its name, what it does, whether it starts motion, its arguments.

This is the one table of commands. The supervisor's :class:`Command` names, the
control API's argument checks, the CLI verbs and their help, the dashboard's
key table and its y/n questions are all made from :data:`COMMANDS`;
``python -m daemon.operator_commands`` prints the API's command table for the
docs. What a command is *allowed* to do in each state is the transition table's
business (:mod:`daemon.supervisor.states`), not this one's.

Arguments are checked here before anything else sees them, so a bad request
changes nothing: :meth:`CommandSpec.validate` returns a fresh dict with the
values normalised (integers given for numbers become floats); a problem raises
:class:`BadRequest` whose message names the command and the argument.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from enum import Enum

from daemon.control.excitation import EXCITE_KINDS

RECORD_NOTE_MAX_CHARS = 200


class Command(str, Enum):
    """The commands the supervisor's state machine answers; values are their API names."""

    ARM = "arm"
    DISARM = "disarm"
    HOME = "home"
    SWING_UP = "swing_up"
    BALANCE = "balance"
    SETPOINT = "setpoint"
    STOP = "stop"
    ESTOP = "estop"
    RESET = "reset"
    EXCITE = "excite"


class AnsweredBy(str, Enum):
    """Which part of the daemon carries a command out."""

    SUPERVISOR = "supervisor"  # the state machine (a Command)
    RECORDER = "recorder"  # the run store
    API_SERVER = "api server"  # the control API itself, from the status snapshot


class BadRequest(Exception):
    """A request the daemon will not act on; the message is the one-line error sent back."""


# A validator takes the value as decoded from JSON and returns it normalised, or raises
# ValueError/TypeError saying what the value must be ("must be a finite number").
Validator = Callable[[object], object]


def finite_number(value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError("must be a finite number")  # noqa: TRY004 (validators raise ValueError: a bad argument)
    try:
        number = float(value)
    except OverflowError:  # an integer past the largest float
        raise ValueError("must be a finite number") from None
    if not math.isfinite(number):
        raise ValueError("must be a finite number")
    return number


def positive_number(value: object) -> float:
    number = finite_number(value)
    if number <= 0.0:
        raise ValueError("must be a finite number greater than 0")
    return number


def one_of(*choices: str) -> Validator:
    def check(value: object) -> str:
        if value not in choices:
            raise ValueError(f"must be one of {', '.join(choices)}")
        return value  # type: ignore[return-value]

    return check


def boolean(value: object) -> bool:
    if not isinstance(value, bool):
        raise TypeError("must be true or false")
    return value


def short_text(value: object) -> str:
    if not isinstance(value, str) or len(value) > RECORD_NOTE_MAX_CHARS:
        raise ValueError(f"must be a string of at most {RECORD_NOTE_MAX_CHARS} characters")
    return value


@dataclass(frozen=True)
class CommandSpec:
    """One command: ``summary`` is its one line everywhere (API docs, CLI help, key table).

    ``motion`` says what the rig does once the command is accepted, for commands
    that can power the drive from rest; those run the pre-arm checks and the
    dashboard asks y/n with this text. It is empty for every other command.
    """

    name: str
    summary: str
    answered_by: AnsweredBy
    motion: str = ""
    required: Mapping[str, Validator] = field(default_factory=dict)
    optional: Mapping[str, Validator] = field(default_factory=dict)
    argument_help: Mapping[str, str] = field(default_factory=dict)
    has_verb: bool = True  # whether a ``poise`` sub-command sends it

    @property
    def verb(self) -> str:
        """The ``poise`` sub-command that sends it."""
        return self.name.replace("_", "-")

    def validate(self, args: Mapping[str, object]) -> dict[str, object]:
        known = {**self.required, **self.optional}
        for name in args:
            if name not in known:
                takes = f"takes {', '.join(sorted(known))}" if known else "takes no arguments"
                raise BadRequest(f"{self.name}: unknown argument {name!r} ({takes})")
        for name in self.required:
            if name not in args:
                raise BadRequest(f"{self.name}: missing argument {name!r}")
        clean: dict[str, object] = {}
        for name, value in args.items():
            try:
                clean[name] = known[name](value)
            except (TypeError, ValueError) as exc:
                raise BadRequest(
                    f"{self.name}: argument {name!r} {exc} (got {_show(value)})"
                ) from None
        return clean


def _show(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


_S = AnsweredBy.SUPERVISOR

COMMANDS: dict[str, CommandSpec] = {
    spec.name: spec
    for spec in (
        CommandSpec(
            Command.ARM.value,
            "power the drive and hold the cart at its set-point (READY); homed rigs only",
            _S,
            motion="The drive is powered and holds the cart at its set-point.",
        ),
        CommandSpec(Command.DISARM.value, "drive off (from READY)", _S),
        CommandSpec(
            Command.HOME.value,
            "find both track ends, then centre the cart (arming needs it); ends IDLE",
            _S,
            motion="The drive is powered: the cart runs to each track end, then to the centre.",
        ),
        CommandSpec(
            Command.SWING_UP.value,
            "pump the pendulum up from hanging, then catch and balance it (from READY)",
            _S,
            motion="The cart shuttles along the track to pump the pendulum up, then balances it.",
        ),
        CommandSpec(
            Command.BALANCE.value,
            "catch and balance a pendulum held near upright (from READY)",
            _S,
            motion="The controller catches the pendulum where it is (held near upright) and "
            "balances it.",
        ),
        CommandSpec(
            Command.SETPOINT.value,
            "move the cart set-point (READY, BALANCE)",
            _S,
            required={"x_m": finite_number},
            argument_help={"x_m": "cart set-point, metres from the track centre"},
        ),
        CommandSpec(Command.STOP.value, "controlled stop, then drive off (IDLE)", _S),
        CommandSpec(
            Command.ESTOP.value,
            "emergency stop, in every state; latched until reset",
            _S,
        ),
        CommandSpec(
            Command.RESET.value,
            "clear a latched fault or e-stop; never starts motion (ends IDLE)",
            _S,
        ),
        CommandSpec(
            Command.EXCITE.value,
            "run an identification excitation from READY, then hold (READY)",
            _S,
            motion="The drive moves the cart along the track with the excitation signal, then "
            "holds it.",
            required={"kind": one_of(*EXCITE_KINDS), "duration_s": positive_number},
            optional={"amplitude": positive_number},
            argument_help={
                "kind": "excitation signal",
                "duration_s": "length of the run in seconds",
                "amplitude": "drive amplitude, volts or newtons as the rig's drive (default: "
                "sized for the rig, so the run keeps the cart well inside the soft limits; a "
                "larger one than the rig allows is refused)",
            },
        ),
        CommandSpec(
            "record",
            "start or stop recording",
            AnsweredBy.RECORDER,
            required={"on": boolean},
            optional={"note": short_text},
            argument_help={"on": "true starts a run, false ends it", "note": "stored with the run"},
        ),
        CommandSpec("status", "one status snapshot", AnsweredBy.API_SERVER),
        CommandSpec(
            "subscribe",
            "stream status lines",
            AnsweredBy.API_SERVER,
            optional={"rate_hz": positive_number},
            argument_help={"rate_hz": "status lines per second"},
            has_verb=False,
        ),
    )
}

#: Commands that can power the drive from rest, so run the pre-arm checks and are confirmed.
MOTION_COMMANDS = frozenset(Command(spec.name) for spec in COMMANDS.values() if spec.motion)
#: Commands the control API answers itself; every other one goes to the daemon's execute().
SERVER_COMMANDS = frozenset(
    spec.name for spec in COMMANDS.values() if spec.answered_by is AnsweredBy.API_SERVER
)


def validate_args(command: str, args: Mapping[str, object]) -> dict[str, object]:
    """Check a command's name and arguments; return the normalised arguments."""
    spec = COMMANDS.get(command)
    if spec is None:
        raise BadRequest(f"unknown command {command!r} (known: {', '.join(COMMANDS)})")
    return spec.validate(args)


def api_table_markdown() -> str:
    """The control API's commands as a markdown table, for DEVELOPERS.md."""
    rows = [
        "| `cmd` | arguments | what it does | `poise` verb |",
        "| --- | --- | --- | --- |",
    ]
    for spec in COMMANDS.values():
        arguments = [f"`{name}`" for name in spec.required]
        arguments += [f"`{name}` (optional)" for name in spec.optional]
        rows.append(
            f"| `{spec.name}` | {', '.join(arguments) or '-'} | {spec.summary} | "
            f"{f'`poise {spec.verb}`' if spec.has_verb else '-'} |"
        )
    return "\n".join(rows)


if __name__ == "__main__":
    print(api_table_markdown())
