"""What a terminal too small for the dashboard shows instead: the state, the size needed, the keys that still act."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.keys import ESTOP_KEY_LABEL, QUIT_KEY
from daemon.ui.layout import enlarge_request
from daemon.ui.palette import ESTOP_STYLE, INK, MUTED, state_style
from daemon.ui.widgets.base import StatusWidget


class TooSmall(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("state")

    def render(self) -> Text:
        state = str(self.status.get("state") or "") if self.link.connected else "NO DAEMON"
        text = Text()
        text.append(f" {state} ", state_style(state))
        text.append("\n\n")
        text.append(enlarge_request(self.app.size), f"bold {INK}")
        text.append("\n\n")
        text.append(f" {ESTOP_KEY_LABEL} ", ESTOP_STYLE)
        text.append(f" e-stop works as always; {QUIT_KEY} quits. ", INK)
        text.append("Commands that start motion are not sent until the dashboard fits.", MUTED)
        return text
