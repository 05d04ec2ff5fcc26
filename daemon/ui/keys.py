"""The dashboard's keys: which key sends which command, which of them need a confirmation, what each does.

The e-stop key is separate from the rest: it is bound with priority on the
application, so it works on every screen (modals included) and in every state.
The key bar, the state panel's "next" line and README's key table are all made
from the tables here (``python -m daemon.ui.keys`` prints README's table).
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
    meaning: str  # what it does, for README's key table
    confirm: str = ""  # what the command will do; set for commands that start motion


@dataclass(frozen=True)
class OtherKey:
    """A key that is not one operator command: set-point nudges, recording, quitting."""

    label: str
    title: str
    meaning: str


OPERATOR_KEYS: tuple[OperatorKey, ...] = (
    OperatorKey(
        "a",
        "a",
        "arm",
        "arm",
        "power the drive and hold the cart at the centre (READY)",
        "The drive is powered and holds the cart at its set-point.",
    ),
    OperatorKey("d", "d", "disarm", "disarm", "drive off (from READY)"),
    OperatorKey(
        "h",
        "h",
        "home",
        "home",
        "find the track ends and the centre (arming needs it)",
        "The drive is powered: the cart runs to each track end, then to the centre.",
    ),
    OperatorKey(
        "u",
        "u",
        "swing_up",
        "swing",
        "pump the pendulum up, then catch and balance it",
        "The cart shuttles along the track to pump the pendulum up, then balances it.",
    ),
    OperatorKey(
        "b",
        "b",
        "balance",
        "balance",
        "catch and balance a pendulum held near upright",
        "The controller catches the pendulum where it is (held near upright) and balances it.",
    ),
    OperatorKey("s", "s", "stop", "stop", "controlled stop, then drive off (IDLE)"),
    OperatorKey(
        "c", "c", "reset", "reset", "clear a latched fault or e-stop; never starts motion"
    ),
)

KEYS_BY_COMMAND = {key.command: key for key in OPERATOR_KEYS}

# Set-point nudges, recording and quitting are shown in the key bar after the commands above.
NUDGE_LEFT_KEY = "left"
NUDGE_RIGHT_KEY = "right"
CENTRE_KEY = "0"
RECORD_KEY = "r"
NUDGE = OtherKey(
    "←→",
    "nudge",
    f"move the set-point {SETPOINT_STEP_M * 100:g} cm left or right (READY, BALANCE)",
)
CENTRE = OtherKey(CENTRE_KEY, "centre", "set-point back to the track centre")
RECORD = OtherKey(RECORD_KEY, "rec", "start or end recording (the bar says \"end rec\" while on)")
QUIT = OtherKey(
    QUIT_KEY,
    "quit",
    "quit; a moving rig is stopped first (asked y/n, q again means yes); "
    "on any other question: cancel it, then quit",
)
ESTOP_MEANING = "emergency stop, on every screen and in every state; latched until reset"


def suggested_key(status: dict) -> OperatorKey | None:
    """The key of the daemon's usual next step (``status["next"]``) if it is allowed now."""
    command = status.get("next")
    if command not in (status.get("allowed") or []):
        return None
    return KEYS_BY_COMMAND.get(command)


def key_table_markdown() -> str:
    """README's table of the dashboard's keys."""
    rows = [
        "| key | key bar | what it does | asks y/n first |",
        "| --- | --- | --- | --- |",
        f"| `{ESTOP_KEY_LABEL}` | e-stop | {ESTOP_MEANING} | never |",
    ]
    for key in OPERATOR_KEYS:
        rows.append(
            f"| `{key.label}` | {key.title} | {key.meaning} | {'yes' if key.confirm else 'no'} |"
        )
    for other in (NUDGE, CENTRE, RECORD):
        rows.append(f"| `{other.label}` | {other.title} | {other.meaning} | no |")
    rows.append(f"| `{QUIT.label}` | {QUIT.title} | {QUIT.meaning} | if the rig moves |")
    return "\n".join(rows)


if __name__ == "__main__":
    print(key_table_markdown())
