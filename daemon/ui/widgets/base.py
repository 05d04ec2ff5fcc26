"""The base of every dashboard panel: a widget that draws itself from the daemon's latest status."""

from __future__ import annotations

import math

from textual.reactive import reactive
from textual.widget import Widget

from daemon.ui.connection import LinkState

NO_VALUE = "—"


class StatusWidget(Widget):
    """Bound to the app's ``status`` and ``link`` (see PoiseDash.compose); a change redraws it."""

    status: reactive[dict] = reactive(dict)
    link: reactive[LinkState] = reactive(LinkState(False, "not connected yet"))


def number(value: object, spec: str = "+.3f") -> str:
    """A status number formatted by ``spec``, or a dash when it is missing or not finite."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return NO_VALUE
    return format(value, spec)


def wrap_deg(theta_rad: float) -> float:
    """An angle in degrees wrapped to (-180, 180] (0 = upright, 180 = hanging)."""
    deg = math.degrees(theta_rad) % 360.0
    return deg - 360.0 if deg > 180.0 else deg
