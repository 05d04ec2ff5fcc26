"""The top line: the program, the rig, the connection to the daemon, and the e-stop key."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.keys import ESTOP_KEY_LABEL
from daemon.ui.palette import ACCENT, BAD, ESTOP_STYLE, GOOD, MUTED
from daemon.ui.widgets.base import StatusWidget


class Masthead(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("rig")

    def render(self) -> Text:
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
        # The e-stop key is never crowded out: the daemon's address gives way first, then the
        # rig's name.
        room = self.size.width - len(estop) - 2
        title.truncate(max(room, 1), overflow="ellipsis")
        daemon_room = room - len(title) - 2
        daemon = daemon if daemon_room >= 3 else Text()  # "● …" at the least
        daemon.truncate(max(daemon_room, 1), overflow="ellipsis")
        gap = max(self.size.width - len(title) - len(daemon) - len(estop) - 2, 1)
        return Text.assemble(title, " " * gap, daemon, "  ", estop, no_wrap=True, overflow="crop")
