"""The top line: the program, the rig, the connection to the daemon, and the e-stop key."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text

from daemon.ui.keys import ESTOP_KEY_LABEL
from daemon.ui.palette import ACCENT, BAD, ESTOP_STYLE, GOOD, MUTED
from daemon.ui.widgets.base import StatusWidget


class Masthead(StatusWidget):
    def render(self) -> Table:
        rig = self.status.get("rig") or {}
        title = Text.assemble(("◆ POISE ", f"bold {ACCENT}"))
        if rig:
            title.append(f" {rig.get('id', '')} ", "bold")
            title.append(str(rig.get("name", "")), MUTED)
        if self.link.connected:
            daemon = Text.assemble(("● ", GOOD), (f"daemon {self.link.detail}", MUTED))
        else:
            daemon = Text.assemble(("○ ", BAD), ("daemon unreachable", f"bold {BAD}"))
        estop = Text(f" {ESTOP_KEY_LABEL} ▸ E-STOP ", style=ESTOP_STYLE)
        grid = Table.grid(expand=True)
        grid.add_column(ratio=1)
        grid.add_column(justify="right")
        grid.add_column(justify="right")
        grid.add_row(title, daemon, Text("  ").append_text(estop))
        return grid
