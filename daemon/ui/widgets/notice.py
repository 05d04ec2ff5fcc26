"""One line under the state: the answer to the operator's last key (done, refused and why, not sent)."""

from __future__ import annotations

from rich.text import Text
from textual.reactive import reactive
from textual.widget import Widget

from daemon.ui.palette import BAD, GOOD, MUTED, WARN

SEVERITY_STYLES = {"ok": GOOD, "info": MUTED, "refused": WARN, "error": f"bold {BAD}"}


class Notice(Widget):
    message: reactive[str] = reactive("")
    severity: reactive[str] = reactive("info")

    def show(self, message: str, severity: str) -> None:
        self.message = message
        self.severity = severity

    def render(self) -> Text:
        return Text(self.message, SEVERITY_STYLES.get(self.severity, MUTED))
