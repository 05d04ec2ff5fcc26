"""Live state in numbers: cart position and speed, pendulum angle and rate, drive, set-point."""

from __future__ import annotations

import math

from daemon.ui.braille import Run
from daemon.ui.palette import CART, GOOD, INK, MUTED, POLE, SETPOINT, WARN
from daemon.ui.widgets.base import NO_VALUE, DrawnWidget, number, wrap_deg

DRIVE_BAR_CELLS = 12
LABEL_CELLS = 10
VALUE_CELLS = 8


class Readouts(DrawnWidget):
    def __init__(self, drive_unit: str, **kwargs):
        super().__init__(**kwargs)
        self.drive_unit = drive_unit

    def shown_part(self, status: dict) -> object:
        """Every value as printed, and the drive bar's cells: what changes the panel, no more."""
        theta = status.get("theta_rad")
        return (
            number(status.get("x_m")),
            number(status.get("v_mps")),
            number(wrap_deg(theta), "+.1f") if isinstance(theta, int | float) else NO_VALUE,
            number(status.get("omega_radps"), "+.2f"),
            number(status.get("setpoint_m")),
            number(status.get("drive"), "+.2f"),
            drive_bar_cells(status.get("drive"), status.get("drive_limit")),
            number(status.get("drive_limit"), "g"),
        )

    def draw(self) -> list[list[Run]]:
        if self.shown is None:
            return []
        x, v, theta_deg, omega, setpoint, drive, bar, limit = self.shown
        drive_row = self._row("drive", INK, [(drive, self.drive_unit)])
        drive_row += [(" ", None), *drive_bar(bar), (f" ±{limit}", MUTED)]
        return [
            self._row("cart", CART, [(x, "m"), (v, "m/s")]),
            self._row("pendulum", POLE, [(theta_deg, "° "), (omega, "rad/s")]),
            self._row("set-point", SETPOINT, [(setpoint, "m")]),
            drive_row,
        ]

    @staticmethod
    def _row(label: str, colour: str, values: list[tuple[str, str]]) -> list[Run]:
        row: list[Run] = [(f"{label:<{LABEL_CELLS}}", colour)]
        for value, unit in values:
            row += [(f"{value:>{VALUE_CELLS}}", f"bold {INK}"), (f" {unit:<5}", MUTED)]
        return row


def drive_bar_cells(drive: object, limit: object) -> tuple[int, int, bool] | None:
    """(cells filled left, cells filled right, near the limit) of the drive bar, or None."""
    values = (drive, limit)
    if not all(isinstance(v, int | float) and math.isfinite(v) for v in values) or not limit:
        return None
    fraction = max(-1.0, min(1.0, drive / limit))
    filled = round(abs(fraction) * (DRIVE_BAR_CELLS // 2))
    return (filled if fraction < 0 else 0, filled if fraction > 0 else 0, abs(fraction) > 0.8)


def drive_bar(cells: tuple[int, int, bool] | None) -> list[Run]:
    """A centred bar: filled to the left or right in proportion to drive / limit."""
    if cells is None:
        return [("·" * DRIVE_BAR_CELLS, MUTED)]
    half = DRIVE_BAR_CELLS // 2
    left, right, near_limit = cells
    style = WARN if near_limit else GOOD
    return [
        ("·" * (half - left), MUTED),
        ("█" * left, style),
        ("│", INK),
        ("█" * right, style),
        ("·" * (half - right), MUTED),
    ]
