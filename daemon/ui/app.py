"""The dashboard application: lays out the panels, keeps the daemon connection, turns keys into commands.

Every panel is bound to two reactive attributes of the app — ``status`` (the
daemon's latest status line) and ``link`` (the dashboard's own connection) — and
redraws itself when they change. Keys become control API commands; commands that
start motion ask for confirmation first, and the first of them in a session
shows the safety caution. The e-stop key is a priority binding, so it acts on
every screen, modals included, and it closes any open question so that no stale
confirmation can start motion afterwards. The quit key is one too: on a question
it cancels the question and quits as it always does (stopping a moving rig
first), and on the "stop and quit?" question it answers yes.

The layout follows the terminal's size (daemon/ui/layout.py): all panels, a
compact set, or a request for a larger terminal.
"""

from __future__ import annotations

import asyncio
from pathlib import Path
from typing import ClassVar

from textual import work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.reactive import reactive
from textual.screen import ModalScreen
from textual.widgets import Static

from daemon.api.client import ApiError
from daemon.errors import CommandRefused
from daemon.ui.confirm import ConfirmScreen
from daemon.ui.connection import DEFAULT_BACKOFF, Backoff, DaemonLink, LinkState
from daemon.ui.keys import (
    CENTRE,
    CENTRE_KEY,
    ESTOP_KEY,
    KEYS_BY_COMMAND,
    NUDGE_LEFT_KEY,
    NUDGE_RIGHT_KEY,
    OPERATOR_KEYS,
    QUIT,
    QUIT_KEY,
    RECORD,
    RECORD_KEY,
    SETPOINT_STEP_M,
)
from daemon.ui.layout import HORIZONTAL_BREAKPOINTS, VERTICAL_BREAKPOINTS, too_small
from daemon.ui.palette import MOTION_STATE_NAMES
from daemon.ui.safety import CAUTION_STRIP, SafetyScreen
from daemon.ui.widgets.events import EventLog
from daemon.ui.widgets.interlock_summary import InterlockSummary
from daemon.ui.widgets.interlocks import Interlocks
from daemon.ui.widgets.keybar import KeyBar
from daemon.ui.widgets.link import LinkHealth
from daemon.ui.widgets.masthead import Masthead
from daemon.ui.widgets.notice import Notice
from daemon.ui.widgets.readouts import Readouts
from daemon.ui.widgets.recording import Recording
from daemon.ui.widgets.rig_view import RigView
from daemon.ui.widgets.state_panel import StatePanel
from daemon.ui.widgets.too_small import TooSmall
from daemon.ui.widgets.traces import Traces

STATUS_RATE_HZ = 10.0
# How long quitting waits for a controlled stop to bring the rig to rest.
QUIT_STOP_TIMEOUT_S = 15.0


