"""Recording status: whether samples are being written, to which run, and whether any were dropped."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, number


class Recording(StatusWidget):
    def render(self) -> Table:
        rec = self.status.get("recording")
        table = Table.grid(padding=(0, 1))
        table.add_column(style=MUTED)
        table.add_column(style=f"bold {INK}")
        if not rec:
            table.add_row("recording", Text(NO_VALUE, MUTED))
            return table
        active = rec.get("active")
        table.add_row("recording", Text("● REC", f"bold {BAD}") if active else Text("○ off", MUTED))
        table.add_row("run", str(rec.get("run_id") or NO_VALUE))
        table.add_row("samples", number(rec.get("samples"), ",d"))
        dropped = rec.get("dropped")
        table.add_row(
            "dropped",
            Text(number(dropped, ",d"), BAD if isinstance(dropped, int) and dropped else GOOD),
        )
        return table
