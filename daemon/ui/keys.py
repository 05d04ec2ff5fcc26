"""The dashboard's keys: which key sends which command, which of them need a confirmation, what each does.

The e-stop key is separate from the rest: it is bound with priority on the
application, so it works on every screen (modals included) and in every state.
The key bar, the state panel's "next" line and README's key table are all made
from the tables here, with each command's words and y/n question taken from the
command table (:mod:`daemon.operator_commands`) (``python -m daemon.ui.keys`` prints README's table).
"""

from __future__ import annotations

from dataclasses import dataclass

from daemon.operator_commands import COMMANDS

ESTOP_KEY = "space"
ESTOP_KEY_LABEL = "SPACE"
QUIT_KEY = "q"
SETPOINT_STEP_M = 0.02


@dataclass(frozen=True)
class OperatorKey:
    """A key that sends one operator command; what it does comes from the command table."""

    key: str  # Textual key name
    label: str  # how the key is shown
    command: str  # control API command it sends
    title: str  # short words for the key bar

    @property
    def meaning(self) -> str:
        """What it does, for README's key table."""
        return COMMANDS[self.command].summary

    @property
    def confirm(self) -> str:
        """What the command will do, asked y/n first; empty for commands that start no motion."""
        return COMMANDS[self.command].motion


@dataclass(frozen=True)
class OtherKey:
    """A key that is not one operator command: set-point nudges, recording, quitting."""

    label: str
    title: str
    meaning: str


OPERATOR_KEYS: tuple[OperatorKey, ...] = (
    OperatorKey("a", "a", "arm", "arm"),
    OperatorKey("d", "d", "disarm", "disarm"),
    OperatorKey("h", "h", "home", "home"),
    OperatorKey("u", "u", "swing_up", "swing"),
    OperatorKey("b", "b", "balance", "balance"),
    OperatorKey("s", "s", "stop", "stop"),
    OperatorKey("c", "c", "reset", "reset"),
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
RECORD = OtherKey(RECORD_KEY, "rec", 'start or end recording (the bar says "end rec" while on)')
QUIT = OtherKey(
    QUIT_KEY,
    "quit",
    "quit; a moving rig is stopped first (asked y/n, q again means yes); "
    "on any other question: cancel it, then quit",
)
ESTOP_MEANING = f"{COMMANDS['estop'].summary}, on every screen"


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
