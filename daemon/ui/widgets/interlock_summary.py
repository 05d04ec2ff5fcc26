"""The interlocks in two lines, for the compact layout: how many are armed, off or tripped, and the closest call.

The closest call is the armed interlock with the least room left, as a
fraction of its limit; a tripped interlock is named instead of counted.
"""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, margin_style
from daemon.ui.widgets.base import StatusWidget, number


def least_room(rows: list[dict]) -> dict | None:
    """The armed interlock whose margin is the smallest part of its limit (None if none is)."""
    armed = [
        row
        for row in rows
        if row.get("state") == "armed"
        and isinstance(row.get("margin"), int | float)
        and isinstance(row.get("limit"), int | float)
        and row["limit"] > 0
    ]
    return min(armed, key=lambda row: row["margin"] / row["limit"], default=None)


class InterlockSummary(StatusWidget):
    MIN_REDRAW_INTERVAL_S = 0.2

    def shown_part(self, status: dict) -> object:
        rows = status.get("interlocks") or []
        closest = least_room(rows)
        return (
            sum(row.get("state") == "armed" for row in rows),
            sum(row.get("state") == "inactive" for row in rows),
            tuple(row.get("name") for row in rows if row.get("state") == "tripped"),
            None
            if closest is None
            else (
                closest.get("name"),
                number(closest["margin"], "+.3f"),
                closest.get("unit", ""),
                margin_style(closest["margin"], closest["limit"]),
            ),
        )

    def render(self) -> Text:
        text = Text(no_wrap=True, overflow="ellipsis")
        if self.shown is None:
            return text
        armed, off, tripped, closest = self.shown
        text.append(f"● {armed} armed", GOOD)
        text.append(f"  ○ {off} off  ", MUTED)
        if tripped:
            text.append(f"✖ TRIPPED {', '.join(map(str, tripped))}", f"bold {BAD}")
        else:
            text.append("none tripped", INK)
        text.append("\nleast room ", MUTED)
        if closest is None:
            text.append("—", MUTED)
        else:
            name, margin, unit, style = closest
            text.append(f"{name} ", INK)
            text.append(f"{margin} {unit}", f"bold {style}")
        return text
