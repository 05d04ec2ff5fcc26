"""Recording status: whether samples are being written, to which run, and whether any were dropped."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, MUTED
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, key_value, number


class Recording(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("recording")

    def render(self) -> Text:
        rec = self.status.get("recording")
        text = Text(no_wrap=True, overflow="ellipsis")
        if not rec:
            key_value(text, "recording", NO_VALUE, MUTED)
            return text
        active = rec.get("active")
        key_value(
            text, "recording", "● REC" if active else "○ off", f"bold {BAD}" if active else MUTED
        )
        key_value(text, "run", str(rec.get("run_id") or NO_VALUE))
        key_value(text, "samples", number(rec.get("samples"), ",d"))
        dropped = rec.get("dropped")
        key_value(
            text,
            "dropped",
            number(dropped, ",d"),
            BAD if isinstance(dropped, int) and dropped else GOOD,
        )
        return text
