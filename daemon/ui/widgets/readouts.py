"""Live state in numbers: cart position and speed, pendulum angle and rate, drive, set-point."""

from __future__ import annotations

import math

from rich.text import Text

from daemon.ui.palette import CART, GOOD, INK, MUTED, POLE, SETPOINT, WARN
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, number, wrap_deg

DRIVE_BAR_CELLS = 12
LABEL_CELLS = 10
VALUE_CELLS = 8


class Readouts(StatusWidget):
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

    def render(self) -> Text:
        text = Text(no_wrap=True, overflow="crop")
        if self.shown is None:
            return text
        x, v, theta_deg, omega, setpoint, drive, bar, limit = self.shown
        self._row(text, "cart", CART, [(x, "m"), (v, "m/s")])
        self._row(text, "pendulum", POLE, [(theta_deg, "° "), (omega, "rad/s")])
        self._row(text, "set-point", SETPOINT, [(setpoint, "m")])
        self._row(text, "drive", INK, [(drive, self.drive_unit)])
        text.append(" ")
        text.append_text(drive_bar(bar))
        text.append(f" ±{limit}", MUTED)
        return text

    @staticmethod
    def _row(text: Text, label: str, colour: str, values: list[tuple[str, str]]) -> None:
        if text:
            text.append("\n")
        text.append(f"{label:<{LABEL_CELLS}}", colour)
        for value, unit in values:
            text.append(f"{value:>{VALUE_CELLS}}", f"bold {INK}")
            text.append(f" {unit:<5}", MUTED)


def drive_bar_cells(drive: object, limit: object) -> tuple[int, int, bool] | None:
    """(cells filled left, cells filled right, near the limit) of the drive bar, or None."""
    values = (drive, limit)
    if not all(isinstance(v, int | float) and math.isfinite(v) for v in values) or not limit:
        return None
    fraction = max(-1.0, min(1.0, drive / limit))
    filled = round(abs(fraction) * (DRIVE_BAR_CELLS // 2))
    return (filled if fraction < 0 else 0, filled if fraction > 0 else 0, abs(fraction) > 0.8)


def drive_bar(cells: tuple[int, int, bool] | None) -> Text:
    """A centred bar: filled to the left or right in proportion to drive / limit."""
    if cells is None:
        return Text("·" * DRIVE_BAR_CELLS, MUTED)
    half = DRIVE_BAR_CELLS // 2
    left, right, near_limit = cells
    style = WARN if near_limit else GOOD
    return Text.assemble(
        ("·" * (half - left), MUTED),
        ("█" * left, style),
        ("│", INK),
        ("█" * right, style),
        ("·" * (half - right), MUTED),
    )
