"""The bottom line: the e-stop key, the usual next step highlighted, then every other key.

Keys whose command is allowed now are bright, the rest dim. When the line is
too narrow for all of them, the least useful go first, a group at a time (the
dim keys, then recording, the set-point keys, the other allowed commands); the
e-stop key, the next step and quit always stay.
"""

from __future__ import annotations

from dataclasses import dataclass

from rich.text import Text

from daemon.ui.keys import (
    CENTRE,
    ESTOP_KEY_LABEL,
    NUDGE,
    OPERATOR_KEYS,
    QUIT,
    RECORD,
    suggested_key,
)
from daemon.ui.palette import ACCENT, ESTOP_STYLE, INK, MUTED
from daemon.ui.widgets.base import StatusWidget
from daemon.ui.widgets.state_panel import NEXT_STYLE

# Which keys give way first when the bar is too narrow (higher goes first).
ALWAYS, ALLOWED_COMMAND, SETPOINT, RECORDING, DIM = 0, 1, 2, 3, 4


@dataclass(frozen=True)
class Chip:
    label: str
    title: str
    style: str  # "next", "on" or "off"
    drop_rank: int

    @property
    def width(self) -> int:
        return len(self.label) + len(self.title) + 4


LABEL_STYLES = {
    "next": NEXT_STYLE,
    "on": f"bold {INK} on #3a3f4f",
    "off": f"{MUTED} on #23262f",
}
TITLE_STYLES = {"next": f"bold {ACCENT}", "on": INK, "off": MUTED}
ESTOP_CHIP = f" {ESTOP_KEY_LABEL} e-stop "


def fitted(chips: list[Chip], room: int) -> list[Chip]:
    """``chips`` less whole ranks of them, the first to give way first, until they fit ``room``."""
    for rank in (DIM, RECORDING, SETPOINT, ALLOWED_COMMAND):
        if sum(chip.width for chip in chips) <= room:
            break
        chips = [chip for chip in chips if chip.drop_rank != rank]
    return chips


class KeyBar(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return (
            tuple(status.get("allowed") or ()),
            status.get("next"),
            (status.get("recording") or {}).get("active"),
        )

    def chips(self) -> list[Chip]:
        """Every key after the e-stop, in the order shown: the next step first, quit last."""
        allowed = set(self.status.get("allowed") or []) if self.link.connected else set()
        suggested = suggested_key(self.status) if self.link.connected else None
        chips = []
        if suggested is not None:
            chips.append(Chip(suggested.label, suggested.title, "next", ALWAYS))
        for key in OPERATOR_KEYS:
            if key is not suggested:
                look = ("on", ALLOWED_COMMAND) if key.command in allowed else ("off", DIM)
                chips.append(Chip(key.label, key.title, *look))
        setpoint = ("on", SETPOINT) if "setpoint" in allowed else ("off", DIM)
        chips.append(Chip(NUDGE.label, NUDGE.title, *setpoint))
        chips.append(Chip(CENTRE.label, CENTRE.title, *setpoint))
        recording = (self.status.get("recording") or {}).get("active")
        title = f"end {RECORD.title}" if recording else RECORD.title
        look = ("on", RECORDING) if self.link.connected else ("off", DIM)
        chips.append(Chip(RECORD.label, title, *look))
        chips.append(Chip(QUIT.label, QUIT.title, "on", ALWAYS))
        return chips

    def render(self) -> Text:
        chips = fitted(self.chips(), self.size.width - len(ESTOP_CHIP) - 2)
        text = Text(no_wrap=True, overflow="ellipsis")
        text.append(ESTOP_CHIP, style=ESTOP_STYLE)
        text.append("  ")
        for chip in chips:
            text.append(f" {chip.label} ", style=LABEL_STYLES[chip.style])
            text.append(f" {chip.title} ", style=TITLE_STYLES[chip.style])
        return text
