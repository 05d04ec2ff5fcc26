"""The control API's command table: which commands exist and which arguments each takes.

Every request's arguments are checked here before anything else sees them, so a
bad request changes nothing. ``validate_args`` returns a fresh dict with the
values normalised (integers given for numbers become floats); a problem raises
:class:`BadRequest` whose message names the command and the argument.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field

from daemon.control.excitation import EXCITE_KINDS

RECORD_NOTE_MAX_CHARS = 200

# Commands the server answers itself; every other command goes to the target's execute().
SERVER_COMMANDS = frozenset({"status", "subscribe"})


class BadRequest(Exception):
    """A request the server will not act on; the message is the one-line error sent back."""


# A validator takes the value as decoded from JSON and returns it normalised, or raises
# ValueError/TypeError saying what the value must be ("must be a finite number").
Validator = Callable[[object], object]


def finite_number(value: object) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError("must be a finite number")
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
    """One command's arguments: required ones must be present, optional ones may be."""

    name: str
    help: str
    required: Mapping[str, Validator] = field(default_factory=dict)
    optional: Mapping[str, Validator] = field(default_factory=dict)

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


COMMANDS: dict[str, CommandSpec] = {
    spec.name: spec
    for spec in (
        CommandSpec("arm", "arm the drive (pre-arm checks first)"),
        CommandSpec("disarm", "disarm the drive"),
        CommandSpec("home", "find the track ends and centre the cart"),
        CommandSpec("swing_up", "swing the pendulum up and catch it"),
        CommandSpec("balance", "catch and balance a pendulum held near upright"),
        CommandSpec("setpoint", "move the cart set-point", required={"x_m": finite_number}),
        CommandSpec("stop", "controlled stop, then hold"),
        CommandSpec("estop", "emergency stop (latched)"),
        CommandSpec("reset", "clear a latched fault or e-stop (never starts motion)"),
        CommandSpec(
            "excite",
            "run an identification excitation (amplitude left out: sized for the rig)",
            required={"kind": one_of(*EXCITE_KINDS), "duration_s": positive_number},
            optional={"amplitude": positive_number},
        ),
        CommandSpec(
            "record",
            "start or stop recording",
            required={"on": boolean},
            optional={"note": short_text},
        ),
        CommandSpec("status", "one status snapshot"),
        CommandSpec("subscribe", "stream status lines", optional={"rate_hz": positive_number}),
    )
}


def validate_args(command: str, args: Mapping[str, object]) -> dict[str, object]:
    """Check a command's name and arguments; return the normalised arguments."""
    spec = COMMANDS.get(command)
    if spec is None:
        raise BadRequest(f"unknown command {command!r} (known: {', '.join(COMMANDS)})")
    return spec.validate(args)
