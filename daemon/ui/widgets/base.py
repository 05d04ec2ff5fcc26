"""The base of every dashboard panel: a widget that draws itself from the daemon's latest status."""

from __future__ import annotations

import math
import time
from typing import ClassVar

from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.reactive import reactive
from textual.strip import Strip
from textual.widget import Widget

from daemon.ui.braille import Run
from daemon.ui.connection import LinkState
from daemon.ui.palette import INK, MUTED

NO_VALUE = "—"
REDRAW_SLACK = 0.75


class StatusWidget(Widget):
    """Bound to the app's ``status`` and ``link`` (see PoiseDash.compose).

    A new status redraws the widget only if the part of it the widget shows
    (:meth:`shown_part`, kept in ``shown``) has changed: panels that show
    numbers as they are printed stay still while the printed digits do, which
    keeps the dashboard light. A panel whose content changes with every status
    (a counter, a scrolling plot) sets ``MIN_REDRAW_INTERVAL_S``: it is then
    redrawn at most about that often, always with the newest status. Redraws
    happen as status lines arrive (a change left over is drawn with a later
    line), so the panels that change together are drawn in one screen update.
    """

    MIN_REDRAW_INTERVAL_S: ClassVar[float] = 0.0

    status: reactive[dict] = reactive(dict, repaint=False)
    shown: reactive[object] = reactive(None, repaint=False)
    link: reactive[LinkState] = reactive(LinkState(False, "not connected yet"))

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self._drawn_at_s = -math.inf
        self._redraw_due = False

    def watch_status(self, status: dict) -> None:
        self.shown = self.shown_part(status)
        if self._redraw_due:
            self._redraw_if_time()

    def watch_shown(self) -> None:
        self._redraw_due = True

    def _redraw_if_time(self) -> None:
        # Status lines come at a steady rate, with some jitter: a redraw due at the interval
        # goes with the line nearest to it rather than waiting for the one after.
        now_s = time.monotonic()
        if now_s - self._drawn_at_s >= REDRAW_SLACK * self.MIN_REDRAW_INTERVAL_S:
            self._redraw_due = False
            self._drawn_at_s = now_s
            self.refresh()

    def shown_part(self, status: dict) -> object:
        """The part of the status this widget draws (the whole status unless a widget says less)."""
        return status


class DrawnWidget(StatusWidget):
    """A panel drawn line by line (Textual's line API) from rows of (characters, style) runs.

    For the braille drawings, which change with nearly every status: their rows
    go straight into strips, not through a rich Text that Textual would convert
    and lay out again. Rows are drawn again only when ``shown`` or the size changes.
    """

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self._drawn_for: tuple[object, object] | None = None
        self._strips: list[Strip] = []

    def draw(self) -> list[list[Run]]:
        """The panel's rows, as many as its height, each as wide as the panel."""
        raise NotImplementedError

    def render_line(self, y: int) -> Strip:
        base = self.visual_style.rich_style
        if self._drawn_for != (self.shown, self.size):
            self._drawn_for = (self.shown, self.size)
            self._strips = [
                Strip([Segment(text, as_style(style)) for text, style in row]).apply_style(base)
                for row in self.draw()
            ]
        if y < len(self._strips):
            return self._strips[y]
        return Strip.blank(self.size.width, base)


def as_style(style: Style | str | None) -> Style | None:
    """A run's style as a rich Style (style strings are parsed once: Style.parse is cached)."""
    return Style.parse(style) if isinstance(style, str) else style


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
