"""Whether a sample ends the present mode: caught, fallen, homing done or failed, excitation done.

Decided from the sample's measurement before any controller runs, and handed
to the supervisor with the sample, so one sample's command always comes from
one controller, chosen by one decision.
"""

from __future__ import annotations

import math

from daemon.control.catch import CatchWindow
from daemon.control.excitation import Excitation
from daemon.control.homing import Homing, HomingPhase
from daemon.supervisor import Event, State

_SWING_UP = State.SWING_UP
_BALANCE = State.BALANCE
_HOMING = State.HOMING
_EXCITE = State.EXCITE


Seen = tuple[Event, str]  # the event and what was seen (the log's cause)


class ModeWatch:
    """Watches the mode's own end."""

    __slots__ = ("excitation", "excite_start_s", "homing", "window")

    def __init__(self, window: CatchWindow, homing: Homing):
        self.window = window
        self.homing = homing
        self.excitation: Excitation | None = None
        self.excite_start_s = 0.0

    def start_excitation(self, kind: str, amplitude: float, duration_s: float, t_s: float) -> None:
        self.excitation = Excitation(kind, amplitude, duration_s)
        self.excite_start_s = t_s

    def observe(
        self, state: State, t_s: float, raw_x_m: float, v: float, th: float, w: float, switches: int
    ) -> Seen | None:
        """The event this sample shows in ``state`` and what was seen, or None."""
        if state is _SWING_UP:
            if self.window.can_catch(th, w):
                return Event.CAUGHT, f"pendulum at {math.degrees(th):+.1f} deg, {math.degrees(w):+.0f} deg/s"
        elif state is _BALANCE:
            if self.window.has_fallen(th):
                return Event.FALL, f"pendulum at {math.degrees(th):+.1f} deg"
        elif state is _HOMING:
            phase = self.homing.advance(raw_x_m, v, switches)
            if phase is HomingPhase.DONE:
                return Event.HOMING_DONE, self.homing.message
            if phase is HomingPhase.FAILED:
                return Event.HOMING_FAILED, self.homing.message
        elif state is _EXCITE:
            excitation = self.excitation
            if excitation is None or excitation.done(t_s - self.excite_start_s):
                return Event.EXCITE_DONE, "excitation finished"
        return None
