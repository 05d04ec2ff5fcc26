"""The bottom line: every key, bright when its command is allowed now, dim when it is not."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.keys import ESTOP_KEY_LABEL, OPERATOR_KEYS
from daemon.ui.palette import ESTOP_STYLE, INK, MUTED
from daemon.ui.widgets.base import StatusWidget


class KeyBar(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return (status.get("allowed"), (status.get("recording") or {}).get("active"))

    def render(self) -> Text:
        allowed = set(self.status.get("allowed") or []) if self.link.connected else set()
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(f" {ESTOP_KEY_LABEL} e-stop ", style=ESTOP_STYLE)
        text.append("  ")
        for key in OPERATOR_KEYS:
            self._key(text, key.label, key.title, key.command in allowed)
        self._key(text, "←→", "nudge", "setpoint" in allowed)
        self._key(text, "0", "centre", "setpoint" in allowed)
        recording = (self.status.get("recording") or {}).get("active")
        self._key(text, "r", "end rec" if recording else "rec", self.link.connected)
        self._key(text, "q", "quit", True)
        return text

    @staticmethod
    def _key(text: Text, label: str, title: str, enabled: bool) -> None:
        text.append(
            f" {label} ", style=f"bold {INK} on #3a3f4f" if enabled else f"{MUTED} on #23262f"
        )
        text.append(f" {title} ", style=INK if enabled else MUTED)
