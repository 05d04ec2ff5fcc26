"""The control cycle: one synchronous reader callback on the port's raw file descriptor.

Per telemetry frame, in one method (:meth:`ControlCycle.on_readable`), with no
awaits and no queue hops, a straight line::

    read -> decode -> estimate -> decision -> output -> clamp -> encode -> write -> record

- *estimate*: the state for the controllers (:class:`StateEstimator`), and the
  raw rates (plain position differences) for the interlocks.
- *decision*: whether this sample ends the present mode (:class:`ModeWatch`:
  caught, fallen, homing or excitation ended), then the supervisor's one
  :class:`Decision` for the sample: its interlocks on the raw measurements, the
  mode event, the stop ramp. If the decision carries a transition, the one
  transition handler (:meth:`apply`) acts on it before the output is worked out.
- *output*: the decision's output: the controller of its state, the cart
  velocity loop on the stop ramp's set-point (following the raw cart velocity,
  as the interlocks judge it), or zero.
- *record*: the sample row to the recorder's queue (``put_sample``, never
  blocks); then the overrun interlock, whose trip acts from the next sample on
  (this sample's command has gone). The link-error interlock (sequence gaps,
  corrupt frames) is fed right after decoding, so its trip stops the rig in
  this very frame.

What it allocates is floats and small tuples (the frames, the state, the
sample row, the clock readings); a steady decision is a shared object.

The rig's clock paces the loop: every Telemetry is answered by exactly one
Drive. If several Telemetry frames arrive in one read (the host was late),
only the newest is answered; each older one is stepped through the estimator
(so its rates stay right), recorded unanswered (no drive, no latency) and
counted in ``missed``. The cycle never bursts to catch up.

Timing: ``t0`` is taken as soon as ``os.read`` returns, ``t_write`` right
after the write; their difference is the read->write latency, recorded with
every sample and fed to the loop-overrun interlock against the pacing's budget
(infinite in lockstep, settled at the handshake: :mod:`daemon.runtime.pacing`).
On one sample in ``STAGE_SAMPLE_MASK + 1`` the clock is also read between the
stages (a clock reading costs as much as a few hundred float operations in
CPython); the seven readings of each sample go into :class:`TimingRings` as one
tuple, with zeros for the stages not timed.

Transitions (:meth:`apply`): every change of state or output, from a sample's
decision or from anything between samples (operator commands, watchdog and link
trips), comes here as a :class:`Transition`: the newly active controller is
reset from the last measured state and the last drive (bumpless transfer),
homing takes its new origin, the device is armed or stopped, automatic garbage
collection is switched off while the drive may move (gc.freeze() at start-up
keeps the collections that remain cheap), and whoever waits for the state is
woken.
"""

from __future__ import annotations

import asyncio
import gc
import math
import os
import time
from collections.abc import Callable

from daemon.control.cart_loops import CartHold, CartVelocityFollower
from daemon.control.homing import Homing, HomingPhase
from daemon.control.rig_setup import ControlSet
from daemon.link.link import Link
from daemon.runtime.mode_watch import ModeWatch
from daemon.runtime.pacing import Pacing, real_time
from daemon.runtime.rig_time import RigTimeWaiters
from daemon.runtime.timing import RING_MASK, STAGE_SAMPLE_MASK, TimingRings
from daemon.supervisor import Action, LinkErrorMonitor, Output, State, Supervisor, Trip
from daemon.supervisor.decision import Transition
from daemon.supervisor.states import MOTION_STATES
from daemon.supervisor.stop_ramp import FOLLOWER_ACCEL_FACTOR, FOLLOWER_TIME_CONSTANT_S
from protocol import (
    ST_LOCKSTEP,
    Arm,
    FrameDecoder,
    LinkStats,
    Reply,
    ReplyResult,
    Stop,
    Telemetry,
    encode_drive,
)

READ_BYTES = 65536

_BALANCE = State.BALANCE
_SWING_UP = State.SWING_UP
_HOMING = State.HOMING
_READY = State.READY
_EXCITE = State.EXCITE
_CONTROL = Output.CONTROL
_RAMP = Output.RAMP
_LOCKSTEP = ST_LOCKSTEP
_clock_ns = time.monotonic_ns
_read = os.read

