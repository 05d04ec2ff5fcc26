"""The supervisor state at a glance: what the rig is doing, why it stopped, what the operator can do next."""

from __future__ import annotations

from rich.console import Group
from rich.text import Text

from daemon.ui.keys import KEYS_BY_COMMAND
from daemon.ui.palette import BAD, INK, MUTED, state_style
from daemon.ui.widgets.base import StatusWidget

STATE_MEANINGS: dict[str, str] = {
    "DISCONNECTED": "daemon up, no link to the rig",
    "IDLE": "rig linked, drive off",
    "HOMING": "finding the track ends",
    "READY": "armed: holding the cart at its set-point",
    "SWING_UP": "pumping the pendulum up",
    "BALANCE": "balancing upright",
    "STOPPING": "controlled stop under way",
    "EXCITE": "identification run",
    "FAULT": "fault latched: read the reason, then clear",
    "ESTOP": "emergency stop latched: clear it when safe",
}


class StatePanel(StatusWidget):
    def shown_part(self, status: dict) -> object:
        return (status.get("state"), status.get("allowed"), status.get("faults"))

    def render(self) -> Group:
        if not self.link.connected:
            return self._unreachable()
        state = str(self.status.get("state", "?"))
        lines = [
            Text.assemble(
                (f"  {state}  ", state_style(state)), "  ", (STATE_MEANINGS.get(state, ""), INK)
            ),
        ]
        for fault in self.status.get("faults") or []:
            lines.append(Text(f"✖ {fault.get('reason', '')}", style=BAD))
        lines.append(self._next_steps())
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

    def _next_steps(self) -> Text:
        allowed = self.status.get("allowed") or []
        text = Text("next: ", style=MUTED)
        for command in allowed:
            key = KEYS_BY_COMMAND.get(command)
            if key is not None:
                text.append(f" {key.label} ", style="bold reverse")
                text.append(f" {key.title}  ")
        if "setpoint" in allowed:
            text.append(" ←→ ", style="bold reverse")
            text.append(" set-point  ")
        if not allowed or allowed == ["estop"]:
            text.append("nothing but the e-stop", MUTED)
        return text
