"""Poise's dashboard colours, in one place: the stylesheet (dash.tcss) uses the same values.

Supervisor states are coloured by what they mean for someone standing at the rig:
cool colours when nothing is powered, warm colours when the drive may move the cart,
red when something is latched.
"""

from __future__ import annotations

from daemon.supervisor.states import MOTION_STATES

INK = "#e4e0d4"  # plain text on the panels
MUTED = "#8a8778"  # labels, units, inactive things
ACCENT = "#6fc2b4"  # headings and the rig's outline
TRACK = "#8a8778"
CART = "#d9b36c"
POLE = "#6fc2b4"
SETPOINT = "#b58ad6"
GOOD = "#8fc46a"
WARN = "#e0a04a"
BAD = "#e5604f"
ESTOP_STYLE = "bold #fff4e8 on #b3261e"  # the e-stop key, wherever it is shown

STATE_COLOURS: dict[str, str] = {
    "DISCONNECTED": MUTED,
    "IDLE": "#8fb4d8",
    "HOMING": "#b58ad6",
    "READY": "#d9b36c",
    "SWING_UP": "#e0a04a",
    "BALANCE": "#8fc46a",
    "STOPPING": "#e08a4a",
    "EXCITE": "#d98ac0",
    "FAULT": BAD,
    "ESTOP": "#b3261e",
}

#: States in which the drive may be moving the cart.
MOTION_STATE_NAMES = frozenset(state.name for state in MOTION_STATES)


def state_style(state: str) -> str:
    """A state's badge: dark text on the state's colour."""
    return f"bold #16181f on {STATE_COLOURS.get(state, INK)}"


def margin_style(margin: float | None, limit: float | None) -> str:
    """Green with room to spare, amber under 30 % of the limit left, red under 10 % or past it."""
    if margin is None or limit is None or limit == 0.0:
        return MUTED
    fraction = margin / abs(limit)
    if fraction < 0.1:
        return BAD
    if fraction < 0.3:
        return WARN
    return GOOD
