"""Health of the daemon's link to the rig: sample rate, command latency, gaps, CRC failures."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, WARN
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, number


class LinkHealth(StatusWidget):
    def render(self) -> Table:
        link = self.status.get("link")
        table = Table.grid(padding=(0, 1))
        table.add_column(style=MUTED)
        table.add_column(style=f"bold {INK}", justify="right")
        table.add_column(style=MUTED)
        if not link:
            table.add_row("rig link", Text(NO_VALUE, MUTED), "")
            return table
        up = link.get("connected")
        table.add_row("rig link", Text("up", GOOD) if up else Text("DOWN", f"bold {BAD}"), "")
        table.add_row("rate", number(link.get("rate_hz"), ".0f"), "Hz")
        table.add_row(
            "latency",
            f"{number(link.get('latency_us_p50'), '.0f')} / {number(link.get('latency_us_p99'), '.0f')}",
            "µs p50/p99",
        )
        for key, label in (("gaps", "gaps"), ("crc_failures", "CRC fails")):
            count = link.get(key)
            style = WARN if isinstance(count, int) and count > 0 else INK
            table.add_row(label, Text(number(count, "d"), style), "")
        table.add_row(
            "frames",
            f"{number(link.get('frames_rx'), 'd')} in",
            f"{number(link.get('frames_tx'), 'd')} out",
        )
        return table
