"""One unattended session: reset, home, arm, swing up, catch, balance for a while, stop, disarm.

The daemon comes up in FAULT when the rig holds a latched fault (F_RESET after
its power-up, F_WATCHDOG after a host that died); nothing clears those but an
operator's reset. Starting a session is the operator's decision to take the
rig into use, so its first step is that reset, said on stderr and recorded as a
``session.reset`` event: for those two faults only. Anything else latched (the
rig's e-stop, a driver or supply fault) needs a person at the rig, and the
session refuses to start.

:func:`run_session` drives a started :class:`PoiseService` through the same
operator commands a person would send (source ``"session"``), waiting on the
rig's own clock (device time), so a lockstep simulated rig runs it in seconds
and a real rig in real time. Disturbances (``T:IMPULSE``) are horizontal
impulses in N s at the pendulum's centre of mass, T seconds after balance
begins: applied through the simulated rig's API, or, on a real rig, asked of
the operator at that moment. Each is recorded as an event at its rig time, the
time base of trips and samples, with its time after balance began; trips carry
both too.

:func:`summarise_run` reads the recorded run back from the run store and adds
the figures computed from every recorded sample (balance RMS, latency
percentiles, recorded and dropped counts).
"""

from __future__ import annotations

import asyncio
import math
import sys
from dataclasses import dataclass, field

from daemon.errors import CommandRefused, OperatorError
from daemon.recording.schema import SAMPLE_COLUMN_NAMES
from daemon.recording.store import get_run, open_for_reading, sample_chunks
from daemon.runtime.service import PoiseService
from daemon.runtime.timing import percentile
from daemon.supervisor import State

HOMING_TIMEOUT_S = 120.0
SETTLE_TIMEOUT_S = 30.0
SETTLE_POLL_S = 0.2
SWING_UP_TIMEOUT_S = 60.0
STOP_TIMEOUT_S = 10.0
WALL_TIMEOUT_FACTOR = 4.0  # a device-time wait gives up after this much more wall time (rig silent)
BALANCED = "balanced"
SESSION_START_S = 10.0  # rig time of the first command, if the rig has not been up that long

_LATCHED = {State.FAULT, State.ESTOP, State.DISCONNECTED}
#: What a session resets as its first step: the rig's power-up flag and the watchdog trip a
#: previous host left behind.
TAKE_INTO_USE_FAULTS = frozenset({"device.reset", "device.watchdog"})
_COL = {name: index for index, name in enumerate(SAMPLE_COLUMN_NAMES)}


@dataclass(frozen=True)
class Disturbance:
    after_balance_s: float
    impulse_ns: float


def parse_disturbance(text: str) -> Disturbance:
    """``T:IMPULSE`` (seconds after balance begins : newton-seconds); OperatorError if malformed."""
    parts = text.split(":")
    try:
        if len(parts) != 2:
            raise ValueError
        at_s, impulse = float(parts[0]), float(parts[1])
    except ValueError:
        raise OperatorError(
            f"--disturb {text!r}: expected T:IMPULSE, e.g. 2.5:0.02 (seconds after balance "
            "begins : newton-seconds)"
        ) from None
    if not (math.isfinite(at_s) and at_s >= 0.0 and math.isfinite(impulse)):
        raise OperatorError(f"--disturb {text!r}: T must be >= 0 and IMPULSE finite")
    return Disturbance(at_s, impulse)


@dataclass
class SessionResult:
    outcome: str
    detail: str = ""
    run_id: int | None = None
    swing_up_s: float | None = None
    balance_s: float = 0.0
    samples: int = 0  # answered, each with one Drive frame
    unanswered: int = 0  # overtaken in their read by a newer one: recorded, not answered
    trips: list[dict] = field(default_factory=list)
    loop: dict = field(default_factory=dict)  # the daemon's loop lag and read gaps at the end


class _Stopped(Exception):
    """The session cannot go on; ``outcome`` and ``detail`` say why."""

    def __init__(self, outcome: str, detail: str):
        super().__init__(detail)
        self.outcome = outcome
        self.detail = detail