class PoiseDash(App[None]):
    CSS_PATH = "dash.tcss"
    TITLE = "Poise"
    ENABLE_COMMAND_PALETTE = False
    HORIZONTAL_BREAKPOINTS = HORIZONTAL_BREAKPOINTS
    VERTICAL_BREAKPOINTS = VERTICAL_BREAKPOINTS
    BINDINGS: ClassVar[list[Binding]] = [
        Binding(ESTOP_KEY, "estop", "E-STOP", priority=True),
        *(Binding(key.key, f"command('{key.command}')", key.title) for key in OPERATOR_KEYS),
        Binding(NUDGE_LEFT_KEY, "nudge(-1)", "set-point left"),
        Binding(NUDGE_RIGHT_KEY, "nudge(1)", "set-point right"),
        Binding(CENTRE_KEY, "centre", CENTRE.title),
        Binding(RECORD_KEY, "record", RECORD.title),
        Binding(QUIT_KEY, "leave", QUIT.title, priority=True),
    ]

    # Not repainted here: a repaint of the app is a repaint of the whole screen. Each panel
    # redraws itself when the part of these it shows has changed (StatusWidget.shown_part).
    status: reactive[dict] = reactive(dict, always_update=True, repaint=False)
    link: reactive[LinkState] = reactive(LinkState(False, "connecting"), repaint=False)

    def __init__(
        self,
        socket_path: str | Path,
        *,
        drive_unit: str = "V",
        backoff: Backoff = DEFAULT_BACKOFF,
        status_rate_hz: float = STATUS_RATE_HZ,
    ):
        super().__init__()
        self.drive_unit = drive_unit
        self.daemon = DaemonLink(
            socket_path,
            self._on_status,
            self._on_link_change,
            rate_hz=status_rate_hz,
            backoff=backoff,
        )
        self.caution_acknowledged = False
        self._at_rest = asyncio.Event()

    # ------------------------------------------------------------------ layout

    def compose(self) -> ComposeResult:
        def bound(widget):
            return widget.data_bind(PoiseDash.status, PoiseDash.link)

        # Panels marked full-only are hidden in the compact layout, compact-only the other way
        # round; #dashboard gives way to #too-small below the compact layout's minimum.
        with Vertical(id="dashboard"):
            yield bound(Masthead(id="masthead"))
            with Horizontal(id="upper"):
                with Vertical(id="left"):
                    yield bound(StatePanel(id="state", classes="panel"))
                    yield Notice(id="notice")
                    yield bound(Readouts(self.drive_unit, id="readouts", classes="panel"))
                    yield bound(InterlockSummary(id="summary", classes="panel compact-only"))
                    yield bound(LinkHealth(id="link", classes="panel full-only"))
                    yield bound(Recording(id="recording", classes="panel full-only"))
                with Vertical(id="right"):
                    yield bound(RigView(id="rig", classes="panel"))
                    yield bound(Traces(self.drive_unit, id="traces", classes="panel full-only"))
            with Horizontal(id="lower", classes="full-only"):
                yield bound(Interlocks(id="interlocks", classes="panel"))
                yield bound(EventLog(id="events", classes="panel"))
            yield Static(CAUTION_STRIP, id="caution")
            yield bound(KeyBar(id="keybar"))
        yield bound(TooSmall(id="too-small"))

    def on_mount(self) -> None:
        titles = {
            "state": "supervisor",
            "readouts": "live state",
            "link": "rig link",
            "recording": "recording",
            "rig": "rig",
            "traces": "last 10 s",
            "interlocks": "interlocks",
            "summary": "interlocks",
            "events": "events",
        }
        for widget_id, title in titles.items():
            self.query_one(f"#{widget_id}").border_title = title
        self.run_worker(self.daemon.run(), name="daemon-link", exit_on_error=True)

    # ------------------------------------------------------------------ daemon link

    def _on_status(self, status: dict) -> None:
        self.status = status
        if status.get("state") not in MOTION_STATE_NAMES:
            self._at_rest.set()
        else:
            self._at_rest.clear()

    def _on_link_change(self, state: LinkState) -> None:
        self.link = state
        if not state.connected:
            self._at_rest.clear()

    @property
    def state(self) -> str:
        """The supervisor state as last reported ('' while the daemon is unreachable)."""
        return str(self.status.get("state", "")) if self.link.connected else ""

    def allowed(self, command: str) -> bool:
        return self.link.connected and command in (self.status.get("allowed") or [])

    # ------------------------------------------------------------------ actions

    def action_estop(self) -> None:
        """Send the e-stop first, then close any open question."""
        self.run_worker(self._send_estop(), group="estop")
        while isinstance(self.screen, ModalScreen):
            self.screen.dismiss(False)

    def action_command(self, command: str) -> None:
        key = KEYS_BY_COMMAND[command]
        if not self._possible(command, key.title):
            return
        if key.confirm and too_small(self.size):
            notice = self.query_one(Notice)
            notice.show(f"{key.title}: not sent, the terminal is too small", "refused")
            return
        if key.confirm:
            self._confirm_then_send(command, key.title, key.confirm)
        else:
            self.run_worker(self.send(command), group="commands")

    def action_nudge(self, direction: int) -> None:
        if self._possible("setpoint", "set-point"):
            x_m = float(self.status.get("setpoint_m") or 0.0) + direction * SETPOINT_STEP_M
            self.run_worker(self.send("setpoint", {"x_m": round(x_m, 6)}), group="commands")

    def action_centre(self) -> None:
        if self._possible("setpoint", "set-point"):
            self.run_worker(self.send("setpoint", {"x_m": 0.0}), group="commands")

    def action_record(self) -> None:
        on = not (self.status.get("recording") or {}).get("active", False)
        self.run_worker(self.send("record", {"on": on}), group="commands")

    def action_leave(self) -> None:
        """Quit; a moving rig is stopped first. An open question is cancelled (or, if it is
        the "stop and quit?" question, answered yes)."""
        if isinstance(self.screen, ConfirmScreen) and self.screen.about_quitting:
            self.screen.dismiss(True)
            return
        while isinstance(self.screen, ModalScreen):
            self.screen.dismiss(False)
        if self.state in MOTION_STATE_NAMES:
            self._stop_then_quit()
        else:
            self.exit()

    # ------------------------------------------------------------------ commands

    async def send(self, command: str, args: dict | None = None) -> bool:
        """Send one command and show the answer; True if the daemon carried it out."""
        notice = self.query_one(Notice)
        try:
            result = await self.daemon.request(command, args)
        except CommandRefused as refused:
            notice.show(f"{command} refused: {refused.reason}", "refused")
            return False
        except ApiError as exc:
            notice.show(str(exc), "error")
            return False
        if args and "x_m" in args:
            done = f"set-point {args['x_m']:+.3f} m"
        elif result.get("state", result.get("previous")) != result.get("previous"):
            done = f"{command}: {result['previous']} → {result['state']}"
        else:
            done = f"{command}: done"
        notice.show(done, "ok")
        return True

    async def _send_estop(self) -> None:
        notice = self.query_one(Notice)
        try:
            await self.daemon.request("estop")
        except ApiError as exc:
            notice.show(f"E-STOP NOT DELIVERED ({exc}): use the hardware e-stop", "error")
            return
        notice.show("e-stop latched: drive stopped; reset with c when safe", "error")

    def _possible(self, command: str, title: str) -> bool:
        """Whether ``command`` is allowed now; if not, say why without sending it."""
        if self.allowed(command):
            return True
        notice = self.query_one(Notice)
        if not self.link.connected:
            notice.show(f"{title}: not sent, the daemon is unreachable", "error")
        else:
            allowed = ", ".join(self.status.get("allowed") or []) or "nothing"
            notice.show(f"{title} is not possible in {self.state} (possible: {allowed})", "refused")
        return False

    @work(exclusive=True, group="questions")
    async def _confirm_then_send(self, command: str, title: str, what_happens: str) -> None:
        notice = self.query_one(Notice)
        if not self.caution_acknowledged:
            if not await self.push_screen_wait(SafetyScreen()):
                notice.show(f"{title}: not sent", "info")
                return
            self.caution_acknowledged = True
        if await self.push_screen_wait(ConfirmScreen(f"{title.capitalize()}?", what_happens)):
            await self.send(command)
        else:
            notice.show(f"{title}: cancelled, nothing sent", "info")

    @work(exclusive=True, group="questions")
    async def _stop_then_quit(self) -> None:
        """Quitting while the rig moves: a controlled stop first, then leave once it is at rest."""
        question = f"The rig is in {self.state}. Stop it and quit?"
        detail = "A controlled stop is sent; the dashboard closes when the rig is at rest."
        if not await self.push_screen_wait(ConfirmScreen(question, detail, about_quitting=True)):
            return
        if self.state in MOTION_STATE_NAMES and not await self.send("stop"):
            return
        try:
            async with asyncio.timeout(QUIT_STOP_TIMEOUT_S):
                await self._at_rest.wait()
        except TimeoutError:
            self.query_one(Notice).show(
                f"the rig did not come to rest within {QUIT_STOP_TIMEOUT_S:g} s; still here",
                "error",
            )
            return
        self.exit()
