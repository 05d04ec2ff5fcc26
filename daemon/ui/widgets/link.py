"""Health of the daemon's link to the rig: sample rate, command latency, gaps, CRC failures."""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, WARN
from daemon.ui.widgets.base import StatusWidget, key_value, number


class LinkHealth(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return status.get("link")

    def render(self) -> Text:
        link = self.status.get("link")
        text = Text(no_wrap=True, overflow="ellipsis")
        if not link:
            key_value(text, "rig link", "—", MUTED)
            return text
        up = link.get("connected")
        key_value(text, "rig link", "up" if up else "DOWN", GOOD if up else f"bold {BAD}")
        key_value(text, "rate", f"{number(link.get('rate_hz'), '.0f')} Hz")
        p50, p99 = (
            number(link.get("latency_us_p50"), ".0f"),
            number(link.get("latency_us_p99"), ".0f"),
        )
        key_value(text, "latency", f"{p50} / {p99} µs (p50/p99)")
        for key, label in (("gaps", "gaps"), ("crc_failures", "CRC fails")):
            count = link.get(key)
            key_value(
                text, label, number(count, ",d"), WARN if isinstance(count, int) and count else INK
            )
        rx, tx = number(link.get("frames_rx"), ",d"), number(link.get("frames_tx"), ",d")
        key_value(text, "frames", f"{rx} in, {tx} out")
        return text
