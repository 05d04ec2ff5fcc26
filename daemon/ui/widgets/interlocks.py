"""Every interlock the daemon reports: armed, tripped or inactive, its live value and margin to its limit."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, margin_style
from daemon.ui.widgets.base import StatusWidget, number

MARGIN_BAR_CELLS = 10
NAME_CELLS = 24
STATE_MARKS = {
    "armed": ("● armed", GOOD),
    "tripped": ("✖ TRIPPED", f"bold {BAD}"),
    "inactive": ("○ off", MUTED),
}
HEADER = f"{'interlock':<{NAME_CELLS}}{'':<10}{'value':>8}{'limit':>8}{'margin':>9}  room"


def margin_bar(margin: object, limit: object) -> Text:
    """Room left as a bar: full when the value is zero, empty at (or past) the limit."""
    if not isinstance(margin, int | float) or not isinstance(limit, int | float) or limit <= 0:
        return Text(" " * MARGIN_BAR_CELLS)
    filled = round(max(0.0, min(1.0, margin / limit)) * MARGIN_BAR_CELLS)
    style = margin_style(margin, limit)
    return Text.assemble(("▰" * filled, style), ("▱" * (MARGIN_BAR_CELLS - filled), MUTED))


class Interlocks(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("interlocks")

    def render(self) -> Text:
        text = Text(HEADER, style=f"bold {MUTED}", no_wrap=True, overflow="crop")
        for row in self.status.get("interlocks") or []:
            margin, limit = row.get("margin"), row.get("limit")
            mark, mark_style = STATE_MARKS.get(row.get("state"), (str(row.get("state")), INK))
            text.append(f"\n{row.get('name', '?')!s:<{NAME_CELLS}}", INK)
            text.append(f"{mark:<10}", mark_style)
            text.append(f"{number(row.get('value'), '.3f'):>8}", INK)
            text.append(f"{number(limit, '.3f'):>8}", MUTED)
            text.append(f"{number(margin, '+.3f'):>9}  ", margin_style(margin, limit))
            text.append_text(margin_bar(margin, limit))
            text.append(f" {row.get('unit', '')}", MUTED)
        return text
