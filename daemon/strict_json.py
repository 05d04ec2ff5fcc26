"""JSON any parser accepts (RFC 8259 has no Infinity or NaN): non-finite floats go out as null."""

from __future__ import annotations

import math

__all__ = ["finite_or_null"]


def finite_or_null(value: object) -> object:
    """``value`` with every infinite or NaN float, at any depth of dicts, lists and tuples, made None."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {key: finite_or_null(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [finite_or_null(item) for item in value]
    return value
