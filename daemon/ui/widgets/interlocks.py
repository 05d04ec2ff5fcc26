"""Every interlock the daemon reports: armed, tripped or inactive, its live value and margin to its limit."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, margin_style
from daemon.ui.widgets.base import StatusWidget, number

MARGIN_BAR_CELLS = 10
STATE_MARKS = {
    "armed": Text("● armed", GOOD),
    "tripped": Text("✖ TRIPPED", f"bold {BAD}"),
    "inactive": Text("○ off", MUTED),
}


def margin_bar(margin: object, limit: object) -> Text:
    """Room left as a bar: full when the value is zero, empty at (or past) the limit."""
    if not isinstance(margin, int | float) or not isinstance(limit, int | float) or limit <= 0:
        return Text("")
    filled = round(max(0.0, min(1.0, margin / limit)) * MARGIN_BAR_CELLS)
    style = margin_style(margin, limit)
    return Text.assemble(("▰" * filled, style), ("▱" * (MARGIN_BAR_CELLS - filled), MUTED))


class Interlocks(StatusWidget):
    def render(self) -> Table:
        table = Table(
            expand=True, box=None, padding=(0, 1), header_style=f"bold {MUTED}", show_edge=False
        )
        table.add_column("interlock", style=INK, no_wrap=True)
        table.add_column("", no_wrap=True)
        table.add_column("value", justify="right", no_wrap=True)
        table.add_column("limit", justify="right", style=MUTED, no_wrap=True)
        table.add_column("margin", justify="right", no_wrap=True)
        table.add_column("", no_wrap=True)
        table.add_column("", style=MUTED, no_wrap=True)
        for row in self.status.get("interlocks") or []:
            margin, limit = row.get("margin"), row.get("limit")
            table.add_row(
                str(row.get("name", "?")),
                STATE_MARKS.get(row.get("state"), Text(str(row.get("state")))),
                number(row.get("value"), ".3g"),
                number(limit, ".3g"),
                Text(number(margin, "+.3g"), margin_style(margin, limit)),
                margin_bar(margin, limit),
                str(row.get("unit", "")),
            )
        return table
