"""Live state in numbers: cart position and speed, pendulum angle and rate, drive, set-point."""

from __future__ import annotations

import math

from rich.table import Table
from rich.text import Text

from daemon.ui.palette import CART, GOOD, INK, MUTED, POLE, SETPOINT, WARN
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, number, wrap_deg

DRIVE_BAR_CELLS = 12


class Readouts(StatusWidget):
    def __init__(self, drive_unit: str, **kwargs):
        super().__init__(**kwargs)
        self.drive_unit = drive_unit

    def render(self) -> Table:
        s = self.status
        table = Table.grid(padding=(0, 1))
        table.add_column(style=MUTED)
        table.add_column(justify="right", style=f"bold {INK}")
        table.add_column(style=MUTED)
        table.add_column(justify="right", style=f"bold {INK}")
        table.add_column(style=MUTED)
        theta = s.get("theta_rad")
        theta_deg = number(wrap_deg(theta), "+.1f") if isinstance(theta, int | float) else NO_VALUE
        table.add_row(Text("cart", CART), number(s.get("x_m")), "m", number(s.get("v_mps")), "m/s")
        table.add_row(
            Text("pendulum", POLE), theta_deg, "°", number(s.get("omega_radps"), "+.2f"), "rad/s"
        )
        table.add_row(Text("set-point", SETPOINT), number(s.get("setpoint_m")), "m", "", "")
        table.add_row(
            "drive",
            number(s.get("drive"), "+.2f"),
            self.drive_unit,
            self._drive_bar(s.get("drive"), s.get("drive_limit")),
            f"±{number(s.get('drive_limit'), 'g')}",
        )
        return table

    def _drive_bar(self, drive: object, limit: object) -> Text:
        """A centred bar: filled to the left or right in proportion to drive / limit."""
        half = DRIVE_BAR_CELLS // 2
        if (
            not all(isinstance(v, int | float) and math.isfinite(v) for v in (drive, limit))
            or not limit
        ):
            return Text("·" * DRIVE_BAR_CELLS, MUTED)
        fraction = max(-1.0, min(1.0, drive / limit))
        filled = round(abs(fraction) * half)
        style = WARN if abs(fraction) > 0.8 else GOOD
        left = filled if fraction < 0 else 0
        right = filled if fraction > 0 else 0
        return Text.assemble(
            ("·" * (half - left), MUTED),
            ("█" * left, style),
            ("│", INK),
            ("█" * right, style),
            ("·" * (half - right), MUTED),
        )
