"""Scrolling plots of pendulum angle, cart position and drive over the last few seconds.

The history is taken from the status stream (keyed by the daemon's own ``t_s``),
so the plots show what the daemon saw, at the stream's rate. Each plot scales
itself symmetrically about zero to its largest recent value, never below a
minimum span, so small wobbles stay visible without a tiny one filling the plot.
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

from rich.table import Table
from rich.text import Text

from daemon.ui.braille import BrailleCanvas
from daemon.ui.palette import CART, GOOD, MUTED, POLE
from daemon.ui.widgets.base import StatusWidget, number, wrap_deg

WINDOW_S = 10.0
LABEL_CELLS = 14
MAX_POINTS = 2000


@dataclass(frozen=True)
class Trace:
    title: str
    unit: str
    colour: str
    min_span: float  # the plot shows at least ±min_span
    spec: str  # number format of the latest value
    wraps: bool = False  # values wrap round (angles): a jump of more than the span is not joined


TRACES = (
    Trace("angle", "°", POLE, 5.0, "+.1f", wraps=True),
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


def plot(values: list[tuple[float, float]], t_end_s: float, columns: int, rows: int, trace: Trace):
    """Braille plot of (t_s, value) over [t_end_s - WINDOW_S, t_end_s]; returns (text, span)."""
    canvas = BrailleCanvas(columns, rows)
    zero, line = canvas.layer(MUTED), canvas.layer(trace.colour)
    span = max([abs(v) for _, v in values] + [trace.min_span])
    mid_y = (canvas.height - 1) / 2.0
    for x in range(0, canvas.width, 4):
        canvas.dot(zero, x, mid_y)

    def point(t_s: float, value: float) -> tuple[float, float]:
        x = (canvas.width - 1) * (1.0 - (t_end_s - t_s) / WINDOW_S)
        return x, mid_y - value / span * mid_y

    previous = None
    previous_value = 0.0
    for t_s, value in values:
        here = point(t_s, value)
        if previous is None or (trace.wraps and abs(value - previous_value) > span):
            canvas.dot(line, *here)
        else:
            canvas.line(line, *previous, *here)
        previous, previous_value = here, value
    return canvas.to_text(), span


class Traces(StatusWidget):
    def __init__(self, drive_unit: str, **kwargs):
        super().__init__(**kwargs)
        self.drive_unit = drive_unit
        self.history: deque[tuple[float, float, float, float]] = deque(maxlen=MAX_POINTS)

    def watch_status(self, status: dict) -> None:
        sample = sample_of(status)
        if sample is None:
            return
        if self.history and sample[0] < self.history[-1][0]:
            self.history.clear()  # the daemon restarted: its clock began again
        self.history.append(sample)
        while self.history and self.history[0][0] < sample[0] - WINDOW_S:
            self.history.popleft()

    def render(self) -> Table:
        rows_each = max(self.size.height // len(TRACES), 1)
        columns = max(self.size.width - LABEL_CELLS - 1, 4)
        t_end = self.history[-1][0] if self.history else 0.0
        table = Table.grid(padding=(0, 1, 0, 0))
        table.add_column(width=LABEL_CELLS)
        table.add_column()
        for index, trace in enumerate(TRACES):
            unit = trace.unit or self.drive_unit
            values = [(sample[0], sample[index + 1]) for sample in self.history]
            text, span = plot(values, t_end, columns, rows_each, trace)
            latest = number(values[-1][1], trace.spec) if values else "—"
            label = Text.assemble(
                (f"{trace.title}\n", f"bold {trace.colour}"),
                (f"{latest} {unit}\n", "bold"),
                (f"±{span:.3g} {unit}", MUTED),
            )
            table.add_row(label, text)
        return table
