"""The dashboard's keys: which key sends which command, and which of them need a confirmation.

The e-stop key is separate from the rest: it is bound with priority on the
application, so it works on every screen (modals included) and in every state.
"""

from __future__ import annotations

from dataclasses import dataclass

ESTOP_KEY = "space"
ESTOP_KEY_LABEL = "SPACE"
QUIT_KEY = "q"
SETPOINT_STEP_M = 0.02


@dataclass(frozen=True)
class OperatorKey:
    key: str  # Textual key name
    label: str  # how the key is shown
    command: str  # control API command it sends
    title: str  # short words for the key bar
    confirm: str = ""  # what the command will do; set for commands that start motion


OPERATOR_KEYS: tuple[OperatorKey, ...] = (
    OperatorKey(
        "a", "a", "arm", "arm", "The drive is powered and holds the cart at its set-point."
    ),
    OperatorKey("d", "d", "disarm", "disarm"),
    OperatorKey(
        "h",
        "h",
        "home",
        "home",
        "The drive is powered: the cart runs to each track end, then to the centre.",
    ),
    OperatorKey(
        "u",
        "u",
        "swing_up",
        "swing",
        "The cart shuttles along the track to pump the pendulum up, then balances it.",
    ),
    OperatorKey(
        "b",
        "b",
        "balance",
        "balance",
        "The controller catches the pendulum where it is (held near upright) and balances it.",
    ),
    OperatorKey("s", "s", "stop", "stop"),
    OperatorKey("c", "c", "reset", "clear"),
)

KEYS_BY_COMMAND = {key.command: key for key in OPERATOR_KEYS}

# Set-point nudges and recording are shown in the key bar next to the commands above.
NUDGE_LEFT_KEY = "left"
NUDGE_RIGHT_KEY = "right"
CENTRE_KEY = "0"
RECORD_KEY = "r"
