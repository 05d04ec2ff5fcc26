"""The daemon's event log (state changes, refusals, trips), newest at the bottom."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, INK, MUTED, WARN
from daemon.ui.widgets.base import StatusWidget, number

KIND_STYLES = {"refused": WARN, "fault": BAD, "ignored": MUTED}


class EventLog(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("events")

    def render(self) -> Text:
        events = (self.status.get("events") or [])[-max(self.size.height, 1) :]
        text = Text(no_wrap=True, overflow="ellipsis")
        for index, event in enumerate(events):
            if index:
                text.append("\n")
            kind = str(event.get("kind", ""))
            text.append(f"{number(event.get('t_s'), '8.2f')} ", MUTED)
            text.append(f"{event.get('source', ''):<9} ", MUTED)
            text.append(str(event.get("text", "")), KIND_STYLES.get(kind, INK))
        return text