async def run_session(
    service: PoiseService, duration_s: float, disturbances: list[Disturbance]
) -> SessionResult:
    """Run one session on a started service; the run is recorded and ended here."""
    cycle = service.cycle
    trips_before = len(service.trips)
    result = SessionResult(outcome=BALANCED)
    prompts: list[asyncio.Task] = []
    result.run_id = service.start_recording("poise session")
    samples_before, missed_before = cycle.samples, cycle.missed
    t_balance: float | None = None
    try:
        take_rig_into_use(service)
        # Begin at a set time of the rig's clock: a seeded simulated rig (whose noise depends on
        # the seed and its clock only) then gives the same run every time, however long the
        # daemon's start took by the wall clock. A rig up for longer starts on its next second.
        start_s = max(SESSION_START_S, math.floor(cycle.t_s) + 1.0)
        await _first(cycle.waiters.wait_until(start_s), None, start_s - cycle.t_s, "start")
        await _command(service, "home")
        await _wait_state(service, {State.IDLE} | _LATCHED, HOMING_TIMEOUT_S, "homing")
        if not service.supervisor.machine.homed:
            raise _Stopped("homing_failed", "homing did not finish")
        await _command(service, "arm")
        await swing_up_when_still(service)
        t_swing = cycle.t_s
        state = await _wait_state(
            service, {State.BALANCE, State.IDLE} | _LATCHED, SWING_UP_TIMEOUT_S, "swing-up"
        )
        if state is not State.BALANCE:
            raise _Stopped("no_catch", f"swing-up ended in {state.name} without a catch")
        t_balance = cycle.t_s
        result.swing_up_s = _span_s(t_swing, t_balance)
        prompts = [_disturb(service, t_balance, d) for d in disturbances]
        left = cycle.waiters.wait_for_state(set(State) - {State.BALANCE})
        end = cycle.waiters.wait_until(t_balance + duration_s)
        await _first(left, end, duration_s, "balance")
        result.balance_s = _span_s(t_balance, cycle.t_s)
        if left.done():
            state = left.result()
            outcome = "fell" if state in (State.STOPPING, State.SWING_UP) else state.name.lower()
            raise _Stopped(outcome, f"balance ended after {result.balance_s:.2f} s in {state.name}")
        await _command(service, "stop")
        await _wait_state(service, {State.IDLE} | _LATCHED, STOP_TIMEOUT_S, "stop")
    except _Stopped as stopped:
        result.outcome = stopped.outcome
        result.detail = stopped.detail
        await service.stop_motion("session")
    finally:
        for prompt in prompts:
            prompt.cancel()
    if service.supervisor.machine.state is State.READY:
        await _command(service, "disarm")
    result.trips = [
        {"reason": name, "t_s": t_s, "after_balance_s": _after(t_balance, t_s)}
        for name, t_s, _seq in service.trips[trips_before:]
    ]
    if result.trips and result.outcome == BALANCED:
        result.outcome = "tripped"
    result.samples = cycle.samples - samples_before
    result.unanswered = cycle.missed - missed_before
    result.loop = service.loop_status(service.timing_digest())
    service.end_recording(result.outcome, {
        "outcome": result.outcome, "detail": result.detail, "swing_up_s": result.swing_up_s,
        "balance_s": result.balance_s, "samples": result.samples, "trips": result.trips,
    })
    return result


def take_rig_into_use(service: PoiseService) -> None:
    """The session's first operator step: reset what the rig holds from its power-up or a previous
    host, said on stderr and recorded; refused if anything else is latched."""
    machine = service.supervisor.machine
    if machine.state not in (State.FAULT, State.ESTOP):
        return
    names = [fault.name for fault in machine.faults]
    if machine.state is State.ESTOP or not set(names) <= TAKE_INTO_USE_FAULTS:
        raise _Stopped(
            "refused", f"the rig has {', '.join(names)} latched: make it safe, then `poise reset`"
        )
    print(
        f"poise session: operator step: reset ({', '.join(names)} held by the rig from its "
        "power-up or a previous host)", file=sys.stderr, flush=True,
    )
    service.record_event("session.reset", "session", {"faults": names})
    try:
        service.execute("reset", {}, "session")
    except CommandRefused as refused:
        raise _Stopped("refused", f"reset refused: {refused.reason}") from None


def _disturb(service: PoiseService, t_balance: float, disturbance: Disturbance) -> asyncio.Task:
    """Schedule one disturbance: an impulse on the simulated rig, or a prompt to the operator.

    Either way it is recorded as an event at its rig time (the time base of trips and samples),
    with its time after balance began.
    """
    at_s = t_balance + disturbance.after_balance_s
    data = {"t_s": at_s, "after_balance_s": disturbance.after_balance_s,
            "impulse_ns": disturbance.impulse_ns}
    rig = service.rig
    if rig is not None:
        rig.schedule_impulse(rig.sim_time_s + disturbance.after_balance_s,
                             pendulum_ns=disturbance.impulse_ns)
        service.record_event("disturbance.scheduled", "session", data)

    async def prompt() -> None:
        await service.cycle.waiters.wait_until(at_s)
        if rig is None:
            print(
                f"poise session: disturb now: a tap on the pendulum of about "
                f"{disturbance.impulse_ns:g} N s (rig time {at_s:.3f} s)",
                file=sys.stderr, flush=True,
            )
            service.record_event("disturbance.requested", "session", data)

    return asyncio.create_task(prompt(), name="poise-disturbance")


