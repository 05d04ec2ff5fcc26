"""The safety caution shown once per dashboard session, before the first command that can power the drive.

The same cautions stay on the dashboard itself, shorter (``CAUTION_STRIP``).

Acknowledged with Enter (on "I understand"); Esc goes back without doing anything.
"""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Static

from daemon.ui.keys import ESTOP_KEY_LABEL

CAUTION = (
    "• A hardware emergency stop that cuts motor power must be fitted and within reach. "
    f"The dashboard's e-stop ({ESTOP_KEY_LABEL}) is a software stop: it is no substitute.\n\n"
    "• Keep hands, cables and loose things clear of the track while the drive is powered: "
    "the cart can move suddenly and the pendulum swings through the full circle.\n\n"
    "• On a new or changed rig, make the first runs with a low drive limit.\n\n"
    "• Local safety rules and the lab's responsible person have the final word."
)

# Always on the dashboard, above the key bar: the same cautions in a few words.
CAUTION_STRIP = (
    "⚠ A hardware e-stop that cuts motor power is mandatory; "
    f"{ESTOP_KEY_LABEL} is no substitute. "
    "Keep hands clear of the track. First runs at low drive limits. "
    "Local rules and the lab's responsible person come first."
)


class SafetyScreen(ModalScreen[bool]):
    """Dismissed with True once acknowledged, False if the operator backs out."""

    BINDINGS: ClassVar[list[Binding]] = [Binding("escape", "back", "back")]

    def __init__(self) -> None:
        super().__init__(classes="dialog-screen")

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog caution"):
            yield Static("⚠  Before the drive is powered", classes="dialog-title")
            yield Static(CAUTION, classes="dialog-body")
            with Horizontal(classes="dialog-buttons"):
                yield Button("I understand  ⏎", id="understood", classes="go")
                yield Button("back  esc", id="back")

    def on_mount(self) -> None:
        self.query_one("#understood", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "understood")

    def action_back(self) -> None:
        self.dismiss(False)
