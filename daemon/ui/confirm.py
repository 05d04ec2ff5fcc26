"""The confirmation asked before a command that starts motion (or quitting while the rig moves):
`y` goes ahead, `n` or Esc does not.

The Cancel button has the focus, so Enter on its own never starts anything. The
app's quit key acts on these too (see PoiseDash.action_leave).
"""

from __future__ import annotations

from typing import ClassVar

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Static


class ConfirmScreen(ModalScreen[bool]):
    """Dismissed with True (go ahead) or False (cancel)."""

    BINDINGS: ClassVar[list[Binding]] = [
        Binding("y", "answer(True)", "yes"),
        Binding("n", "answer(False)", "no"),
        Binding("escape", "answer(False)", "no"),
    ]

    def __init__(self, question: str, detail: str, *, about_quitting: bool = False):
        super().__init__(classes="dialog-screen")
        self.question = question
        self.detail = detail
        self.about_quitting = about_quitting  # the "stop and quit?" question: q answers yes

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.question, classes="dialog-title")
            yield Static(self.detail, classes="dialog-body")
            with Horizontal(classes="dialog-buttons"):
                yield Button("y  go ahead", id="yes", classes="go")
                yield Button("n  cancel", id="no")

    def on_mount(self) -> None:
        self.query_one("#no", Button).focus()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "yes")

    def action_answer(self, go_ahead: bool) -> None:
        self.dismiss(go_ahead)
