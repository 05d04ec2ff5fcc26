"""A drawing of the rig: the track between its end stops, the soft limits, the cart, the pendulum.

Drawn in braille dots, which are close enough to square that one scale serves
both axes. The pendulum is drawn at a fixed length on screen (the status does not
carry it); its angle follows the angle convention: theta = 0 points up, and a
positive angle tips the top toward -x (left).
"""

from __future__ import annotations

import math

from daemon.ui.braille import BrailleCanvas, Run
from daemon.ui.palette import BAD, CART, MUTED, POLE, SETPOINT, TRACK, WARN
from daemon.ui.widgets.base import DrawnWidget, number

MARGIN_DOTS = 3
CART_WIDTH_DOTS = 12
CART_HEIGHT_DOTS = 5
DEFAULT_TRACK_M = 1.0


class RigView(DrawnWidget):
    def shown_part(self, status: dict) -> object:
        """Positions to the millimetre (as the scale prints x) and the angle to 0.01 rad
        (under a dot at the drawn pendulum's length), so noise below that redraws nothing."""
        x_m, theta, setpoint = (status.get(key) for key in ("x_m", "theta_rad", "setpoint_m"))
        return (
            round(x_m, 3) if isinstance(x_m, int | float) else None,
            round(theta, 2) if isinstance(theta, int | float) else None,
            round(setpoint, 3) if isinstance(setpoint, int | float) else None,
            status.get("state") in ("FAULT", "ESTOP"),
            status.get("rig"),
        )

    def draw(self) -> list[list[Run]]:
        columns, rows = self.size.width, max(self.size.height - 1, 2)
        canvas = BrailleCanvas(columns, rows)
        x_m, theta, setpoint, latched, rig = self.shown or (None, None, None, False, None)
        rig = rig or {}
        track_m = float(rig.get("track_length_m") or DEFAULT_TRACK_M)
        half_m = track_m / 2.0
        dots_per_m = (canvas.width - 2 * MARGIN_DOTS) / track_m
        centre_x = canvas.width / 2.0

        def to_x(x_m: float) -> float:
            return centre_x + x_m * dots_per_m

        pivot_y = canvas.height * 0.5
        track_y = pivot_y + CART_HEIGHT_DOTS
        self._draw_track(canvas, to_x, track_y, half_m, rig.get("soft_limit_m"))
        if x_m is not None and theta is not None:
            self._draw_cart_and_pendulum(canvas, to_x(x_m), pivot_y, track_y, theta, latched)
        if setpoint is not None:
            marker = canvas.layer(SETPOINT)
            sx = to_x(setpoint)
            canvas.line(marker, sx - 2, track_y + 3, sx, track_y + 1)
            canvas.line(marker, sx, track_y + 1, sx + 2, track_y + 3)
        left, right = f"−{half_m:.2f} m", f"+{half_m:.2f} m"
        middle = f"x {number(x_m)} m" if x_m is not None else ""
        gap = max(columns - len(left) - len(right) - len(middle), 2)
        scale = left + " " * (gap // 2) + middle + " " * (gap - gap // 2) + right
        return [*canvas.runs(), [(scale[:columns], MUTED)]]

    def _draw_track(self, canvas, to_x, track_y: float, half_m: float, soft_limit_m) -> None:
        track = canvas.layer(TRACK)
        canvas.line(track, to_x(-half_m), track_y, to_x(half_m), track_y)
        for end in (-half_m, half_m):
            canvas.line(track, to_x(end), track_y - 4, to_x(end), track_y + 2)
        if isinstance(soft_limit_m, int | float):
            limits = canvas.layer(WARN)
            for edge in (-soft_limit_m, soft_limit_m):
                for y in range(int(track_y) - 6, int(track_y) + 3, 2):
                    canvas.dot(limits, to_x(edge), y)

    def _draw_cart_and_pendulum(
        self, canvas, cart_x: float, pivot_y: float, track_y: float, theta: float, latched: bool
    ) -> None:
        cart = canvas.layer(BAD if latched else CART)
        half_w = CART_WIDTH_DOTS / 2.0
        canvas.rectangle(cart, cart_x - half_w, pivot_y, cart_x + half_w, track_y - 1)
        length = min(pivot_y - 1, canvas.width * 0.25)
        tip_x = cart_x - length * math.sin(theta)
        tip_y = pivot_y - length * math.cos(theta)
        pole = canvas.layer(POLE)
        canvas.line(pole, cart_x, pivot_y, tip_x, tip_y)
        for angle in range(0, 360, 30):
            canvas.dot(
                pole,
                tip_x + 1.5 * math.cos(math.radians(angle)),
                tip_y + 1.5 * math.sin(math.radians(angle)),
            )
