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
        keys = ("x_m", "v_mps", "theta_rad", "omega_radps", "setpoint_m", "drive", "drive_limit")
        return tuple(status.get(key) for key in keys)

    def render(self) -> Text:
        s = self.status
        theta = s.get("theta_rad")
        theta_deg = number(wrap_deg(theta), "+.1f") if isinstance(theta, int | float) else NO_VALUE
        text = Text(no_wrap=True, overflow="crop")
        self._row(
            text, "cart", CART, [(number(s.get("x_m")), "m"), (number(s.get("v_mps")), "m/s")]
        )
        self._row(
            text,
            "pendulum",
            POLE,
            [(theta_deg, "° "), (number(s.get("omega_radps"), "+.2f"), "rad/s")],
        )
        self._row(text, "set-point", SETPOINT, [(number(s.get("setpoint_m")), "m")])
        self._row(text, "drive", INK, [(number(s.get("drive"), "+.2f"), self.drive_unit)])
        text.append(" ")
        text.append_text(self._drive_bar(s.get("drive"), s.get("drive_limit")))
        text.append(f" ±{number(s.get('drive_limit'), 'g')}", MUTED)
        return text

    @staticmethod
    def _row(text: Text, label: str, colour: str, values: list[tuple[str, str]]) -> None:
        if text:
            text.append("\n")
        text.append(f"{label:<{LABEL_CELLS}}", colour)
        for value, unit in values:
            text.append(f"{value:>{VALUE_CELLS}}", f"bold {INK}")
            text.append(f" {unit:<5}", MUTED)

    @staticmethod
    def _drive_bar(drive: object, limit: object) -> Text:
        """A centred bar: filled to the left or right in proportion to drive / limit."""
        half = DRIVE_BAR_CELLS // 2
        values = (drive, limit)
        if not all(isinstance(v, int | float) and math.isfinite(v) for v in values) or not limit:
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