def _after(t_balance: float | None, t_s: float) -> float | None:
    return None if t_balance is None else _span_s(t_balance, t_s)


def _span_s(start_s: float, end_s: float) -> float:
    """Rig time from ``start_s`` to ``end_s``, to the microsecond the rig counts in."""
    return round(end_s - start_s, 6)


async def _command(service: PoiseService, command: str) -> None:
    try:
        service.execute(command, {}, "session")
    except CommandRefused as refused:
        raise _Stopped("refused", f"{command} refused: {refused.reason}") from None


async def swing_up_when_still(service: PoiseService) -> None:
    """Send swing_up once the pre-arm checks pass (the hold loop damps the swing homing left)."""
    cycle = service.cycle
    deadline = cycle.t_s + SETTLE_TIMEOUT_S
    while True:
        try:
            service.execute("swing_up", {}, "session")
            return
        except CommandRefused as refused:
            retryable = "pendulum.hanging_still" in refused.reason or "link.rate" in refused.reason
            if cycle.t_s >= deadline or not retryable:
                raise _Stopped("refused", f"swing_up refused: {refused.reason}") from None
        await _first(cycle.waiters.wait_until(cycle.t_s + SETTLE_POLL_S), None, SETTLE_POLL_S, "settling")


async def _wait_state(
    service: PoiseService, states: set[State], device_timeout_s: float, what: str
) -> State:
    cycle = service.cycle
    reached = cycle.waiters.wait_for_state(states)
    deadline = cycle.waiters.wait_until(cycle.t_s + device_timeout_s)
    await _first(reached, deadline, device_timeout_s, what)
    if not reached.done():
        raise _Stopped("timeout", f"{what} took longer than {device_timeout_s:g} s of rig time")
    return reached.result()


async def _first(
    a: asyncio.Future, b: asyncio.Future | None, device_timeout_s: float, what: str
) -> None:
    """Wait for either future; give up if the rig's clock stops (no telemetry at all)."""
    waiting = {a} if b is None else {a, b}
    done, _ = await asyncio.wait(
        waiting, timeout=WALL_TIMEOUT_FACTOR * device_timeout_s + 5.0,
        return_when=asyncio.FIRST_COMPLETED,
    )
    if not done:
        raise _Stopped("link_lost", f"{what}: the rig sent no telemetry")


def summarise_run(db_path: str, result: SessionResult) -> dict:
    """The session summary: the session's own figures plus those computed from the recorded run."""
    conn = open_for_reading(db_path)
    try:
        run = get_run(conn, result.run_id, db_path)
        theta_sq = x_sq = 0.0
        balance_samples = 0
        max_abs_x = 0.0
        latencies: list[float] = []
        balance_code = int(State.BALANCE)
        for chunk in sample_chunks(conn, run):
            for row in chunk:
                latency_us = row[_COL["latency_us"]]
                if latency_us is not None:  # None: a sample overtaken in its read, not answered
                    latencies.append(latency_us)
                if row[_COL["mode"]] == balance_code:
                    theta, x = row[_COL["theta_rad"]], row[_COL["x_m"]]
                    theta_sq += theta * theta
                    x_sq += x * x
                    max_abs_x = max(max_abs_x, abs(x))
                    balance_samples += 1
    finally:
        conn.close()
    latencies.sort()
    rms = (lambda total: math.sqrt(total / balance_samples)) if balance_samples else (lambda _: None)
    theta_rms = rms(theta_sq)
    return {
        "outcome": result.outcome,
        "detail": result.detail,
        "swing_up_s": result.swing_up_s,
        "balance_s": result.balance_s,
        "balance_rms_angle_deg": None if theta_rms is None else math.degrees(theta_rms),
        "balance_rms_x_m": rms(x_sq),
        "max_abs_x_m": max_abs_x,
        "samples": result.samples,
        "samples_unanswered": result.unanswered,
        "samples_recorded": run.samples_written,
        "dropped_samples": run.samples_dropped,
        "trips": result.trips,
        "latency_us": {
            "p50": percentile(latencies, 0.5) if latencies else None,
            "p99": percentile(latencies, 0.99) if latencies else None,
            "max": latencies[-1] if latencies else None,
        },
        "loop": {
            "lag_ms_p99": result.loop.get("lag_ms_p99"),
            "lag_ms_max": result.loop.get("lag_ms_max"),
            "lag_ms_worst": result.loop.get("lag_ms_worst"),
            "read_gap_ms_worst": result.loop.get("read_gap_ms_worst"),
        },
        "run_id": result.run_id,
        "recording": db_path,
    }
