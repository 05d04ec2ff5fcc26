"""The base of every dashboard panel: a widget that draws itself from the daemon's latest status."""

from __future__ import annotations

import math

from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget

from daemon.ui.connection import LinkState
from daemon.ui.palette import INK, MUTED

NO_VALUE = "—"


class StatusWidget(Widget):
    """Bound to the app's ``status`` and ``link`` (see PoiseDash.compose).

    A new status redraws the widget only if the part of it the widget shows
    (:meth:`shown_part`, kept in the reactive ``shown``) has changed: most
    panels stay still while the rig is at rest, which keeps the dashboard light.
    """

    status: reactive[dict] = reactive(dict, repaint=False)
    shown: reactive[object] = reactive(None)
    link: reactive[LinkState] = reactive(LinkState(False, "not connected yet"))

    def watch_status(self, status: dict) -> None:
        self.shown = self.shown_part(status)

    def shown_part(self, status: dict) -> object:
        """The part of the status this widget draws (the whole status unless a widget says less)."""
        return status


def number(value: object, spec: str = "+.3f") -> str:
    """A status number formatted by ``spec``, or a dash when it is missing or not finite."""
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        return NO_VALUE
    return format(value, spec)


def wrap_deg(theta_rad: float) -> float:
    """An angle in degrees wrapped to (-180, 180] (0 = upright, 180 = hanging)."""
    deg = math.degrees(theta_rad) % 360.0
    return deg - 360.0 if deg > 180.0 else deg


def key_value(text: Text, label: str, value: str, style: str = "") -> None:
    """Append one ``label  value`` line to ``text`` (labels muted, values bold)."""
    if text:
        text.append("\n")
    text.append(f"{label:<11}", MUTED)
    text.append(value, style or f"bold {INK}")
