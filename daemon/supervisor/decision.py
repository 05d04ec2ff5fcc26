"""What the supervisor decides: one value per sample, and the transitions that come with it.

The control cycle asks the supervisor once per sample (:meth:`Supervisor.on_sample`)
and gets a :class:`Decision`: which output drives the rig this sample, for which
state, at which set-point, and the :class:`Transition` that happened if any. The
cycle applies it in one place. Every other way the supervisor changes (an
operator command, a trip found between samples, a link event) also hands back
the :class:`Transition` it made, for the same one place to apply.

A steady decision (no transition, no stop ramp) is one shared object, rebuilt
only when the state, the output or the set-point changes, so the common sample
allocates nothing here.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import IntEnum
from typing import NamedTuple

from daemon.supervisor.interlocks import Trip
from daemon.supervisor.states import State


class Output(IntEnum):
    """What drives the cart (IEC 60204-1 stops: RAMP is category 1, OFF category 0)."""

    OFF = 0
    CONTROL = 1  # the active mode's controller
    RAMP = 2  # the cart velocity loop following the stop ramp's set-point


@dataclass(frozen=True, slots=True)
class Transition:
    """A change of state or output, with its cause (what the log says)."""

    previous: State
    state: State
    previous_output: Output
    output: Output
    cause: str
    excitation: tuple[str, float, float] | None = None  # (kind, amplitude, duration_s) into EXCITE

    @property
    def state_changed(self) -> bool:
        return self.state is not self.previous

    @property
    def drive_allowed(self) -> bool:
        """Whether the device may drive the motor after this transition (armed)."""
        return self.output is not Output.OFF


class Decision(NamedTuple):
    """This sample's answer: the output, the state whose controller runs, the set-points.

    ``ramp_velocity_mps`` is the stop ramp's set-point for the cart velocity loop when ``output``
    is RAMP (:meth:`~daemon.supervisor.stop_ramp.StopRamp.follower_setpoint`; 0 otherwise); ``trip`` is a trip newly latched this sample (to record); ``transition``
    is the change this sample made, if any. A named tuple, so the cycle unpacks it in one step.
    """

    output: Output
    state: State
    setpoint_m: float
    ramp_velocity_mps: float = 0.0
    transition: Transition | None = None
    trip: Trip | None = None
