"""Scrolling plots of pendulum angle, cart position and drive over the last few seconds.

The history is taken from the status stream (keyed by the daemon's own ``t_s``),
so the plots show what the daemon saw, at the stream's rate. Each plot scales
itself to its recent values, never below a minimum span, so small wobbles stay
visible without a tiny one filling the plot.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

from daemon.ui.braille import BrailleCanvas, Run
from daemon.ui.palette import CART, GOOD, MUTED, POLE
from daemon.ui.widgets.base import NO_VALUE, DrawnWidget, number, wrap_deg

WINDOW_S = 10.0
LABEL_CELLS = 14
MAX_POINTS = 2000


@dataclass(frozen=True)
class Trace:
    title: str
    unit: str
    colour: str
    min_span: float  # the plot shows at least ±min_span about its centre
    spec: str  # number format of the latest value
    turn: float | None = None  # values wrap round by this much (angles): plotted unwrapped


TRACES = (
    Trace("angle", "°", POLE, 5.0, "+.1f", turn=360.0),
    Trace("position", "m", CART, 0.05, "+.3f"),
    Trace("drive", "", GOOD, 1.0, "+.2f"),
)


def sample_of(status: dict) -> tuple[float, float, float, float] | None:
    """(t_s, angle in degrees, x_m, drive) from a status, or None if any is missing."""
    values = [status.get(key) for key in ("t_s", "theta_rad", "x_m", "drive")]
    if not all(isinstance(v, int | float) and math.isfinite(v) for v in values):
        return None
    t_s, theta, x_m, drive = values
    return (t_s, wrap_deg(theta), x_m, drive)


def unwrap(values: list[float], turn: float) -> list[float]:
    """Remove jumps of more than half a turn, so a pendulum hanging at ±180° plots as a flat line."""
    out: list[float] = []
    offset = 0.0
    for index, value in enumerate(values):
        if index:
            step = value - values[index - 1]
            offset -= turn * round(step / turn)
        out.append(value + offset)
    return out


def plot_range(values: list[float], trace: Trace) -> tuple[float, float, float]:
    """(low, high, guide): the shown range and the value of its dotted guide line.

    Plain traces are centred on zero (the guide); wrapping ones on their recent
    values, with the guide at the nearest half turn (upright or hanging).
    """
    if trace.turn is None:
        half = max([abs(v) for v in values] + [trace.min_span])
        return -half, half, 0.0
    if not values:
        return -trace.min_span, trace.min_span, 0.0
    centre = (max(values) + min(values)) / 2.0
    half = max((max(values) - min(values)) / 2.0, trace.min_span)
    guide = round(centre / (trace.turn / 2.0)) * trace.turn / 2.0
    return centre - half, centre + half, guide


def plot(
    points: list[tuple[float, float]], t_end_s: float, columns: int, rows: int, trace: Trace
) -> tuple[list[list[Run]], float, float]:
    """Braille plot of (t_s, value) over [t_end_s - WINDOW_S, t_end_s]: (rows, low, high)."""
    canvas = BrailleCanvas(columns, rows)
    guide_layer, line = canvas.layer(MUTED), canvas.layer(trace.colour)
    values = [value for _, value in points]
    if trace.turn is not None:
        values = unwrap(values, trace.turn)
    low, high, guide = plot_range(values, trace)
    bottom = canvas.height - 1

    def y_of(value: float) -> float:
        return bottom - (value - low) / (high - low) * bottom

    if low <= guide <= high:
        for x in range(0, canvas.width, 4):
            canvas.dot(guide_layer, x, y_of(guide))
    previous = None
    for (t_s, _), value in zip(points, values, strict=True):
        here = ((canvas.width - 1) * (1.0 - (t_end_s - t_s) / WINDOW_S), y_of(value))
        if previous is None:
            canvas.dot(line, *here)
        else:
            canvas.line(line, *previous, *here)
        previous = here
    return canvas.runs(), low, high


class Traces(DrawnWidget):
    # The plots scroll with every status; five redraws a second keep them smooth enough
    # at a fraction of the cost (they are the dashboard's largest drawing).
    MIN_REDRAW_INTERVAL_S = 0.2

    def __init__(self, drive_unit: str, **kwargs):
        super().__init__(**kwargs)
        self.drive_unit = drive_unit
        self.history: deque[tuple[float, float, float, float]] = deque(maxlen=MAX_POINTS)

    def shown_part(self, status: dict) -> object:
        return sample_of(status)

    def watch_status(self, status: dict) -> None:
        super().watch_status(status)
        sample = sample_of(status)
        if sample is None:
            return
        if self.history and sample[0] < self.history[-1][0]:
            self.history.clear()  # the daemon restarted: its clock began again
        self.history.append(sample)
        while self.history and self.history[0][0] < sample[0] - WINDOW_S:
            self.history.popleft()

    def draw(self) -> list[list[Run]]:
        rows_each = max(self.size.height // len(TRACES), 1)
        columns = max(self.size.width - LABEL_CELLS - 1, 4)
        t_end = self.history[-1][0] if self.history else 0.0
        rows: list[list[Run]] = []
        for index, trace in enumerate(TRACES):
            unit = trace.unit or self.drive_unit
            values = [(sample[0], sample[index + 1]) for sample in self.history]
            plot_rows, low, high = plot(values, t_end, columns, rows_each, trace)
            latest = number(values[-1][1], trace.spec) if values else NO_VALUE
            labels = [
                (trace.title, f"bold {trace.colour}"),
                (f"{latest} {unit}", "bold"),
                (f"{low:+.3g}…{high:+.3g}", MUTED),
            ]
            for row, runs in enumerate(plot_rows):
                label, style = labels[row] if row < len(labels) else ("", None)
                rows.append([(f"{label:<{LABEL_CELLS}.{LABEL_CELLS}} ", style), *runs])
        return rows
