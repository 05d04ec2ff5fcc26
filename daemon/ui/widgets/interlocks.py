"""Every interlock the daemon reports: armed, tripped or inactive, its live value and margin to its limit."""

from __future__ import annotations

from daemon.ui.braille import Run
from daemon.ui.palette import BAD, GOOD, INK, MUTED, margin_style
from daemon.ui.widgets.base import DrawnWidget, number

MARGIN_BAR_CELLS = 10
NAME_CELLS = 24
STATE_MARKS = {
    "armed": ("● armed", GOOD),
    "tripped": ("✖ TRIPPED", f"bold {BAD}"),
    "inactive": ("○ off", MUTED),
}
HEADER = f"{'interlock':<{NAME_CELLS}}{'':<10}{'value':>8}{'limit':>8}{'margin':>9}  room"


def margin_cells(margin: object, limit: object) -> int | None:
    """Room left in bar cells: all of them when the value is zero, none at (or past) the limit."""
    if not isinstance(margin, int | float) or not isinstance(limit, int | float) or limit <= 0:
        return None
    return round(max(0.0, min(1.0, margin / limit)) * MARGIN_BAR_CELLS)


def margin_bar(cells: int | None, style: str) -> list[Run]:
    if cells is None:
        return [(" " * MARGIN_BAR_CELLS, None)]
    return [("▰" * cells, style), ("▱" * (MARGIN_BAR_CELLS - cells), MUTED)]


def shown_row(row: dict) -> tuple:
    """One interlock as printed: name, state, value, limit, margin, its colour, bar cells, unit."""
    margin, limit = row.get("margin"), row.get("limit")
    return (
        str(row.get("name", "?")),
        row.get("state"),
        number(row.get("value"), ".3f"),
        number(limit, ".3f"),
        number(margin, "+.3f"),
        margin_style(margin, limit),
        margin_cells(margin, limit),
        row.get("unit", ""),
    )


class Interlocks(DrawnWidget):
    MIN_REDRAW_INTERVAL_S = 0.2

    def shown_part(self, status: dict) -> object:
        return tuple(shown_row(row) for row in status.get("interlocks") or [])

    def draw(self) -> list[list[Run]]:
        rows: list[list[Run]] = [[(HEADER, f"bold {MUTED}")]]
        for name, state, value, limit, margin, style, cells, unit in self.shown or ():
            mark, mark_style = STATE_MARKS.get(state, (str(state), INK))
            rows.append(
                [
                    (f"{name:<{NAME_CELLS}}", INK),
                    (f"{mark:<10}", mark_style),
                    (f"{value:>8}", INK),
                    (f"{limit:>8}", MUTED),
                    (f"{margin:>9}  ", style),
                    *margin_bar(cells, style),
                    (f" {unit}", MUTED),
                ]
            )
        return rows
