"""Recording status: whether samples are being written, to which run, and whether any were dropped."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED
from daemon.ui.widgets.base import NO_VALUE, StatusWidget, key_value, number


class Recording(StatusWidget):
    # The sample count changes with every status; twice a second is plenty to read it.
    MIN_REDRAW_INTERVAL_S = 0.5

    def shown_part(self, status: dict) -> object:
        return status.get("recording")

    def render(self) -> Text:
        rec = self.status.get("recording")
        text = Text(no_wrap=True, overflow="ellipsis")
        if not rec:
            key_value(text, "recording", NO_VALUE, MUTED)
            return text
        active = rec.get("active")
        state, style = ("● REC", f"bold {BAD}") if active else ("○ off", MUTED)
        key_value(text, "recording", state, style)
        text.append(f" · run {rec.get('run_id') or NO_VALUE}", f"bold {INK}")
        key_value(text, "samples", number(rec.get("samples"), ",d"))
        dropped = rec.get("dropped")
        text.append("  dropped ", MUTED)
        text.append(number(dropped, ",d"), BAD if isinstance(dropped, int) and dropped else GOOD)
        return text
