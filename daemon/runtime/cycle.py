"""The control cycle: one synchronous reader callback on the port's raw file descriptor.

Per telemetry frame, with no awaits and no queue hops (what it allocates is
floats and small tuples: the frames, the state, the sample row, the clock
readings), in one method, :meth:`ControlCycle.on_readable`::

    os.read -> decode -> estimate -> active mode's controller -> interlocks -> encode Drive -> os.write

then the sample row goes to the recorder's queue (``put_sample``, never blocks).
The rig's clock paces the loop: every Telemetry is answered by exactly one
Drive. If several Telemetry frames arrive in one read (the host was late),
only the newest is answered and the others are counted in ``missed`` (the
estimator still steps through them, so its rates stay right); the cycle never
bursts to catch up.

Timing: ``t0`` is taken as soon as ``os.read`` returns, ``t_write`` right
after ``os.write``; their difference is the read->write latency, recorded
with the sample and fed to the loop-overrun interlock. The clock is also read
between stages, and the seven readings of each sample go into
:class:`TimingRings` as one tuple (stage costs are their differences,
computed when status asks). A rig in lockstep (status bit ST_LOCKSTEP) waits for
each answer before it samples again, so host latency cannot hurt it there and
the overrun interlock is not fed.

Modes: the supervisor's state picks the controller. Catch, fall and the end of
homing are decided from this sample's measurement before any controller runs,
so one sample's command always comes from one controller. Whenever the state
changes (here, or through an operator command between samples) :meth:`sync`
resets the newly active controller from the last measured state and last
drive (bumpless transfer), arms or stops the device, and switches automatic
garbage collection off while the drive may move (gc.freeze() at start-up keeps
the collections that remain cheap).

Interlocks have the last word: :meth:`Supervisor.on_sample` runs after the
controller on the raw measurements; if it latches a fault the command sent in
this very frame is zero (drive off) or the stop ramp's (controlled stop).
"""

from __future__ import annotations

import asyncio
import gc
import heapq
import math
import os
import time
from collections.abc import Callable

from daemon.control.cart_loops import CartHold, CartVelocityFollower
from daemon.control.excitation import Excitation
from daemon.control.homing import Homing, HomingPhase
from daemon.control.rig_setup import ControlSet
from daemon.link.link import Link
from daemon.runtime.timing import RING_MASK, TimingRings
from daemon.supervisor import Action, Event, LinkErrorMonitor, Output, State, Supervisor, Trip
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
_OFF = Output.OFF
_LOCKSTEP = ST_LOCKSTEP
_clock_ns = time.monotonic_ns
_read = os.read
_write = os.write

Measured = tuple[float, float, float, float]


