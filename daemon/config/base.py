"""Common base for every config section: unknown keys are errors, types are strict, values are frozen.

The strictness rule, for every field of every section:

- A number field takes a TOML number and nothing else: never a boolean
  (``true`` is not 1), never a string (``"0.5"`` is not 0.5). An integer field
  takes an integer only (``500.0`` is refused); a float field takes a float or
  an integer. A choice among numbers (``stop.category``) takes an integer too.
- Numbers are finite and normal: ``nan``, ``inf`` and subnormal numbers
  (magnitudes below 2.2e-308, where a float loses precision) are refused.
- Every number has a range (``Field(ge=..., le=...)``); where the reason for a
  physical range is not obvious, a :class:`RangeReason` beside it says why, and
  the error line repeats it.
- TOML arrays fill the tuple fields; their items follow the same rules.
"""

from __future__ import annotations

import sys
from dataclasses import dataclass
from typing import Any, Literal, get_args, get_origin

from pydantic import BaseModel, ConfigDict, ValidationInfo, field_validator
from pydantic.fields import FieldInfo

__all__ = ["RangeReason", "Section", "range_reason"]


@dataclass(frozen=True)
class RangeReason:
    """Why a field's range is what it is: ``Annotated[float, RangeReason("...")] = Field(ge=..)``."""

    text: str


def range_reason(field: FieldInfo) -> str | None:
    """The :class:`RangeReason` text given with ``field``, if any."""
    for item in field.metadata:
        if isinstance(item, RangeReason):
            return item.text
    return None


def _takes_tuples(annotation: Any) -> bool:
    return get_origin(annotation) is tuple or any(_takes_tuples(arg) for arg in get_args(annotation))


def _is_subnormal(value: object) -> bool:
    return isinstance(value, float) and 0.0 < abs(value) < sys.float_info.min


class Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)

    @field_validator("*", mode="before")
    @classmethod
    def _toml_value_as_the_field_holds_it(cls, value: Any, info: ValidationInfo) -> Any:
        """TOML arrays (lists) fill tuple fields; a choice of numbers matches by type, not only value.

        pydantic's strict mode takes only a tuple for a tuple, and matches a
        ``Literal[0, 1]`` by equality, so ``true`` and ``1.0`` would pass as 1.
        """
        annotation = cls.model_fields[info.field_name].annotation
        if isinstance(value, list) and _takes_tuples(annotation):
            return tuple(value)
        if get_origin(annotation) is Literal:
            choices = get_args(annotation)
            if not any(type(value) is type(choice) and value == choice for choice in choices):
                raise ValueError("Input should be " + " or ".join(repr(choice) for choice in choices))
        return value

    @field_validator("*", mode="after")
    @classmethod
    def _no_subnormal_numbers(cls, value: Any) -> Any:
        items = value if isinstance(value, tuple) else (value,)
        if any(_is_subnormal(item) for item in items):
            raise ValueError(
                f"a subnormal number (magnitude below {sys.float_info.min:.1e}) is no physical value"
            )
        return value
