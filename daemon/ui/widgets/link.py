"""Health of the daemon's link to the rig and of its event loop: rate, latency, loop lag, read gaps, errors.

Loop lag (how late the daemon's event loop ran its ticks: p99 and max of the
recent ones) is shown against the loop-stall limit, and the longest wait
between two reads of the port against the link timeout ("/ 30 ms" is the
limit); each figure is amber with under 30 % of its limit left and red under
10 %, as the interlock margins (palette.margin_style).
"""

from __future__ import annotations

from rich.text import Text

from daemon.ui.palette import BAD, GOOD, INK, MUTED, WARN, margin_style
from daemon.ui.widgets.base import StatusWidget, key_value, number


def against(value: object, limit: object) -> str:
    """The colour of a figure that trips something when it reaches ``limit``."""
    if not isinstance(value, int | float) or not isinstance(limit, int | float):
        return MUTED
    return margin_style(limit - value, limit)


def count_style(count: object) -> str:
    """Error counters: amber once anything has been counted."""
    return f"bold {WARN}" if isinstance(count, int) and count > 0 else f"bold {INK}"


class LinkHealth(StatusWidget):
    # The frame counters change with every status; twice a second is plenty to read them.
    MIN_REDRAW_INTERVAL_S = 0.5

    def shown_part(self, status: dict) -> object:
        return (status.get("link"), status.get("loop"))

    def render(self) -> Text:
        link = self.status.get("link")
        text = Text(no_wrap=True, overflow="ellipsis")
        if not link:
            key_value(text, "rig link", "—", MUTED)
            return text
        up = link.get("connected")
        key_value(text, "rig link", "up" if up else "DOWN", GOOD if up else f"bold {BAD}")
        text.append(f" · {number(link.get('rate_hz'), '.0f')} Hz", f"bold {INK}")
        p50, p99 = (
            number(link.get("latency_us_p50"), ".0f"),
            number(link.get("latency_us_p99"), ".0f"),
        )
        key_value(text, "latency", f"{p50} / {p99} µs (p50/p99)")
        loop = self.status.get("loop") or {}
        stall, lag_p99, lag_max = (
            loop.get("stall_limit_ms"), loop.get("lag_ms_p99"), loop.get("lag_ms_max")
        )
        key_value(text, "loop lag", "p99 ", MUTED)
        text.append(number(lag_p99, ".1f"), f"bold {against(lag_p99, stall)}")
        text.append("  max ", MUTED)
        text.append(number(lag_max, ".1f"), f"bold {against(lag_max, stall)}")
        text.append(f" / {number(stall, '.0f')} ms", MUTED)
        gap, timeout = loop.get("read_gap_ms_worst"), loop.get("link_timeout_ms")
        key_value(text, "read gap", "worst ", MUTED)
        text.append(number(gap, ".1f"), f"bold {against(gap, timeout)}")
        text.append(f" / {number(timeout, '.0f')} ms", MUTED)
        gaps, crc = link.get("gaps"), link.get("crc_failures")
        key_value(text, "gaps", number(gaps, ",d"), count_style(gaps))
        text.append("  CRC fails ", MUTED)
        text.append(number(crc, ",d"), count_style(crc))
        rx, tx = number(link.get("frames_rx"), ",d"), number(link.get("frames_tx"), ",d")
        key_value(text, "frames", f"{rx} in, {tx} out")
        return text