class ControlCycle:
    """Everything that happens once per telemetry frame, and the mode switches between frames.

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
        "_mode_code",
        "_next_wake_s",
        "_on_link_lost",
        "_on_message",
        "_on_telemetry_resumed",
        "_on_trip",
        "_output",
        "_overrun_budget_ns",
        "_period_us",
        "_prev_applied",
        "_seen_corrupt",
        "_seen_gaps",
        "_seen_resyncs",
        "_stamps",
        "_state",
        "_state_waiters",
        "_stats",
        "_time_waiters",
        "_waiter_order",
        "controls",
        "device_armed",
        "excitation",
        "excite_start_s",
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
        "machine",
        "measured",
        "missed",
        "monitor",
        "on_state_change",
        "put_sample",
        "supervisor",
        "t_s",
        "telemetry_flowing",
        "timing",
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
        self.machine = supervisor.machine
        self.controls = controls
        self.homing = homing
        self.hold = CartHold(controls.params)
        self.follower = CartVelocityFollower(
            controls.params, FOLLOWER_ACCEL_FACTOR * config.stop.decel_mps2, FOLLOWER_TIME_CONSTANT_S
        )
        self.excitation: Excitation | None = None
        self.excite_start_s = 0.0
        self.monitor = LinkErrorMonitor(config)
        self.put_sample = put_sample
        self._on_trip = on_trip
        self._on_link_lost = on_link_lost
        self._on_telemetry_resumed = on_telemetry_resumed
        self.limit = config.drive.limit
        self._overrun_budget_ns = round(self.monitor.limits.overrun_budget_us * 1000.0)  # int: compared with ints
        self.link: Link | None = None
        self.fd = -1
        self.timing = TimingRings()
        # Per-sample state, readable by status and the watchdog.
        self.missed = 0
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
        self._state = self.machine.state
        self._output = self.machine.output
        self._mode_code = int(self._state)
        self._seen_gaps = 0
        self._seen_corrupt = 0
        self._seen_resyncs = 0
        self._state_waiters: list[tuple[frozenset[State], asyncio.Future[State]]] = []
        self._time_waiters: list[tuple[float, int, asyncio.Future[float]]] = []
        self._next_wake_s = math.inf
        self._waiter_order = 0
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

    # ------------------------------------------------------------------ the hot path

    def on_readable(self) -> None:
        """The hot path: read, decode, answer the newest telemetry sample with one Drive frame.

        Written for speed, as it runs every sample: one method from read to record, the
        telemetry unpacked once, each attribute read once, the balance case dispatched inline,
        the objects it calls one attribute away, the stage timings kept as one tuple of clock
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
        messages = self._decoder.feed(data)
        t1 = _clock_ns()
        tm = None
        for message in messages:
            if message.__class__ is Telemetry:
                if tm is not None:
                    self._skip(tm)
                tm = message
            else:
                self._on_message(message)
        if tm is None:
            return

        (seq, t_us, cart_counts, pendulum_counts, switches, faults, status, applied,
         _motor_current_a, supply_v, _late_commands) = tm
        if t_us < self._last_t_us:  # the device restarted its clock (reset): keep time monotonic
            self._epoch_us += self._last_t_us + self._period_us
        self._last_t_us = t_us
        self.t_s = t_s = (t_us + self._epoch_us) * 1e-6
        self.last_telemetry = tm
        self.last_rx_ns = t0
        if not self.telemetry_flowing:
            self.telemetry_flowing = True
            self._on_telemetry_resumed()
        x, v, th, w = measured = self._estimator.update(cart_counts, pendulum_counts, self._prev_applied)
        self._prev_applied = applied
        self.measured = measured
        t2 = _clock_ns()

        m = self.machine
        output = m.output
        if output is _CONTROL:
            state = m.state
            # The common case, inline: balancing and not fallen (CatchWindow.has_fallen, inline).
            if state is _BALANCE and abs(th) <= self._fall_angle_rad:
                balance = self._balance
                balance.set_point_m = m.setpoint_m
                drive = balance.update(x, v, th, w)
            else:
                drive = self._control(state, t_s, x, v, th, w, switches)
        elif output is _RAMP:
            drive = self.follower.update(m.ramp.velocity_setpoint(t_s), x, v, th, w)
        else:
            drive = 0.0
        requested = drive
        t3 = _clock_ns()

        trip = self.supervisor.on_sample(
            t_s, x, v, th, w, drive, switches, faults & self.fault_mask, supply_v
        )
        stats = self._stats
        # Every corrupt chunk also counts as a resync (LinkStats; protocol/vectors.json checks it).
        if stats.gaps != self._seen_gaps or stats.resyncs != self._seen_resyncs:
            self._link_errors_counted(t_s, stats)
        if m.state is not self._state or m.output is not self._output:
            self.sync()
            if m.output is _OFF:
                drive = 0.0
            elif m.output is _RAMP:
                drive = self.follower.update(m.ramp.velocity_setpoint(t_s), x, v, th, w)
        if not abs(drive) < self.limit:  # clamp; a NaN from a controller becomes 0
            limit = self.limit
            drive = limit if drive >= limit else -limit if drive <= -limit else 0.0
        t4 = _clock_ns()

        timing = self.timing
        answered = timing.count
        frame = encode_drive(answered & 0xFFFF, drive, seq)
        t5 = _clock_ns()
        try:
            _write(self.fd, frame)
        except BlockingIOError:
            self.link.tx_bytes_dropped += len(frame)
        except OSError as exc:
            self._on_link_lost(f"writing the rig port failed: {exc.strerror or exc}")
            return
        t_write = _clock_ns()
        size = len(frame)
        stats.frames_tx += 1
        stats.bytes_tx += size
        stats.tx_frames.append((t_write, frame[:-1], size - 1))
        self.last_drive = drive

        self._stamps[answered & RING_MASK] = (t0, t1, t2, t3, t4, t5, t_write)
        timing.count = answered + 1
        latency_ns = t_write - t0
        self.put_sample((
            seq, t_us, t0, cart_counts, pendulum_counts, switches, faults,
            x, v, th, w, requested, drive, self._mode_code, latency_ns * 1e-3,
            m.setpoint_m, applied,
        ))
        if trip is not None:
            self._on_trip(trip, t_s)
        if latency_ns > self._overrun_budget_ns and not status & _LOCKSTEP:
            overrun = self.monitor.note_cycle(t_s, latency_ns * 1e-3)
            if overrun is not None:
                self.supervisor.trip(overrun, t_s)
                self._on_trip(overrun, t_s)
                self.sync()
        if t_s >= self._next_wake_s:
            self._wake_time_waiters(t_s)

    def _skip(self, tm: Telemetry) -> None:
        """An older sample overtaken by a newer one in the same read: estimate through it, no answer.

        The estimator's rates assume one sample period per update, so skipping its update would
        scale the velocity estimates of the answered sample by the number of periods missed.
        """
        self.missed += 1
        self._estimator.update(tm.cart_counts, tm.pendulum_counts, self._prev_applied)
        self._prev_applied = tm.drive_applied

    def _link_errors_counted(self, t_s: float, stats: LinkStats) -> None:
        """Feed new sequence gaps and corrupt frames to the link-error interlock."""
        self._seen_resyncs = stats.resyncs
        gaps = stats.gaps
        corrupt = stats.crc_failures + stats.cobs_errors + stats.runts
        if gaps != self._seen_gaps or corrupt != self._seen_corrupt:
            self._seen_gaps = gaps
            self._seen_corrupt = corrupt
            rate_trip = self.monitor.note_counters(t_s, gaps, corrupt)
            if rate_trip is not None:
                self.supervisor.trip(rate_trip, t_s)
                self._on_trip(rate_trip, t_s)

    def _control(
        self, state: State, t_s: float, x: float, v: float, th: float, w: float, switches: int
    ) -> float:
        """The active mode's command for this sample (catch/fall/homing-end decided first)."""
        if state is _BALANCE:
            if self.controls.window.has_fallen(th):
                self.supervisor.notify(
                    Event.FALL, "control", t_s, cause=f"pendulum at {math.degrees(th):+.1f} deg"
                )
                self.sync()
                return self.follower.update(self.machine.ramp.velocity_setpoint(t_s), x, v, th, w)
            balance = self.controls.balance
            balance.set_point_m = self.machine.setpoint_m
            return balance.update(x, v, th, w)
        if state is _SWING_UP:
            if self.controls.window.can_catch(th, w):
                self.supervisor.notify(
                    Event.CAUGHT, "control", t_s,
                    cause=f"pendulum at {math.degrees(th):+.1f} deg, {math.degrees(w):+.0f} deg/s",
                )
                self.sync()
                return self.controls.balance.update(x, v, th, w)
            return self.controls.swing_up.update(x, v, th, w)
        if state is _READY:
            hold = self.hold
            hold.set_point_m = self.machine.setpoint_m
            return hold.update(x, v, th, w)
        if state is _HOMING:
            return self._home(t_s, v, th, w, switches)
        if state is _EXCITE:
            return self._excite(t_s, x, v, th, w)
        return 0.0

    def _home(self, t_s: float, v: float, th: float, w: float, switches: int) -> float:
        homing = self.homing
        estimator = self.controls.estimator
        drive = homing.update(estimator.scaling.raw_x_m(), v, th, w, switches)
        if homing.phase is HomingPhase.DONE:
            estimator.scaling.set_centre_at(homing.centre_raw_m)
            tm = self.last_telemetry
            self.measured = estimator.reset(tm.cart_counts, tm.pendulum_counts, v, w)
            self.supervisor.notify(Event.HOMING_DONE, "control", t_s, cause=homing.message)
            self.sync()
            return 0.0
        if homing.phase is HomingPhase.FAILED:
            self.supervisor.notify(Event.HOMING_FAILED, "control", t_s, cause=homing.message)
            self.sync()
            return 0.0
        return drive

    def _excite(self, t_s: float, x: float, v: float, th: float, w: float) -> float:
        excitation = self.excitation
        elapsed_s = t_s - self.excite_start_s
        if excitation is None or excitation.done(elapsed_s):
            self.supervisor.notify(Event.EXCITE_DONE, "control", t_s, cause="excitation finished")
            self.sync()
            return self.hold.update(x, v, th, w)
        self.hold.set_point_m = self.machine.setpoint_m
        return self.hold.update(x, v, th, w) + excitation.value(elapsed_s)

    # ------------------------------------------------------------------ between samples

    def sync(self) -> None:
        """Act on a change of supervisor state or output: reset controllers, arm or stop the device."""
        m = self.machine
        new_state, old_state = m.state, self._state
        self._output = m.output
        if new_state is not old_state:
            self._state = new_state
            self._mode_code = int(new_state)
            self._enter(new_state)
            if new_state in MOTION_STATES and old_state not in MOTION_STATES:
                gc.disable()
            elif new_state not in MOTION_STATES and old_state in MOTION_STATES:
                gc.enable()
            if self.on_state_change is not None:
                self.on_state_change(old_state, new_state)
            self._wake_state_waiters(new_state)
        self._command_device(m.output is not _OFF)

    def _enter(self, state: State) -> None:
        measured, last = self.measured, self.last_drive
        controls = self.controls
        if state is _HOMING:
            self.homing.start(controls.estimator.scaling.raw_x_m())
        elif state is _SWING_UP:
            controls.swing_up.reset(measured, last)
        elif state is _BALANCE:
            controls.balance.reset(measured, last)
        elif state is _EXCITE:
            args = self.machine.excite_args
            self.excitation = Excitation(
                str(args["kind"]), float(args["amplitude"]), float(args["duration_s"])
            )
            self.excite_start_s = self.t_s

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
            trip = Trip("device.arm_refused", Action.DRIVE_OFF, problem, {})
            self.supervisor.trip(trip, self.t_s)
            self._on_trip(trip, self.t_s)
            self.sync()

    def _stop_answered(self, future: asyncio.Future) -> None:
        problem = _refusal(future, "Stop")
        if problem is not None:
            self.supervisor.machine.record(self.t_s, "fault", "link", problem)

    # ------------------------------------------------------------------ waiting for the rig

    def wait_for_state(self, states: set[State]) -> asyncio.Future[State]:
        """A future that completes with the state once the supervisor enters one of ``states``."""
        future: asyncio.Future[State] = asyncio.get_running_loop().create_future()
        if self.machine.state in states:
            future.set_result(self.machine.state)
        else:
            self._state_waiters.append((frozenset(states), future))
        return future

    def wait_until(self, t_s: float) -> asyncio.Future[float]:
        """A future that completes at the first sample at or after device time ``t_s``."""
        future: asyncio.Future[float] = asyncio.get_running_loop().create_future()
        self._waiter_order += 1
        heapq.heappush(self._time_waiters, (t_s, self._waiter_order, future))
        self._next_wake_s = self._time_waiters[0][0]
        return future

    def _wake_state_waiters(self, state: State) -> None:
        keep = []
        for states, future in self._state_waiters:
            if future.done():
                continue
            if state in states:
                future.set_result(state)
            else:
                keep.append((states, future))
        self._state_waiters = keep

    def _wake_time_waiters(self, t_s: float) -> None:
        waiters = self._time_waiters
        while waiters and waiters[0][0] <= t_s:
            _, _, future = heapq.heappop(waiters)
            if not future.done():
                future.set_result(t_s)
        self._next_wake_s = waiters[0][0] if waiters else math.inf


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
