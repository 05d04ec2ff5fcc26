"""The supervisor state at a glance: what the rig is doing, what to do next, homing, why it stopped.

Lines, most urgent first: the state and what it means; the usual next step
(the same key the key bar highlights) and the other keys that act now; whether
the cart is homed, or how far homing has got; each latched fault with what it
most likely means and, when it keeps coming back, how often it has latched.
"""

from __future__ import annotations

from rich.console import Group
from rich.text import Text

from daemon.ui.keys import KEYS_BY_COMMAND, NUDGE, suggested_key
from daemon.ui.palette import ACCENT, BAD, GOOD, INK, MUTED, WARN, state_style
from daemon.ui.widgets.base import StatusWidget, number

STATE_MEANINGS: dict[str, str] = {
    "DISCONNECTED": "daemon up, no link to the rig",
    "IDLE": "rig linked, drive off",
    "HOMING": "finding the track ends",
    "READY": "armed: holding the cart at its set-point",
    "SWING_UP": "pumping the pendulum up",
    "BALANCE": "balancing upright",
    "STOPPING": "controlled stop under way",
    "EXCITE": "identification run",
    "FAULT": "fault latched, drive off: see below, then reset with c",
    "ESTOP": "emergency stop latched: reset with c when safe",
}
NEXT_STYLE = f"bold #16181f on {ACCENT}"  # the next step's key, here and in the key bar
LABEL_CELLS = 7


def homing_progress(homing: dict) -> str:
    """Where homing is, in words and metres: "seeking + end: 0.42 of 0.84 m"."""
    phase = homing.get("phase")
    travel = number(homing.get("travel_m"), ".2f")
    expected = homing.get("expected_travel_m")
    if phase == "seek_negative":
        return f"seeking − end: {travel} m"
    if phase == "seek_positive":
        return f"seeking + end: {travel} of {number(expected, '.2f')} m"
    if phase == "to_centre":
        half = expected / 2.0 if isinstance(expected, int | float) else None
        return f"to the centre: {travel} of {number(half, '.2f')} m"
    return str(homing.get("message") or phase or "")


def cart_line(status: dict) -> tuple[str, str]:
    """(words, style) for the cart's homing: progress while homing, the result once homed."""
    homing = status.get("homing") or {}
    if status.get("state") == "HOMING":
        return homing_progress(homing), f"bold {INK}"
    if status.get("homed"):
        measured = homing.get("measured_travel_m")
        if isinstance(measured, int | float):
            return f"homed · switches {measured:.4f} m apart", GOOD
        return f"homed · {homing.get('message') or 'centre set'}", GOOD
    if homing.get("phase") == "failed":
        return "not homed (the last homing failed)", WARN
    return "not homed", WARN


def fault_advice(fault: dict) -> str:
    """What a latched fault likely means and what to do; says so plainly when it keeps latching."""
    hint = str(fault.get("hint") or "")
    count = fault.get("count")
    if isinstance(count, int) and count > 1:
        name = fault.get("name") or "this fault"
        return f"{name} has latched {count} times" + (f": {hint}" if hint else "")
    return hint


class StatePanel(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return (
            status.get("state"),
            tuple(status.get("allowed") or ()),
            status.get("next"),
            cart_line(status),
            tuple((f.get("reason"), fault_advice(f)) for f in status.get("faults") or ()),
        )

    def render(self) -> Group:
        if not self.link.connected:
            return self._unreachable()
        state = str(self.status.get("state", "?"))
        lines = [
            Text.assemble(
                (f"  {state}  ", state_style(state)), "  ", (STATE_MEANINGS.get(state, ""), INK)
            ),
            *self._keys(),
        ]
        if state != "DISCONNECTED":
            words, style = cart_line(self.status)
            lines.append(Text.assemble(("cart".ljust(LABEL_CELLS + 1), MUTED), (words, style)))
        for fault in self.status.get("faults") or []:
            lines.append(Text(f"✖ {fault.get('reason', '')}", style=f"bold {BAD}"))
            advice = fault_advice(fault)
            if advice:
                lines.append(Text(f"  {advice}", style=WARN))
        return Group(*lines)

    def _unreachable(self) -> Group:
        detail = self.link.detail
        if self.link.retry_in_s:
            detail += f"; retry {self.link.attempts} in {self.link.retry_in_s:.1f} s"
        return Group(
            Text.assemble(("  NO DAEMON  ", f"bold {INK} on #4a463c"), "  ", ("reconnecting", INK)),
            Text(detail, style=MUTED),
            Text(
                "The daemon keeps its own watchdogs; the hardware e-stop always works.", style=MUTED
            ),
        )

    def _keys(self) -> list[Text]:
        """The "next" line (the usual next step, highlighted) and the "also" line (other keys)."""
        allowed = self.status.get("allowed") or []
        suggested = suggested_key(self.status)
        others = [
            key
            for command in allowed
            if (key := KEYS_BY_COMMAND.get(command)) is not None and key is not suggested
        ]
        lines = []
        if suggested is not None:
            lines.append(
                Text.assemble(
                    ("next".ljust(LABEL_CELLS), MUTED),
                    (f" {suggested.label} ", NEXT_STYLE),
                    (f" {suggested.title}", f"bold {ACCENT}"),
                )
            )
        keys = [(key.label, key.title) for key in others]
        if "setpoint" in allowed:
            keys.append((NUDGE.label, "set-point"))
        if not keys and suggested is not None:
            return lines
        also = Text(("also" if suggested else "keys").ljust(LABEL_CELLS), style=MUTED)
        for index, (label, title) in enumerate(keys):
            also.append("  " if index else "")
            also.append(f" {label} ", style=f"bold {INK} on #3a3f4f")
            also.append(f" {title}", style=INK)
        if not keys:
            also.append("nothing but the e-stop", MUTED)
        lines.append(also)
        return lines