Measured = tuple[float, float, float, float]


class ControlCycle:
    """Everything that happens once per telemetry frame, and the one handler of transitions.

    Slotted: the hot path reads and writes a few dozen of these attributes every sample, and
    slot access is the cheapest attribute access CPython has.
    """

    __slots__ = (
        "_balance",
        "_decoder",
        "_epoch_us",
        "_estimator",
        "_fall_angle_rad",
        "_last_t_us",
        "_lockstep_bit",
        "_mode_code",
        "_on_link_lost",
        "_on_message",
        "_on_telemetry_resumed",
        "_on_trip",
        "_overrun_budget_ns",
        "_period_us",
        "_prev_applied",
        "_seen_corrupt",
        "_seen_gaps",
        "_seen_resyncs",
        "_stamps",
        "_state",
        "_stats",
        "controls",
        "device_armed",
        "fault_mask",
        "fd",
        "follower",
        "hold",
        "homing",
        "last_drive",
        "last_rx_ns",
        "last_telemetry",
        "limit",
        "link",
        "measured",
        "missed",
        "modes",
        "monitor",
        "on_state_change",
        "pacing",
        "put_sample",
        "stale_telemetry",
        "supervisor",
        "t_s",
        "telemetry_flowing",
        "timing",
        "waiters",
    )

    def __init__(
        self,
        supervisor: Supervisor,
        controls: ControlSet,
        homing: Homing,
        put_sample: Callable[[tuple], bool],
        on_trip: Callable[[Trip, float], None],
        on_link_lost: Callable[[str], None],
        on_telemetry_resumed: Callable[[], None],
    ):
        config = supervisor.config
        self.supervisor = supervisor
        self.controls = controls
        self.homing = homing
        self.modes = ModeWatch(controls.window, homing)
        self.hold = CartHold(controls.params)
        self.follower = CartVelocityFollower(
            controls.params, FOLLOWER_ACCEL_FACTOR * config.stop.decel_mps2, FOLLOWER_TIME_CONSTANT_S,
            1.0 / config.sampling.rate_hz,
        )
        self.monitor = LinkErrorMonitor(config)
        self.put_sample = put_sample
        self._on_trip = on_trip
        self._on_link_lost = on_link_lost
        self._on_telemetry_resumed = on_telemetry_resumed
        self.limit = config.drive.limit
        self.pacing: Pacing = real_time(supervisor.limits)
        self._overrun_budget_ns = 0
        self._lockstep_bit = 0
        self.set_pacing(self.pacing)
        self.link: Link | None = None
        self.fd = -1
        self.timing = TimingRings()
        self.waiters = RigTimeWaiters()
        # Per-sample state, readable by status and the watchdog.
        self.missed = 0
        self.stale_telemetry = 0  # read before this link's Configure was accepted: ignored
        self.t_s = 0.0
        self.measured: Measured = (0.0, 0.0, math.pi, 0.0)
        self.last_drive = 0.0
        self.last_telemetry: Telemetry | None = None
        self.last_rx_ns = _clock_ns()
        self.telemetry_flowing = False  # False until the first frame after a (re)connect
        self.fault_mask = 0xFFFF  # device faults being cleared on operator reset are masked
        self.device_armed = False
        self._epoch_us = 0
        self._last_t_us = 0
        self._period_us = round(1e6 / config.sampling.rate_hz)
        self._prev_applied = 0.0
        self._state = State.DISCONNECTED
        self._mode_code = int(self._state)
        self._seen_gaps = 0
        self._seen_corrupt = 0
        self._seen_resyncs = 0
        self.on_state_change: Callable[[State, State], None] | None = None
        # What the hot path uses every sample, one attribute away. Objects rather than their
        # bound methods: CPython 3.11 specialises ``obj.method()`` calls, not calls of a bound
        # method kept in an attribute.
        self._estimator = controls.estimator
        self._balance = controls.balance
        self._fall_angle_rad = controls.window.fall_angle_rad
        self._stamps = self.timing.stamps
        self._decoder: FrameDecoder | None = None  # these three come with the link (attach)
        self._on_message: Callable[[object], None] | None = None
        self._stats: LinkStats | None = None

    @property
    def samples(self) -> int:
        """Telemetry samples answered so far (each with one Drive frame)."""
        return self.timing.count

    @property
    def state(self) -> State:
        """The supervisor state, as the last transition applied here left it."""
        return self._state

    # ------------------------------------------------------------------ port

    def attach(self, link: Link, loop: asyncio.AbstractEventLoop) -> None:
        """Start answering telemetry on ``link``'s port (reader callback on its fd)."""
        self.link = link
        self.fd = link.fd
        self._decoder = link.decoder
        self._on_message = link.on_message
        self._stats = link.stats
        self._seen_gaps = 0
        self._seen_corrupt = 0
        self._seen_resyncs = 0
        self.telemetry_flowing = False
        self.device_armed = False
        loop.add_reader(self.fd, self.on_readable)

    def detach(self, loop: asyncio.AbstractEventLoop) -> None:
        if self.fd >= 0:
            loop.remove_reader(self.fd)
        self.fd = -1
        self.link = None
        self.telemetry_flowing = False

    def set_pacing(self, pacing: Pacing) -> None:
        """The pacing settled at the handshake (real time until one is)."""
        self.pacing = pacing
        budget_us = pacing.overrun_budget_us
        # An int: compared with int nanoseconds every sample. Lockstep: nothing overruns.
        self._overrun_budget_ns = round(budget_us * 1000.0) if math.isfinite(budget_us) else 1 << 62
        self._lockstep_bit = pacing.telemetry_status_bit

    # ------------------------------------------------------------------ the hot path

    def on_readable(self) -> None:
        """The hot path: read, decode, answer the newest telemetry sample with one Drive frame.

        Written for speed, as it runs every sample: one method from read to record, the
        telemetry unpacked once, each attribute read once, the balance case inline, the
        objects it calls one attribute away, the stage timings kept as one tuple of clock
        readings. The Drive frame's own seq is the count of samples answered (mod 2**16).
        """
        try:
            data = _read(self.fd, READ_BYTES)
        except (BlockingIOError, InterruptedError):
            return
        except OSError as exc:
            self._on_link_lost(f"reading the rig port failed: {exc.strerror or exc}")
            return
        t0 = _clock_ns()
        if not data:
            self._on_link_lost("the rig port reached end of file (device gone)")
            return
        timing = self.timing
        answered = timing.count
        staged = not answered & STAGE_SAMPLE_MASK  # this sample's stages are timed
        messages = self._decoder.feed(data)
        t1 = _clock_ns() if staged else 0
        tm = None
        for message in messages:
            if message.__class__ is Telemetry:
                if tm is not None:
                    self._skip(tm, t0)
                tm = message
            else:
                self._on_message(message)
        if tm is None:
            return

        if not self.telemetry_flowing and self._stale():
            return
        (seq, t_us, cart_counts, pendulum_counts, switches, faults, status, applied,
         _motor_current_a, supply_v, _late_commands) = tm
        if status & _LOCKSTEP != self._lockstep_bit:
            self._pacing_broken(status)
        if t_us < self._last_t_us:  # the device restarted its clock (reset): keep time monotonic
            self._epoch_us += self._last_t_us + self._period_us
        self._last_t_us = t_us
        self.t_s = t_s = (t_us + self._epoch_us) * 1e-6
        self.last_telemetry = tm
        self.last_rx_ns = t0
        estimator = self._estimator
        if not self.telemetry_flowing:
            self.telemetry_flowing = True
            estimator.reset(cart_counts, pendulum_counts)  # no rate from before the (re)connect
            self._on_telemetry_resumed()
        stats = self._stats
        # Every corrupt chunk also counts as a resync (LinkStats; protocol/vectors.json checks it).
        if stats.gaps != self._seen_gaps or stats.resyncs != self._seen_resyncs:
            self._link_errors_counted(t_s, stats)  # a trip here stops the rig in this frame
        x, v, th, w = measured = estimator.update(cart_counts, pendulum_counts, self._prev_applied)
        self._prev_applied = applied
        self.measured = measured
        t2 = _clock_ns() if staged else 0

        state = self._state
        if state is _BALANCE and abs(th) <= self._fall_angle_rad:  # ModeWatch's common case
            seen = None
        else:
            seen = self.modes.observe(state, t_s, estimator.scaling.raw_x_m(), v, th, w, switches)
        output, state, setpoint_m, ramp_v, transition, trip = self.supervisor.on_sample(
            t_s, x, estimator.raw_v_mps, th, estimator.raw_omega_radps, applied, switches,
            faults & self.fault_mask, supply_v, seen,
        )
        if transition is not None:
            self.apply(transition)
        if output is _CONTROL:
            if state is _BALANCE:
                balance = self._balance
                balance.set_point_m = setpoint_m
                drive = balance.update(x, v, th, w)
            else:
                drive = self._control(state, setpoint_m, t_s, x, v, th, w)
        elif output is _RAMP:
            drive = self.follower.update(ramp_v, x, estimator.raw_v_mps, th, w)
        else:
            drive = 0.0
        t3 = _clock_ns() if staged else 0
        requested = drive
        if not abs(drive) < self.limit:  # clamp; a NaN from a controller becomes 0
            limit = self.limit
            drive = limit if drive >= limit else -limit if drive <= -limit else 0.0
        t4 = _clock_ns() if staged else 0

        frame = encode_drive(answered & 0xFFFF, drive, seq)
        t5 = _clock_ns() if staged else 0
        t_write = self.link.write(frame)  # the clock reading right after the write
        if not t_write:
            return
        self.last_drive = drive

        self._stamps[answered & RING_MASK] = (t0, t1, t2, t3, t4, t5, t_write)
        timing.count = answered + 1
        latency_ns = t_write - t0
        self.put_sample((
            seq, t_us, t0, cart_counts, pendulum_counts, switches, faults,
            x, v, th, w, requested, drive, self._mode_code, latency_ns * 1e-3,
            setpoint_m, applied,
        ))
        if trip is not None:
            self._on_trip(trip, t_s)
        if latency_ns > self._overrun_budget_ns:
            self._overran(t_s, latency_ns)
        if t_s >= self.waiters.next_due_s:
            self.waiters.reached(t_s)

    def _skip(self, tm: Telemetry, t0: int) -> None:
        """An older sample overtaken by a newer one in the same read: estimate through it, record
        it unanswered (no drive, no latency), count it.

        The estimator's rates assume one sample period per update, so skipping its update would
        scale the velocity estimates of the answered sample by the number of periods missed.
        """
        if not self.telemetry_flowing and self._stale():
            return
        self.missed += 1
        x, v, th, w = self._estimator.update(tm.cart_counts, tm.pendulum_counts, self._prev_applied)
        self._prev_applied = tm.drive_applied
        self.put_sample((
            tm.seq, tm.t_us, t0, tm.cart_counts, tm.pendulum_counts, tm.switches, tm.faults,
            x, v, th, w, None, None, self._mode_code, None, None, tm.drive_applied,
        ))

    def _stale(self) -> bool:
        """Whether a Telemetry read now, before this link's stream flows, is another stream's.

        Until the device has accepted this link's Configure its telemetry belongs to no stream
        of ours: it is counted and otherwise ignored (not answered, not recorded, not judged by
        the pacing check, whose pacing the handshake is still settling).
        """
        if self.link is not None and self.link.stream_started:
            return False
        self.stale_telemetry += 1
        return True

    def _control(
        self, state: State, setpoint_m: float, t_s: float, x: float, v: float, th: float, w: float
    ) -> float:
        """The controller of the decision's state (balance is handled inline by the caller)."""
        if state is _SWING_UP:
            return self.controls.swing_up.update(x, v, th, w)
        hold = self.hold
        if state is _READY:
            hold.set_point_m = setpoint_m
            return hold.update(x, v, th, w)
        if state is _HOMING:
            return self.homing.command(self._estimator.scaling.raw_x_m(), v, th, w)
        if state is _EXCITE:
            modes = self.modes
            hold.set_point_m = setpoint_m
            return hold.update(x, v, th, w) + modes.excitation.value(t_s - modes.excite_start_s)
        return 0.0

    def _link_errors_counted(self, t_s: float, stats: LinkStats) -> None:
        """Feed new sequence gaps and corrupt frames to the link-error interlock."""
        self._seen_resyncs = stats.resyncs
        gaps = stats.gaps
        corrupt = stats.crc_failures + stats.cobs_errors + stats.runts
        if gaps != self._seen_gaps or corrupt != self._seen_corrupt:
            self._seen_gaps = gaps
            self._seen_corrupt = corrupt
            self._tripped(self.monitor.note_counters(t_s, gaps, corrupt), t_s)

    def _overran(self, t_s: float, latency_ns: int) -> None:
        self._tripped(self.monitor.note_cycle(t_s, latency_ns * 1e-3), t_s)

    def _pacing_broken(self, status: int) -> None:
        """A Telemetry whose ST_LOCKSTEP bit disagrees with the pacing the device declared."""
        said = "sets" if status & _LOCKSTEP else "lacks"
        trip = Trip(
            "link.protocol",
            Action.DRIVE_OFF,
            f"a Telemetry {said} ST_LOCKSTEP, but the device declared {self.pacing.name} pacing "
            "at the handshake (PROTOCOL.md section 8.4)",
            {"status": float(status)},
        )
        self._tripped(trip, self.t_s)

    def _tripped(self, trip: Trip | None, t_s: float) -> None:
        """A trip found by the cycle outside the decision: latch, record, apply."""
        if trip is None:
            return
        transition = self.supervisor.trip(trip, t_s)
        self._on_trip(trip, t_s)
        self.apply(transition)

    # ------------------------------------------------------------------ transitions

    def apply(self, transition: Transition | None) -> None:
        """The one handler of transitions: controllers, origin, device, gc, waiters."""
        if transition is None:
            return
        if transition.state_changed:
            old, new = transition.previous, transition.state
            self._state = new
            self._mode_code = int(new)
            if old is _HOMING and self.homing.phase is HomingPhase.DONE:
                self._take_homed_origin()
            self._enter(new, transition)
            if new in MOTION_STATES and old not in MOTION_STATES:
                gc.disable()
            elif new not in MOTION_STATES and old in MOTION_STATES:
                gc.enable()
            if self.on_state_change is not None:
                self.on_state_change(old, new)
            self.waiters.entered(new)
        self._command_device(transition.drive_allowed)

    def _take_homed_origin(self) -> None:
        """Homing found the centre: positions from now on are measured from it."""
        estimator = self._estimator
        estimator.scaling.set_centre_at(self.homing.centre_raw_m)
        tm = self.last_telemetry
        _x, v, _th, w = self.measured
        self.measured = estimator.reset(tm.cart_counts, tm.pendulum_counts, v, w)

    def _enter(self, state: State, transition: Transition) -> None:
        """Start the newly active controller from the last measured state and drive (bumpless)."""
        measured, last = self.measured, self.last_drive
        controls = self.controls
        if state is _HOMING:
            self.homing.start(self._estimator.scaling.raw_x_m())
        elif state is _SWING_UP:
            controls.swing_up.reset(measured, last)
        elif state is _BALANCE:
            controls.balance.reset(measured, last)
        elif state is _EXCITE and transition.excitation is not None:
            self.modes.start_excitation(*transition.excitation, self.t_s)

    def _command_device(self, drive_allowed: bool) -> None:
        link = self.link
        if link is None or drive_allowed == self.device_armed:
            return
        self.device_armed = drive_allowed
        if drive_allowed:
            link.send(lambda seq: Arm(seq, 1)).add_done_callback(self._arm_answered)
        else:
            link.send(Stop).add_done_callback(self._stop_answered)

    def _arm_answered(self, future: asyncio.Future) -> None:
        problem = _refusal(future, "Arm")
        if problem is not None and self.device_armed:
            self.device_armed = False
            self._tripped(Trip("device.arm_refused", Action.DRIVE_OFF, problem, {}), self.t_s)

    def _stop_answered(self, future: asyncio.Future) -> None:
        problem = _refusal(future, "Stop")
        if problem is not None:
            self.supervisor.log(self.t_s, "fault", "link", problem)


def _refusal(future: asyncio.Future, what: str) -> str | None:
    """None if the device accepted the command, else one line why not."""
    if future.cancelled():
        return f"{what} cancelled"
    error = future.exception()
    if error is not None:
        return str(error)
    answer = future.result()
    if isinstance(answer, Reply) and answer.result != ReplyResult.ACCEPTED:
        return f"device refused {what}: {ReplyResult(answer.result).name}"
    return None
