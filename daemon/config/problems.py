"""Config problems: each a line naming the field path, what is wrong there and (cut short) the value.

A bad value is echoed cut short, long strings to a prefix and their length,
nested arrays to a few levels, huge integers by their size, so that a line
stays one short line whatever the file holds.
"""

from __future__ import annotations

import math
import reprlib

from pydantic import BaseModel
from pydantic.fields import FieldInfo

from daemon.config.base import range_reason

__all__ = ["SHOWN_CHARS", "ConfigError", "ConfigErrors", "describe"]


class ConfigError(Exception):
    """A config that cannot be used; ``problems`` holds one human line per fault."""

    def __init__(self, source: str, problems: list[str]):
        self.source = source
        self.problems = problems
        super().__init__("\n".join(self.lines()))

    def lines(self) -> list[str]:
        """``source: problem``, one line per problem."""
        return [f"{self.source}: {problem}" for problem in self.problems]


class ConfigErrors(Exception):
    """Several configs that cannot be used, each with its own problems (``poise check-config``)."""

    def __init__(self, errors: list[ConfigError]):
        self.errors = errors
        super().__init__("\n".join(self.lines()))

    def lines(self) -> list[str]:
        return [line for error in self.errors for line in error.lines()]


SHOWN_CHARS = 40
"""Longest string, key or other value echoed whole in an error line; longer ones are cut."""


class _ShortRepr(reprlib.Repr):
    """Values for error lines: strings cut to a prefix with their length, huge integers by size."""

    def __init__(self) -> None:
        super().__init__()
        self.maxlevel = 3
        self.maxlist = self.maxtuple = self.maxdict = 6
        self.maxother = SHOWN_CHARS

    def repr_str(self, value: str, level: int) -> str:
        if len(value) <= SHOWN_CHARS:
            return repr(value)
        return f"{value[:SHOWN_CHARS]!r} …, {len(value)} characters"

    def repr_bool(self, value: bool, level: int) -> str:
        return "true" if value else "false"  # as TOML spells it

    def repr_int(self, value: int, level: int) -> str:
        if value.bit_length() <= 64:
            return repr(value)
        digits = math.floor(value.bit_length() * math.log10(2)) + 1
        return f"an integer of about {digits} digits"


_shown = _ShortRepr().repr


def _key_shown(part: str | int) -> str:
    text = str(part)
    if not text:
        return '""'  # a quoted TOML key may be empty...
    if not text.isprintable():  # ...or hold a newline
        text = repr(text)[1:-1]
    return text if len(text) <= SHOWN_CHARS else f"{text[:SHOWN_CHARS]}… ({len(text)} characters)"


def _field_at(root: type[BaseModel], path: tuple[str | int, ...]) -> FieldInfo | None:
    """The model field a validation error's location names, or None (an array item, an unknown key)."""
    model: object = root
    field = None
    for part in path:
        fields = getattr(model, "model_fields", None)
        if not isinstance(fields, dict) or part not in fields:
            return None
        field = fields[part]
        model = field.annotation
    return field


_RANGE_ERRORS = {"greater_than", "greater_than_equal", "less_than", "less_than_equal"}


def describe(error: dict, root: type[BaseModel]) -> str:
    """One line for one pydantic error of validating ``root``: the field path, what is wrong, the value."""
    path = ".".join(_key_shown(part) for part in error["loc"])
    message = error["msg"].removeprefix("Value error, ")
    if not path:  # a check across sections names its fields itself
        return message
    if error["type"] == "extra_forbidden":
        message = "unknown field (check the spelling; see configs/ for the fields a rig config takes)"
    elif error["type"] == "missing":
        message = "required field is missing"
    else:
        field = _field_at(root, error["loc"])
        reason = range_reason(field) if field is not None and error["type"] in _RANGE_ERRORS else None
        if reason:
            message = f"{message}: {reason}"
        if "input" in error and error["type"] not in ("model_type", "dict_type"):
            message = f"{message} (got {_shown(error['input'])})"
    return f"{path}: {message}"
